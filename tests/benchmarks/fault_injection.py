"""Kill ``gapwatch run`` workers with SIGKILL at random moments while they look; count what broke.

Scenario (invented): a contact centre's desks, each comparison one desk pair's call handling
times on one shared events table that a feed appends to all the time. Several real
``python -m monitor run`` workers share one store (SQLite, and PostgreSQL when a server is
given). At random moments (uniform in ``--gap``) one worker, picked at random among those past
their start-up (``--min-age``), is killed with SIGKILL — no clean-up of any kind runs, so some kills land inside a look's store transaction —
and a new worker is started in its place. Afterwards every recorded look is checked against the
store and the source:

* **partial looks**: a comparison whose row does not stand at its newest look (look count,
  watermark) or whose running cells do not add up to that look's counts;
* **reused numbers**: a look number recorded twice for one comparison version, or skipped;
* **wrong counts**: a look whose n per group differs from the source rows up to its cutoff;
* **double looks**: two looks of one comparison less than half an interval apart;
* **looks per schedule**: looks recorded over the looks the schedule implies in the run
  (comparisons × seconds / every); above 1 means extra looks, below means looks lost to the
  kills and restarts.

Run:
    python tests/benchmarks/fault_injection.py                       # SQLite, 3 workers, 60 kills
    python tests/benchmarks/fault_injection.py --pg URL --kills 150  # SQLite and PostgreSQL
(``GAPWATCH_TEST_PG_URL`` is used when ``--pg`` is not given.)
"""

from __future__ import annotations

import argparse
import bisect
import os
import random
import signal
import sqlite3
import subprocess
import sys
import tempfile
import threading
import time
import uuid
from datetime import datetime, timedelta, timezone
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

import sqlalchemy as sa  # noqa: E402

from monitor.store.engine import upgrade  # noqa: E402
from monitor.store.models import Cell, Comparison, Look  # noqa: E402

UTC = timezone.utc


def _source(path: Path, rng: random.Random) -> str:
    with sqlite3.connect(path) as conn:
        conn.execute("PRAGMA journal_mode=WAL")
        conn.execute("CREATE TABLE calls (id INTEGER PRIMARY KEY, site TEXT, seconds REAL, done_at TEXT)")
        conn.execute("CREATE INDEX ix_calls_done_at ON calls (done_at)")
        past = (datetime.now(UTC) - timedelta(seconds=30)).replace(tzinfo=None).isoformat(sep=" ")
        conn.executemany("INSERT INTO calls (site, seconds, done_at) VALUES (?, ?, ?)",
                         [(site, rng.gauss(300.0, 30.0), past) for _ in range(20) for site in ("east", "west")])
    return f"sqlite:///{path}"


class _Feed(threading.Thread):
    """Appends a few calls per site every quarter second, timed a little ahead so none is late."""

    def __init__(self, path: Path, rng: random.Random):
        super().__init__(daemon=True)
        self.path, self.rng, self.stop = path, rng, threading.Event()

    def run(self):
        conn = sqlite3.connect(self.path, timeout=30)
        try:
            while not self.stop.wait(0.25):
                when = (datetime.now(UTC) + timedelta(seconds=0.3)).replace(tzinfo=None).isoformat(sep=" ")
                conn.executemany("INSERT INTO calls (site, seconds, done_at) VALUES (?, ?, ?)",
                                 [(s, self.rng.gauss(300.0, 30.0), when) for _ in range(3) for s in ("east", "west")])
                conn.commit()
        finally:
            conn.close()


def _config(folder: Path, source_url: str, store_url: str, comparisons: int, every: float) -> Path:
    parts = [f'[store]\nurl = "{store_url}"\n', f'[sources.ops]\nurl = "{source_url}"\n',
             '[service]\nlease_seconds = 10\n']
    for k in range(comparisons):
        parts.append(f'[[comparison]]\nname = "desk-{k:02d}"\nsource = "ops"\ntable = "calls"\n'
                     'group_column = "site"\ngroups = ["east", "west"]\nvalue_column = "seconds"\n'
                     'time_column = "done_at"\nmethod = "welch"\nplanned_per_group = 1000000\n'
                     f'every = "{every:g}s"\nlateness = "0s"\n')
    path = folder / "gapwatch.toml"
    path.write_text("\n".join(parts))
    return path


