"""What the first look of a comparison costs on a big events table, against the bare grouped aggregate.

The first look reads the whole table once. The least any tool must do for that is one grouped
aggregate: per group, the count, sum and sum of squares of the value over every row up to the
cutoff. This script builds the events table of ``bench_look.py`` (default 10 million rows;
integer primary key, group, value, event time as ISO text in SQLite, and again as real epoch
seconds in a second SQLite table (``sqlite-num``), ``timestamptz`` in PostgreSQL, an index on
the time) and measures, alternating so the page cache treats them alike,
``--repeats`` times each:

bare       the bare grouped aggregate over the same rows (one statement, ``GROUP BY`` group);
slotted    the same aggregate also grouped by 15-minute slot of the event time, in one statement
           (what any incremental tool must keep to roll days, weeks and shifts later), written
           as cheaply as we know: whole epoch seconds divided as integers in SQLite,
           ``date_bin`` in PostgreSQL (14 and later): the floor for a one-statement read;
single     (SQLite) ``Source.read_cells`` from nothing as one statement, the sweep turned off;
read       ``Source.read_cells`` from nothing (the first look's source read: per group, slot and
           bad-row reason, shifted sums, NULL and unreadable times counted; on SQLite the text
           range swept one slot at a time, ``monitor/source/sweep.py``);
look       ``monitor.look.take_look`` end to end on a fresh SQLite history store: the design
           frozen, the shift chosen from the first values, the read, the roll into cells, the
           statistic, the boundary, one store transaction.

It prints the medians and the ratios read/bare and look/bare; the goal is look/bare <= 1.5.

Usage::

    python tests/benchmarks/bench_first_look.py                      # 10M rows, SQLite (+ PostgreSQL)
    python tests/benchmarks/bench_first_look.py --rows 500000        # quick run
    python tests/benchmarks/bench_first_look.py --pg-url postgresql+psycopg://user@host/postgres

PostgreSQL is measured when ``--pg-url`` is given or ``GAPWATCH_TEST_PG_URL`` is set; a fresh
database is created there and dropped at the end.
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import time
import uuid
from datetime import timedelta
from pathlib import Path

import sqlalchemy as sa

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
for folder in (str(ROOT), str(HERE)):
    if folder not in sys.path:
        sys.path.insert(0, folder)

from bench_look import (  # noqa: E402  (the table and its builders are shared with bench_look.py)
    SPACING_SECONDS,
    START,
    build_postgres,
    build_sqlite,
    events_metadata,
    iso_text,
    write_config,
)

GOAL = 1.5
SLOT_SECONDS = 900


def bare_statements(pg: bool, epochs: bool = False):
    """(bare, slotted): per-group count, sum and sum of squares up to the cutoff; the second also per slot."""
    _metadata, t = events_metadata(pg, epochs=epochs)
    sums = (sa.func.count(), sa.func.sum(t.c.value), sa.func.sum(t.c.value * t.c.value))
    where = t.c.done_at <= sa.bindparam("upper")
    bare = sa.select(t.c.site, *sums).where(where).group_by(t.c.site)
    if pg:
        # Binned as timestamps: no conversion to a number on the way (cheaper than any epoch).
        slot = sa.func.date_bin(sa.text(f"'{SLOT_SECONDS} seconds'::interval"), t.c.done_at,
                                sa.text("'2000-01-01T00:00:00Z'::timestamptz"))
    else:
        # Whole epoch seconds (SQLite 3.38+) divided as integers (a bound divisor would be a
        # real, and the quotient one group per row): every time here is after 1970.
        seconds = sa.cast(t.c.done_at, sa.Integer) if epochs else sa.func.unixepoch(t.c.done_at)
        slot = seconds.op("/")(sa.literal_column(str(SLOT_SECONDS)))
    slotted = sa.select(t.c.site, slot.label("slot"), *sums).where(where).group_by(t.c.site, sa.literal_column("2"))
    return bare, slotted


def _cell_sums(batch) -> dict:
    """Per cell: count and shifted sums rounded to 9 significant digits (summation order differs)."""
    return {(c.group_index, c.slot, c.key): (c.n, float(f"{c.sum_dev:.9g}"), float(f"{c.sum_dev2:.9g}"))
            for c in batch.cells}


def timed_rows(engine, statement, upper):
    began = time.perf_counter()
    with engine.connect() as conn:
        rows = conn.execute(statement, {"upper": upper}).all()
    return time.perf_counter() - began, rows


def measure(label: str, url: str, pg: bool, rows: int, repeats: int, folder: Path, build: float,
            epochs: bool = False) -> dict:
    from monitor.config import load_config
    from monitor.design import Design
    from monitor.look import LookMemory, take_look
    from monitor.source.dialects import SQLiteDialect
    from monitor.source.reader import Source, SourceSpec
    from monitor.store.engine import make_engine, upgrade

    cutoff = START + timedelta(seconds=rows * SPACING_SECONDS)
    upper = (cutoff if pg else cutoff.timestamp() if epochs
             else iso_text(__import__("numpy").array([cutoff.timestamp()]))[0])
    engine = sa.create_engine(url)
    bare, slotted = bare_statements(pg, epochs)
    times = {"bare": [], "slotted": [], "read": [], "look": []}
    if not pg:
        times["single"] = []
    parts = []
    counts = set()
    for repeat in range(repeats):
        seconds, result = timed_rows(engine, bare, upper)
        times["bare"].append(seconds)
        counts.add(sum(r[1] for r in result))
        seconds, result = timed_rows(engine, slotted, upper)
        times["slotted"].append(seconds)
        counts.add(sum(r[2] for r in result))

        store_path = folder / f"store-{label}-{repeat}.sqlite"
        store_path.unlink(missing_ok=True)  # a first look needs an empty history
        store_url = f"sqlite:///{store_path}"
        upgrade(store_url)
        config = load_config(write_config(folder, url, store_url, planned=4 * rows))
        comparison = config.comparisons[0]
        spec = SourceSpec.from_design(Design.from_config(comparison), shift=100.0,
                                      arrival_column=comparison.arrival_column)
        source = Source(url, name="ops")
        began = time.perf_counter()
        batch = source.read_cells(spec, None, cutoff)
        times["read"].append(time.perf_counter() - began)
        counts.add(batch.new_events)
        source.dispose()
        if not pg:
            SQLiteDialect.sweeps_first_reads = False
            try:
                source = Source(url, name="ops")
                began = time.perf_counter()
                single = source.read_cells(spec, None, cutoff)
                times["single"].append(time.perf_counter() - began)
                source.dispose()
            finally:
                SQLiteDialect.sweeps_first_reads = True
            if _cell_sums(single) != _cell_sums(batch) or single.excluded != batch.excluded:
                raise SystemExit(f"{label}: the swept read and the one statement read differ")

        store = make_engine(store_url)
        source = Source(url, name="ops")
        began = time.perf_counter()
        record = take_look(config, comparison, as_of=cutoff, engine=store, source=source, memory=LookMemory())
        times["look"].append(time.perf_counter() - began)
        assert record is not None, "the first look recorded nothing"
        counts.add(record.new_events)
        timings = dict(record.detail.get("timings_ms", {}))
        timings["write+rest"] = times["look"][-1] * 1000.0 - sum(timings.values())
        parts.append(timings)
        source.dispose()
        store.dispose()
        print(f"  {label} repeat {repeat + 1}: " + ", ".join(f"{k} {v[-1]:.2f} s" for k, v in times.items()),
              flush=True)
    engine.dispose()
    if counts != {rows}:
        raise SystemExit(f"{label}: the measurements read different row counts: {sorted(counts)}")
    result = {k: statistics.median(v) for k, v in times.items()}
    result.update(label=label, rows=rows, build=build,
                  parts={k: statistics.median(p.get(k, 0.0) for p in parts) for k in parts[0]})
    return result


def report(results, repeats):
    print()
    print(f"first look against the bare grouped aggregate over the same rows (medians of {repeats}; "
          f"{os.cpu_count()} cores, load average {os.getloadavg()[0]:.1f})")
    header = (f"{'source':<11}{'rows':>12}{'build s':>9}{'bare s':>9}{'slotted s':>10}{'single s':>9}{'read s':>9}"
              f"{'look s':>9}{'slotted/bare':>13}{'read/bare':>10}{'look/bare':>10}  goal look/bare <= {GOAL}")
    print(header)
    print("-" * len(header))
    for r in results:
        ratio = r["look"] / r["bare"]
        single = f"{r['single']:>9.2f}" if "single" in r else f"{'-':>9}"
        print(f"{r['label']:<11}{r['rows']:>12,}{r['build']:>9.1f}{r['bare']:>9.2f}{r['slotted']:>10.2f}{single}"
              f"{r['read']:>9.2f}{r['look']:>9.2f}{r['slotted'] / r['bare']:>13.2f}{r['read'] / r['bare']:>10.2f}"
              f"{ratio:>10.2f}  {'met' if ratio <= GOAL else 'missed'}")
    for r in results:
        print(f"{r['label']}: look breakdown (median ms): " + ", ".join(f"{k} {v:.0f}" for k, v in r["parts"].items()))


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=10_000_000)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--dir", type=Path, default=None, help="folder for the SQLite files (default: temporary)")
    parser.add_argument("--pg-url", default=os.environ.get("GAPWATCH_TEST_PG_URL"),
                        help="PostgreSQL server URL; a fresh database is created there (default $GAPWATCH_TEST_PG_URL)")
    parser.add_argument("--skip-sqlite", action="store_true")
    parser.add_argument("--skip-postgres", action="store_true")
    args = parser.parse_args(argv)
    results = []
    with tempfile.TemporaryDirectory(prefix="bench-first-look-") as tmp:
        folder = args.dir or Path(tmp)
        folder.mkdir(parents=True, exist_ok=True)
        if not args.skip_sqlite:
            path = folder / "first-look-events.sqlite"
            if path.exists() and path.stat().st_size > 0 and args.dir is not None:
                build = 0.0  # reuse a table built by an earlier run in --dir
            else:
                path.unlink(missing_ok=True)
                print(f"building SQLite table of {args.rows:,} rows …", flush=True)
                build = build_sqlite(path, args.rows)
            results.append(measure("sqlite", f"sqlite:///{path}", False, args.rows, args.repeats, folder, build))
            path = folder / "first-look-epochs.sqlite"
            if path.exists() and path.stat().st_size > 0 and args.dir is not None:
                build = 0.0
            else:
                path.unlink(missing_ok=True)
                print(f"building SQLite table of {args.rows:,} rows, times as epoch seconds …", flush=True)
                build = build_sqlite(path, args.rows, epochs=True)
            results.append(measure("sqlite-num", f"sqlite:///{path}", False, args.rows, args.repeats, folder, build,
                                   epochs=True))
        if args.pg_url and not args.skip_postgres:
            server = sa.engine.make_url(args.pg_url)
            name = f"gw_first_{uuid.uuid4().hex[:8]}"
            admin = sa.create_engine(server, isolation_level="AUTOCOMMIT")
            with admin.connect() as conn:
                conn.execute(sa.text(f'CREATE DATABASE "{name}"'))
            url = server.set(database=name).render_as_string(hide_password=False)
            try:
                print(f"building PostgreSQL table of {args.rows:,} rows …", flush=True)
                build = build_postgres(url, args.rows)
                results.append(measure("postgresql", url, True, args.rows, args.repeats, folder, build))
            finally:
                with admin.connect() as conn:
                    conn.execute(sa.text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
                admin.dispose()
    report(results, args.repeats)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
