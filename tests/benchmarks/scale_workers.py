"""How many comparisons do `gapwatch run` workers keep on schedule?

Scenario (invented): a fulfilment network with many pick lines; each comparison watches one
line's two shifts (``filters = [["line", "=", k]]`` on one shared events table) on a one-minute
schedule, with a feed inserting events for random lines all the time. Every worker is a real
``python -m monitor run`` process on the same configuration and store.

Reported per run, over the measured minutes after a warm-up:

* checks per minute (a look recorded, or a quiet check when a line had no new event since its
  last look: both are ticks kept) against the schedule's (comparisons per minute), counted from
  the workers' one log line per check;
* lag: for each comparison the longest gap between its checks (the window's edges included)
  beyond the one-minute interval — the slowest comparison's, and the median comparison's;
* double looks: two checks of one comparison less than half an interval apart (must be 0);
* each worker's CPU seconds per measured minute (``/proc``) and peak memory (the kernel's
  accounting of the finished process, ``wait4``); the core count and the load average.

Run (SQLite store and source, one worker; PostgreSQL store and source, 1, 2 and 4 workers):
    nice -n 5 python tests/benchmarks/scale_workers.py --store sqlite postgresql --workers 1
    nice -n 5 python tests/benchmarks/scale_workers.py --store postgresql --workers 2 4 --pg URL
(``--pg`` defaults to ``$GAPWATCH_TEST_PG_URL``; ``--keep DIR`` keeps the worker logs.)
"""

from __future__ import annotations

import argparse
import os
import random
import re
import signal
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from datetime import datetime, timedelta, timezone
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

import sqlalchemy as sa  # noqa: E402

from monitor.store.engine import upgrade  # noqa: E402

UTC = timezone.utc


def _config(folder: Path, comparisons: int, source_url: str, store_url: str) -> Path:
    parts = [f'[store]\nurl = "{store_url}"\n\n[sources.ops]\nurl = "{source_url}"\n',
             '[channels.quiet]\ntype = "log"\nlevel = "debug"\n']
    for k in range(comparisons):
        parts.append(
            f'[[comparison]]\nname = "line-{k:04d}"\nsource = "ops"\ntable = "events"\n'
            'group_column = "shift"\ngroups = ["early", "late"]\nvalue_column = "seconds"\n'
            'time_column = "done_at"\nmethod = "welch"\nplanned_per_group = 1000000\nevery = "1m"\n'
            f'filters = [["line", "=", {k}]]\n')
    path = folder / "gapwatch.toml"
    path.write_text("\n".join(parts))
    return path


def _create_source(url: str, comparisons: int):
    engine = sa.create_engine(url)
    meta = sa.MetaData()
    table = sa.Table("events", meta, sa.Column("id", sa.Integer, primary_key=True),
                     sa.Column("line", sa.Integer, index=True), sa.Column("shift", sa.String(10)),
                     sa.Column("seconds", sa.Float), sa.Column("done_at", sa.DateTime(timezone=True), index=True))
    meta.drop_all(engine)
    meta.create_all(engine)
    start = datetime.now(UTC) - timedelta(hours=2)
    rng = random.Random(1)
    rows = [{"line": k, "shift": rng.choice(["early", "late"]), "seconds": rng.gauss(60, 8),
             "done_at": start + timedelta(seconds=rng.uniform(0, 7000))}
            for k in range(comparisons) for _ in range(20)]
    with engine.begin() as conn:
        conn.execute(table.insert(), rows)
    return engine, table


class Feed(threading.Thread):
    """Inserts ``rate`` events a second for random lines until stopped."""

    def __init__(self, engine, table, comparisons, rate):
        super().__init__(daemon=True)
        self.engine, self.table, self.comparisons, self.rate = engine, table, comparisons, rate
        self.stop = threading.Event()

    def run(self):
        rng = random.Random(2)
        while not self.stop.wait(1.0):
            now = datetime.now(UTC)
            rows = [{"line": rng.randrange(self.comparisons), "shift": rng.choice(["early", "late"]),
                     "seconds": rng.gauss(60, 8), "done_at": now} for _ in range(self.rate)]
            with self.engine.begin() as conn:
                conn.execute(self.table.insert(), rows)


_CHECK_LINE = re.compile(r" look (?:quiet )?comparison=(\S+) .*?as_of=(\S+)")


def _checks(folder: Path, workers: int):
    """Every check the workers logged (a look recorded, or a quiet check): {name: [as_of, ...]}.

    A quiet check (nothing new in the source since the comparison's last look) writes no look
    row, so the look table alone would count a line without new events as a missed tick.
    """
    by_name: dict = {}
    looks = 0
    for i in range(workers):
        for line in (folder / f"worker{i}.log").read_text(errors="replace").splitlines():
            found = _CHECK_LINE.search(line)
            if found is None:
                continue
            looks += " look quiet " not in line
            as_of = datetime.fromisoformat(found.group(2))
            by_name.setdefault(found.group(1), []).append(as_of if as_of.tzinfo else as_of.replace(tzinfo=UTC))
    return {n: sorted(ts) for n, ts in by_name.items()}