def _worker(config: Path, log) -> subprocess.Popen:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.Popen([sys.executable, "-m", "monitor", "run", "--config", str(config)],
                            stdout=log, stderr=subprocess.STDOUT, env=env, cwd=str(config.parent))


def _audit(store_url: str, source_path: Path, every: float, start, end) -> dict:
    engine = sa.create_engine(store_url)
    try:
        with engine.connect() as conn:
            comparisons = conn.execute(sa.select(Comparison.id, Comparison.looks_taken, Comparison.watermark)).all()
            looks = conn.execute(sa.select(Look.comparison_id, Look.look_number, Look.as_of, Look.cutoff,
                                           Look.n1, Look.n2).order_by(Look.comparison_id, Look.look_number)).all()
            totals = dict(conn.execute(sa.select(Cell.comparison_id, sa.func.sum(Cell.n))
                                       .where(Cell.kind == "total").group_by(Cell.comparison_id)).all())
    finally:
        engine.dispose()
    with sqlite3.connect(source_path) as conn:
        times = {site: sorted(datetime.fromisoformat(t).replace(tzinfo=UTC)
                              for (t,) in conn.execute("SELECT done_at FROM calls WHERE site = ?", (site,)))
                 for site in ("east", "west")}
    by_comparison: dict = {}
    for lk in looks:
        by_comparison.setdefault(lk.comparison_id, []).append(lk)
    partial = reused = wrong = double = 0
    for c in comparisons:
        mine = by_comparison.get(c.id, [])
        numbers = [lk.look_number for lk in mine]
        duplicated = len(numbers) - len(set(numbers))
        skipped = max(numbers) - len(set(numbers)) if numbers else 0
        reused += duplicated + skipped
        newest = mine[-1] if mine else None
        if newest is not None:
            stands = (c.looks_taken == newest.look_number
                      and (c.watermark or {}).get("cutoff", "")[:19] == newest.cutoff.isoformat()[:19]
                      and totals.get(c.id, 0) == newest.n1 + newest.n2)
            partial += not stands
        for lk in mine:
            cutoff = lk.cutoff.replace(tzinfo=UTC)
            wrong += (lk.n1, lk.n2) != (bisect.bisect_right(times["east"], cutoff),
                                        bisect.bisect_right(times["west"], cutoff))
        double += sum(1 for a, b in zip(mine, mine[1:]) if (b.as_of - a.as_of).total_seconds() < every / 2)
    in_run = sum(1 for lk in looks if start <= lk.as_of.replace(tzinfo=UTC) < end)
    implied = len(comparisons) * (end - start).total_seconds() / every
    return {"looks": len(looks), "partial": partial, "reused": reused, "wrong": wrong, "double": double,
            "per_schedule": in_run / implied if implied else float("nan")}


