"""How many comparisons do `gapwatch run` workers keep on schedule?

Scenario (invented): a fulfilment network with many pick lines; each comparison watches one
line's two shifts (``filters = [["line", "=", k]]`` on one shared events table) on a one-minute
schedule, with a feed inserting events for random lines all the time. Every worker is a real
``python -m monitor run`` process on the same configuration and store.

Reported per run, over the measured minutes after a warm-up:

* looks per minute recorded against the schedule's (comparisons per minute);
* lag: for each comparison the longest gap between its looks beyond the one-minute interval —
  the slowest comparison's, and the median comparison's;
* double looks: two looks of one comparison less than half an interval apart (must be 0);
* each worker's CPU seconds per minute and peak memory (the kernel's accounting of the finished
  process, ``wait4``).

Run (SQLite store and source, one worker):
    python tests/benchmarks/scale_workers.py --comparisons 1000 --minutes 3
PostgreSQL store and source, 1, 2 and 4 workers:
    python tests/benchmarks/scale_workers.py --comparisons 1000 --minutes 3 --pg URL --workers 1 2 4
"""

from __future__ import annotations

import argparse
import os
import random
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


def _looks(store_url, since, until):
    engine = sa.create_engine(store_url)
    try:
        with engine.connect() as conn:
            rows = conn.execute(sa.text(
                "SELECT c.name, l.as_of FROM look l JOIN comparison c ON c.id = l.comparison_id "
                "ORDER BY c.name, l.as_of")).all()
    finally:
        engine.dispose()
    by_name = {}
    for name, as_of in rows:
        if isinstance(as_of, str):
            as_of = datetime.fromisoformat(as_of)
        if as_of.tzinfo is None:
            as_of = as_of.replace(tzinfo=UTC)
        by_name.setdefault(name, []).append(as_of)
    return by_name


def run_case(label, comparisons, minutes, workers, source_url, store_url, folder, warmup=60.0, feed_rate=40):
    source_engine, table = _create_source(source_url, comparisons)
    upgrade(store_url)
    config = _config(folder, comparisons, source_url, store_url)
    feed = Feed(source_engine, table, comparisons, feed_rate)
    feed.start()
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    procs = [subprocess.Popen([sys.executable, "-m", "monitor", "run", "--config", str(config)],
                              stdout=open(folder / f"worker{i}.log", "wb"), stderr=subprocess.STDOUT,
                              env=env, cwd=folder) for i in range(workers)]
    time.sleep(warmup)
    since = datetime.now(UTC)
    time.sleep(minutes * 60.0)
    until = datetime.now(UTC)
    usage = []
    for p in procs:
        p.send_signal(signal.SIGTERM)
    for p in procs:
        _, status, rusage = os.wait4(p.pid, 0)
        usage.append(rusage)
    feed.stop.set()
    feed.join()
    source_engine.dispose()

    looks = _looks(store_url, since, until)
    in_window = {n: [t for t in ts if since <= t <= until] for n, ts in looks.items()}
    recorded = sum(len(ts) for ts in in_window.values())
    scheduled = comparisons * minutes
    lags, doubles = [], 0
    for name in (f"line-{k:04d}" for k in range(comparisons)):
        ts = [since] + in_window.get(name, []) + [until]
        gaps = [(b - a).total_seconds() for a, b in zip(ts, ts[1:])]
        lags.append(max(0.0, max(gaps) - 60.0))
        doubles += sum(1 for a, b in zip(in_window.get(name, []), in_window.get(name, [])[1:])
                       if (b - a).total_seconds() < 30.0)
    cpu = [(u.ru_utime + u.ru_stime) / ((until - since).total_seconds() / 60.0 + warmup / 60.0) for u in usage]
    peak = [u.ru_maxrss / 1024.0 for u in usage]
    print(f"{label:28} {workers:7d} {recorded / minutes:12.0f} {scheduled / minutes:10.0f} "
          f"{recorded / scheduled:7.2f} {max(lags):10.1f} {statistics.median(lags):10.1f} {doubles:7d} "
          f"{statistics.mean(cpu):10.1f} {max(peak):9.0f}")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--comparisons", type=int, default=1000)
    ap.add_argument("--minutes", type=float, default=3.0)
    ap.add_argument("--workers", type=int, nargs="+", default=[1])
    ap.add_argument("--pg", default=None, help="a PostgreSQL server URL (a database is made per case)")
    args = ap.parse_args(argv)
    print(f"{'case':28} {'workers':>7} {'looks/min':>12} {'scheduled':>10} {'ratio':>7} "
          f"{'max lag s':>10} {'med lag s':>10} {'doubles':>7} {'cpu s/min':>10} {'peak MB':>9}")
    with tempfile.TemporaryDirectory(prefix="gapwatch-scale-") as tmp:
        folder = Path(tmp)
        if args.pg is None:
            for w in args.workers:
                case = folder / f"sqlite-{w}"
                case.mkdir()
                run_case("SQLite source + store", args.comparisons, args.minutes, w,
                         f"sqlite:///{case / 'ops.sqlite'}", f"sqlite:///{case / 'store.sqlite'}", case)
        else:
            admin = sa.create_engine(args.pg, isolation_level="AUTOCOMMIT")
            for w in args.workers:
                case = folder / f"pg-{w}"
                case.mkdir()
                name = f"gw_scale_{w}_{os.getpid()}"
                with admin.connect() as conn:
                    conn.execute(sa.text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
                    conn.execute(sa.text(f'CREATE DATABASE "{name}"'))
                url = sa.engine.make_url(args.pg).set(database=name).render_as_string(hide_password=False)
                try:
                    run_case("PostgreSQL source + store", args.comparisons, args.minutes, w, url, url, case)
                finally:
                    with admin.connect() as conn:
                        conn.execute(sa.text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
            admin.dispose()


if __name__ == "__main__":
    main()