def _cpu_seconds(pid: int) -> float:
    """User + system CPU seconds of process ``pid`` so far (Linux ``/proc``)."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def run_case(label, comparisons, minutes, workers, source_url, store_url, folder, warmup, feed_rate, nice):
    source_engine, table = _create_source(source_url, comparisons)
    upgrade(store_url)
    config = _config(folder, comparisons, source_url, store_url)
    feed = Feed(source_engine, table, comparisons, feed_rate)
    feed.start()
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    command = [sys.executable, "-m", "monitor", "run", "--config", str(config)]
    if nice:
        command = ["nice", "-n", str(nice)] + command
    procs = [subprocess.Popen(command, stdout=open(folder / f"worker{i}.log", "wb"), stderr=subprocess.STDOUT,
                              env=env, cwd=folder) for i in range(workers)]
    time.sleep(warmup)
    since = datetime.now(UTC)
    cpu_before = [_cpu_seconds(p.pid) for p in procs]
    load_before = os.getloadavg()[0]
    time.sleep(minutes * 60.0)
    until = datetime.now(UTC)
    cpu = [(_cpu_seconds(p.pid) - b) / minutes for p, b in zip(procs, cpu_before)]
    load = (load_before + os.getloadavg()[0]) / 2.0
    peak = []
    for p in procs:
        p.send_signal(signal.SIGTERM)
    for p in procs:
        _, status, rusage = os.wait4(p.pid, 0)
        peak.append(rusage.ru_maxrss / 1024.0)  # kilobytes on Linux
    feed.stop.set()
    feed.join()
    source_engine.dispose()

    checks = _checks(folder, workers)
    window = {n: [t for t in ts if since <= t <= until] for n, ts in checks.items()}
    made = sum(len(ts) for ts in window.values())
    scheduled = comparisons * minutes
    lags, doubles = [], 0
    for name in (f"line-{k:04d}" for k in range(comparisons)):
        seen = window.get(name, [])
        ts = [since] + seen + [until]
        gaps = [(b - a).total_seconds() for a, b in zip(ts, ts[1:])]
        lags.append(max(0.0, max(gaps) - 60.0))
        doubles += sum(1 for a, b in zip(seen, seen[1:]) if (b - a).total_seconds() < 30.0)
    print(f"{label:26} {workers:7d} {scheduled / minutes:9.0f} {made / minutes:9.0f} "
          f"{made / scheduled:6.2f} {max(lags):9.1f} {statistics.median(lags):9.1f} {doubles:7d} "
          f"{statistics.mean(cpu):9.1f} {statistics.mean(cpu) / 60.0:6.0%} {max(peak):8.0f} {load:6.1f}",
          flush=True)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--comparisons", type=int, default=1000)
    ap.add_argument("--minutes", type=float, default=4.0, help="measured minutes after the warm-up")
    ap.add_argument("--warmup", type=float, default=90.0,
                    help="seconds before measuring (start-up and the first look of every comparison)")
    ap.add_argument("--workers", type=int, nargs="+", default=[1])
    ap.add_argument("--store", choices=["sqlite", "postgresql"], nargs="+", default=["sqlite"],
                    help="SQLite source and store, or PostgreSQL source and store (default sqlite)")
    ap.add_argument("--pg", default=os.environ.get("GAPWATCH_TEST_PG_URL"), metavar="URL",
                    help="a PostgreSQL server URL; a database is made per case (default $GAPWATCH_TEST_PG_URL)")
    ap.add_argument("--feed-rate", type=int, default=40, help="events inserted per second")
    ap.add_argument("--nice", type=int, default=0, help="run the workers under nice -n N")
    ap.add_argument("--keep", type=Path, default=None, help="keep the cases' folders (worker logs) here")
    args = ap.parse_args(argv)
    if "postgresql" in args.store and not args.pg:
        ap.error("--store postgresql needs --pg URL (or GAPWATCH_TEST_PG_URL)")
    print(f"{os.cpu_count()} cores; {args.comparisons} comparisons every 1 min; feed {args.feed_rate} events/s; "
          f"{args.warmup:.0f} s warm-up, {args.minutes:g} min measured; workers under nice {os.nice(0) + args.nice}")
    print(f"{'case':26} {'workers':>7} {'sched/min':>9} {'done/min':>9} {'ratio':>6} {'max lag s':>9} "
          f"{'med lag s':>9} {'doubles':>7} {'cpu s/min':>9} {'cpu':>6} {'peak MB':>8} {'load':>6}", flush=True)
    with tempfile.TemporaryDirectory(prefix="gapwatch-scale-") as tmp:
        folder = args.keep or Path(tmp)
        folder.mkdir(parents=True, exist_ok=True)
        for store in args.store:
            for w in args.workers:
                case = folder / f"{store}-{w}"
                case.mkdir(exist_ok=True)
                common = (args.comparisons, args.minutes, w)
                options = dict(folder=case, warmup=args.warmup, feed_rate=args.feed_rate, nice=args.nice)
                if store == "sqlite":
                    for stale in ("ops.sqlite", "store.sqlite"):
                        (case / stale).unlink(missing_ok=True)
                    run_case("SQLite source + store", *common, f"sqlite:///{case / 'ops.sqlite'}",
                             f"sqlite:///{case / 'store.sqlite'}", **options)
                    continue
                admin = sa.create_engine(args.pg, isolation_level="AUTOCOMMIT")
                name = f"gw_scale_{w}_{os.getpid()}"
                with admin.connect() as conn:
                    conn.execute(sa.text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
                    conn.execute(sa.text(f'CREATE DATABASE "{name}"'))
                url = sa.engine.make_url(args.pg).set(database=name).render_as_string(hide_password=False)
                try:
                    run_case("PostgreSQL source + store", *common, url, url, **options)
                finally:
                    with admin.connect() as conn:
                        conn.execute(sa.text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
                    admin.dispose()


if __name__ == "__main__":
    main()