def run_one(kind: str, store_url: str, args, folder: Path) -> dict:
    rng = random.Random(args.seed)
    source_path = folder / "ops.sqlite"
    source_url = _source(source_path, rng)
    upgrade(store_url)
    config = _config(folder, source_url, store_url, args.comparisons, args.every)
    log = open(folder / "workers.log", "ab")
    feed = _Feed(source_path, rng)
    feed.start()
    workers = [_worker(config, log) for _ in range(args.workers)]
    born = [time.monotonic()] * len(workers)
    deadline = time.monotonic() + 180
    while (folder / "workers.log").read_bytes().count(b"service started") < len(workers):
        if time.monotonic() > deadline:
            raise SystemExit(f"workers did not start; see {folder / 'workers.log'}")
        time.sleep(0.2)
    time.sleep(args.warmup)
    start = datetime.now(UTC)
    kills = 0
    try:
        while kills < args.kills:
            time.sleep(rng.uniform(*args.gap))
            # Only a worker past its start-up is killed: it is then busy with looks, not imports.
            grown = [i for i, b in enumerate(born) if time.monotonic() - b >= args.min_age]
            if not grown:
                continue
            i = rng.choice(grown)
            workers[i].send_signal(signal.SIGKILL)
            workers[i].wait()
            kills += 1
            workers[i], born[i] = _worker(config, log), time.monotonic()
        time.sleep(args.settle)
        end = datetime.now(UTC)
    finally:
        for w in workers:
            w.send_signal(signal.SIGTERM)
        codes = [w.wait(timeout=60) for w in workers]
        feed.stop.set()
        feed.join()
        log.close()
    found = _audit(store_url, source_path, args.every, start, end)
    found.update(kind=kind, kills=kills, seconds=(end - start).total_seconds(),
                 clean_stops=sum(c == 0 for c in codes))
    return found


def _pg_database(server: str):
    name = f"gw_fault_{uuid.uuid4().hex[:10]}"
    admin = sa.create_engine(server, isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(sa.text(f'CREATE DATABASE "{name}"'))
    url = sa.engine.make_url(server).set(database=name).render_as_string(hide_password=False)

    def drop():
        with admin.connect() as conn:
            conn.execute(sa.text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()

    return url, drop


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--workers", type=int, default=3)
    parser.add_argument("--comparisons", type=int, default=10)
    parser.add_argument("--every", type=float, default=1.0, help="seconds between looks of one comparison")
    parser.add_argument("--kills", type=int, default=60, help="SIGKILLs per store")
    parser.add_argument("--gap", type=float, nargs=2, default=(0.5, 3.0), metavar=("LOW", "HIGH"),
                        help="seconds between kills, uniform (default 0.5 3)")
    parser.add_argument("--min-age", type=float, default=12.0,
                        help="seconds a worker runs (start-up included) before it may be killed")
    parser.add_argument("--warmup", type=float, default=3.0, help="seconds after every worker started")
    parser.add_argument("--settle", type=float, default=5.0, help="seconds of running after the last kill")
    parser.add_argument("--pg", default=os.environ.get("GAPWATCH_TEST_PG_URL"), metavar="URL",
                        help="a PostgreSQL server for a store there too")
    parser.add_argument("--seed", type=int, default=2026)
    parser.add_argument("--keep", metavar="FOLDER", help="work in FOLDER and keep it (logs, store, source)")
    args = parser.parse_args(argv)

    results = []
    with tempfile.TemporaryDirectory() as scratch:
        tmp = args.keep or scratch
        folder = Path(tmp) / "sqlite"
        folder.mkdir(parents=True)
        results.append(run_one("SQLite", f"sqlite:///{folder / 'store.sqlite'}", args, folder))
        if args.pg:
            folder = Path(tmp) / "postgresql"
            folder.mkdir()
            url, drop = _pg_database(args.pg)
            try:
                results.append(run_one("PostgreSQL", url, args, folder))
            finally:
                drop()
    print(f"{args.workers} workers, {args.comparisons} comparisons every {args.every:g} s, "
          f"kills {args.gap[0]:g}-{args.gap[1]:g} s apart")
    header = ("store", "kills", "seconds", "looks", "partial", "reused", "wrong counts", "double", "looks/schedule")
    print("  ".join(f"{h:>14}" for h in header))
    for r in results:
        print("  ".join(f"{v:>14}" for v in (r["kind"], r["kills"], f"{r['seconds']:.0f}", r["looks"], r["partial"],
                                              r["reused"], r["wrong"], r["double"], f"{r['per_schedule']:.2f}")))
    bad = any(r["partial"] or r["reused"] or r["wrong"] or r["double"] for r in results)
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
