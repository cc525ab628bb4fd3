# Sourced by tests/run.sh after its PostgreSQL start-up: a throwaway MariaDB server for the
# MySQL/MariaDB source tests. Installs Debian's mariadb-server when missing, starts it on a free
# loopback port with a temporary data folder (a user `gapwatch` with no password, reachable from
# 127.0.0.1 only), exports GAPWATCH_TEST_MYSQL_URL, and stops it and removes the folder on exit.

mariadb_dir=""
mariadb_pid=""

stop_mariadb() {
  if [ -n "$mariadb_pid" ]; then
    kill "$mariadb_pid" 2>/dev/null || true
    wait "$mariadb_pid" 2>/dev/null || true
  fi
  [ -n "$mariadb_dir" ] && rm -rf "$mariadb_dir"
  mariadb_pid=""
  mariadb_dir=""
}

start_mariadb() {
  if [ ! -x /usr/sbin/mariadbd ] || ! command -v mariadb-install-db >/dev/null; then
    log "installing system packages: mariadb-server"
    local sudo_cmd=""
    [ "$(id -u)" = 0 ] || sudo_cmd="sudo"
    $sudo_cmd apt-get update -qq
    DEBIAN_FRONTEND=noninteractive $sudo_cmd apt-get install -y -qq mariadb-server >/dev/null
  fi
  mariadb_dir=$(mktemp -d -t gapwatch-mariadb.XXXXXX)
  local port user
  port=$(.venv/bin/python -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1", 0)); print(s.getsockname()[1])')
  user=$(id -un)
  mariadb-install-db --no-defaults --datadir="$mariadb_dir/data" --user="$user" --skip-test-db \
    >"$mariadb_dir/install.log" 2>&1 || { cat "$mariadb_dir/install.log"; return 1; }
  printf "%s\n" "CREATE USER IF NOT EXISTS 'gapwatch'@'127.0.0.1';" \
    "GRANT ALL PRIVILEGES ON *.* TO 'gapwatch'@'127.0.0.1';" >"$mariadb_dir/init.sql"
  log "starting MariaDB on 127.0.0.1:$port"
  /usr/sbin/mariadbd --no-defaults --user="$user" --datadir="$mariadb_dir/data" \
    --socket="$mariadb_dir/mysqld.sock" --pid-file="$mariadb_dir/mysqld.pid" --log-error="$mariadb_dir/error.log" \
    --port="$port" --bind-address=127.0.0.1 --skip-name-resolve --skip-log-bin --init-file="$mariadb_dir/init.sql" \
    --innodb-buffer-pool-size=64M --innodb-flush-log-at-trx-commit=0 --max-connections=200 >/dev/null 2>&1 &
  mariadb_pid=$!
  local tries=0
  until .venv/bin/python -c "import pymysql; pymysql.connect(host='127.0.0.1', port=$port, user='gapwatch').close()" 2>/dev/null; do
    tries=$((tries + 1))
    if [ "$tries" -gt 60 ] || ! kill -0 "$mariadb_pid" 2>/dev/null; then
      cat "$mariadb_dir/error.log"
      return 1
    fi
    sleep 0.5
  done
  export GAPWATCH_TEST_MYSQL_URL="mysql+pymysql://gapwatch@127.0.0.1:$port/"
}
