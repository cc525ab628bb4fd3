#!/usr/bin/env bash
# Installs everything the test suite needs on a fresh Debian machine and runs it:
# system packages (PostgreSQL, Chromium), a virtual environment with gapwatch and
# its test extra, a throwaway PostgreSQL cluster on 127.0.0.1, then pytest.
# Extra arguments go to pytest (e.g. `bash tests/run.sh tests/test_fixed.py -q`).
set -euo pipefail
cd "$(dirname "$0")/.."
root=$(pwd)

log() { printf '[tests/run.sh] %s\n' "$*"; }

# 1. System packages.
pg_bin() { ls -d /usr/lib/postgresql/*/bin 2>/dev/null | sort -V | tail -n 1; }
missing=()
[ -n "$(pg_bin)" ] && [ -x "$(pg_bin)/initdb" ] || missing+=(postgresql)
[ -x /usr/bin/chromium ] || missing+=(chromium)
# pdftoppm and pdfinfo check the printed review's pages.
[ -x /usr/bin/pdftoppm ] || missing+=(poppler-utils)
if [ ${#missing[@]} -gt 0 ]; then
  log "installing system packages: ${missing[*]}"
  sudo_cmd=""
  [ "$(id -u)" = 0 ] || sudo_cmd="sudo"
  $sudo_cmd apt-get update -qq
  DEBIAN_FRONTEND=noninteractive $sudo_cmd apt-get install -y -qq "${missing[@]}" >/dev/null
fi
PGBIN=$(pg_bin)

# 2. Virtual environment with the package and its test extra.
if [ ! -x .venv/bin/python ]; then
  log "creating .venv"
  python3 -m venv .venv
fi
.venv/bin/python -m pip install -q --upgrade pip >/dev/null
log "installing gapwatch with its test extra"
.venv/bin/python -m pip install -q -e ".[test]"

# 3. A throwaway PostgreSQL cluster on a free loopback port.
pgdir=$(mktemp -d -t gapwatch-pg.XXXXXX)
port=$(.venv/bin/python -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1", 0)); print(s.getsockname()[1])')
run_pg() {
  if [ "$(id -u)" = 0 ]; then
    chown -R postgres "$pgdir"
    su postgres -s /bin/sh -c "$*"
  else
    sh -c "$*"
  fi
}
cleanup() {
  run_pg "'$PGBIN/pg_ctl' -D '$pgdir/data' -m immediate stop" >/dev/null 2>&1 || true
  rm -rf "$pgdir"
}
trap cleanup EXIT
log "starting PostgreSQL on 127.0.0.1:$port"
run_pg "'$PGBIN/initdb' -D '$pgdir/data' -A trust -U postgres" >"$pgdir/initdb.log" 2>&1 || { cat "$pgdir/initdb.log"; exit 1; }
run_pg "'$PGBIN/pg_ctl' -D '$pgdir/data' -w -l '$pgdir/server.log' -o \"-p $port -k '$pgdir' -c listen_addresses=127.0.0.1 -c fsync=off -c max_connections=200\" start" >/dev/null
export GAPWATCH_TEST_PG_URL="postgresql+psycopg://postgres@127.0.0.1:$port/postgres"

# 3b. A throwaway MariaDB server (MySQL/MariaDB sources), stopped with PostgreSQL on exit.
. tests/mariadb.sh
trap 'stop_mariadb; cleanup' EXIT
start_mariadb

# 4. The suite. Exit status 5 (no test collected) counts as a failure.
export GAPWATCH_CHROMIUM=/usr/bin/chromium
set +e
.venv/bin/python -m pytest "$@"
status=$?
set -e
if [ "$status" = 5 ]; then
  log "no test ran: failing"
  exit 1
fi
exit "$status"
