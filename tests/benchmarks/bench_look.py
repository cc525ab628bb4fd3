"""How much one incremental look costs on a big events table, against the bare SQL and a reload.

Builds an events table (default 10 million rows: integer primary key, group,
value, ISO-text time in SQLite / timestamptz in PostgreSQL, an index on the
time column), then, in the same run and alternating so caches treat them
alike, measures:

(a) bare      the bare SQL aggregate over the 1,000 newest rows: per-group
              count, sum and sum of squares over a time range, one statement;
(b) look      one incremental look after appending 1,000 new events:
              ``monitor.look.take_look`` end to end (source read + statistics +
              one store transaction on a SQLite history store); the source
              read alone (``Source.read_cells``) is reported beside it;
(b') cold      the same look with its cells read back from the store (the boundary
              still kept in the process), reported below the table;
(b'') fresh    the same look in a process that kept nothing (a restarted worker, or
              another worker looked in between): cells read back and the boundary
              resumed from the recorded testing looks, reported below the table;
(c) naive     the naive approach: load the whole table with
              ``pandas.read_sql`` and run ``scipy.stats.ttest_ind``.

Each is repeated; the table shows medians, and the ratios look/bare and
naive/look. Targets: look <= 3 x bare + 10 ms, and naive/look >= 100.

Usage::

    python tests/benchmarks/bench_look.py                       # 10M rows, SQLite (+ PostgreSQL if configured)
    python tests/benchmarks/bench_look.py --rows 200000 --repeats 5
    python tests/benchmarks/bench_look.py --pg-url postgresql+psycopg://user@host/db

PostgreSQL is measured when ``--pg-url`` is given or ``GAPWATCH_TEST_PG_URL``
is set: a fresh database is created there for the run and dropped afterwards.
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import time
import uuid
from datetime import datetime, timedelta, timezone
from pathlib import Path

import numpy as np
import sqlalchemy as sa

ROOT = Path(__file__).resolve().parents[2]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

START = datetime(2025, 1, 6, tzinfo=timezone.utc)
SPACING_SECONDS = 3  # one event every 3 s: 10M rows cover about 347 days
GROUPS = ("east", "west")


def events_metadata(pg: bool, with_index: bool = True, epochs: bool = False):
    """The events table: times as ``timestamptz`` (PostgreSQL), ISO text (SQLite) or epoch seconds (SQLite, ``epochs``)."""
    metadata = sa.MetaData()
    t = sa.Table(
        "events",
        metadata,
        sa.Column("id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), primary_key=True, autoincrement=True),
        sa.Column("site", sa.Text(), nullable=False),
        sa.Column("value", sa.Float(), nullable=False),
        sa.Column("done_at", sa.DateTime(timezone=True) if pg else sa.Float() if epochs else sa.Text(), nullable=False),
    )
    if with_index:
        sa.Index("ix_events_done_at", t.c.done_at)
    return metadata, t


def iso_text(epochs: np.ndarray) -> list:
    """Epoch seconds as 'YYYY-MM-DD HH:MM:SS.ffffff' text (one layout for every row)."""
    stamps = (epochs * 1e6).astype("int64").astype("datetime64[us]")
    return [s.replace("T", " ") for s in np.datetime_as_string(stamps, unit="us")]


def event_batch(rng, first_index: int, count: int):
    index = np.arange(first_index, first_index + count)
    site = np.where(index % 2 == 0, GROUPS[0], GROUPS[1])
    # No true difference, so the comparison keeps collecting through every measured look.
    value = rng.normal(100.0, 10.0, size=count)
    epochs = START.timestamp() + index * SPACING_SECONDS + rng.uniform(0, SPACING_SECONDS, size=count)
    return site, value, epochs


def build_sqlite(path: Path, rows: int, chunk: int = 500_000, epochs: bool = False) -> float:
    """The SQLite events table of ``rows`` rows, times as ISO text or (``epochs``) real epoch seconds."""
    import sqlite3

    began = time.perf_counter()
    engine = sa.create_engine(f"sqlite:///{path}")
    # The index is built after the load: far faster than maintaining it row by row.
    events_metadata(pg=False, with_index=False, epochs=epochs)[1].create(engine)
    metadata, t = events_metadata(pg=False, epochs=epochs)
    engine.dispose()
    rng = np.random.default_rng(1)
    conn = sqlite3.connect(path)
    conn.execute("PRAGMA journal_mode = WAL")
    conn.execute("PRAGMA synchronous = OFF")
    statement = str(sa.insert(t).values(site=sa.bindparam("s"), value=sa.bindparam("v"), done_at=sa.bindparam("d"))
                    .compile(dialect=sa.dialects.sqlite.dialect(paramstyle="qmark")))
    for first in range(0, rows, chunk):
        count = min(chunk, rows - first)
        site, value, moments = event_batch(rng, first, count)
        times = moments.tolist() if epochs else iso_text(moments)
        conn.executemany(statement, zip(site.tolist(), value.tolist(), times))
        conn.commit()
    conn.close()
    engine = sa.create_engine(f"sqlite:///{path}")
    with engine.begin() as c:
        for index in t.indexes:
            index.create(c)
    engine.dispose()
    return time.perf_counter() - began


def build_postgres(url: str, rows: int) -> float:
    began = time.perf_counter()
    engine = sa.create_engine(url)
    metadata, t = events_metadata(pg=True)
    with engine.begin() as conn:
        events_metadata(pg=True, with_index=False)[1].create(conn)
        series = sa.func.generate_series(0, rows - 1).table_valued("i").render_derived(name="series")
        i = series.c.i
        noise = (sa.func.random() + sa.func.random() + sa.func.random() + sa.func.random() - 2.0) * 17.3
        conn.execute(
            sa.insert(t).from_select(
                ["site", "value", "done_at"],
                sa.select(
                    sa.case((i % 2 == 0, GROUPS[0]), else_=GROUPS[1]),
                    100.0 + noise,
                    sa.literal(START)
                    + sa.func.make_interval(0, 0, 0, 0, 0, 0, sa.cast(i, sa.Float) * SPACING_SECONDS + sa.func.random() * SPACING_SECONDS),
                ).select_from(series),
            )
        )
        for index in t.indexes:
            index.create(conn)
    with engine.connect().execution_options(isolation_level="AUTOCOMMIT") as conn:
        conn.execute(sa.text("VACUUM ANALYZE events"))
    engine.dispose()
    return time.perf_counter() - began


def append(url: str, pg: bool, rng, first_index: int, count: int):
    _metadata, t = events_metadata(pg)
    site, value, epochs = event_batch(rng, first_index, count)
    if pg:
        times = [datetime.fromtimestamp(e, tz=timezone.utc) for e in epochs]
    else:
        times = iso_text(epochs)
    engine = sa.create_engine(url)
    with engine.begin() as conn:
        conn.execute(sa.insert(t), [dict(site=s, value=v, done_at=d) for s, v, d in zip(site.tolist(), value.tolist(), times)])
    engine.dispose()
    return datetime.fromtimestamp(float(epochs.max()), tz=timezone.utc)


def bare_statement(pg: bool):
    """Per-group count, sum and sum of squares over a time range: the least any look must do."""
    _metadata, t = events_metadata(pg)
    return (
        sa.select(t.c.site, sa.func.count(), sa.func.sum(t.c.value), sa.func.sum(t.c.value * t.c.value))
        .where(t.c.done_at > sa.bindparam("since"))
        .group_by(t.c.site)
    )


def bare_aggregate(engine, statement, pg: bool, since: datetime):
    bound = since if pg else iso_text(np.array([since.timestamp()]))[0]
    began = time.perf_counter()
    with engine.connect() as conn:
        rows = conn.execute(statement, {"since": bound}).all()
    return time.perf_counter() - began, sum(r[1] for r in rows)


def naive(url: str):
    import pandas as pd
    from scipy import stats

    began = time.perf_counter()
    engine = sa.create_engine(url)
    _metadata, t = events_metadata(pg=url.startswith("postgresql"))
    with engine.connect() as conn:
        frame = pd.read_sql(sa.select(t.c.site, t.c.value), conn)
    result = stats.ttest_ind(
        frame.loc[frame["site"] == GROUPS[0], "value"], frame.loc[frame["site"] == GROUPS[1], "value"], equal_var=False
    )
    engine.dispose()
    return time.perf_counter() - began, len(frame), result.pvalue


def write_config(folder: Path, source_url: str, store_url: str, planned: int) -> Path:
    path = folder / "bench-gapwatch.toml"
    path.write_text(
        f"""
[store]
url = "{store_url}"

[sources.ops]
url = "{source_url}"

[[comparison]]
name = "bench-look"
source = "ops"
table = "events"
group_column = "site"
groups = ["east", "west"]
value_column = "value"
time_column = "done_at"
arrival_column = "id"
metric = "mean"
method = "welch"
planned_per_group = {planned}
every = "10m"
"""
    )
    return path


def measure(label: str, url: str, pg: bool, rows: int, new: int, repeats: int, naive_repeats: int, folder: Path, build_seconds: float):
    from monitor.config import load_config
    from monitor.design import Design
    from monitor.look import LookMemory, take_look
    from monitor.source.reader import Source, SourceSpec, Watermark
    from monitor.store.engine import make_engine, upgrade

    store_url = f"sqlite:///{folder / f'store-{label}.sqlite'}"
    upgrade(store_url)
    store = make_engine(store_url)
    # A plan well beyond the table: every look stays early in the design and keeps collecting.
    config = load_config(write_config(folder, url, store_url, planned=4 * rows))
    comparison = config.comparisons[0]
    source = Source(url, name="ops")
    source_engine = sa.create_engine(url)  # plain engine for the bare aggregate
    statement = bare_statement(pg)

    newest = START + timedelta(seconds=rows * SPACING_SECONDS)
    memory = LookMemory()  # what the service keeps between its looks (one per process)
    began = time.perf_counter()
    first = take_look(config, comparison, as_of=newest, engine=store, source=source, memory=memory)
    first_look = time.perf_counter() - began
    assert first is not None

    spec = SourceSpec.from_design(Design.from_config(comparison), shift=0.0,
                                  arrival_column=comparison.arrival_column)
    began = time.perf_counter()
    Source(url, name="ops").read_cells(spec, None, newest)
    first_read = time.perf_counter() - began
    rng = np.random.default_rng(7)
    index = rows
    cutoff = newest
    looks, bares, reads, parts = [], [], [], []
    bare_counts = set()
    watermark = Watermark(cutoff=newest, arrival=rows)
    for _ in range(repeats):
        latest = append(url, pg, rng, index, new)
        index += new
        as_of = latest + timedelta(seconds=1)
        # (a) bare aggregate over exactly the rows just appended
        seconds, count = bare_aggregate(source_engine, statement, pg, cutoff)
        bares.append(seconds)
        bare_counts.add(count)
        # the source read alone, on the same new rows (does not move the look's watermark)
        began = time.perf_counter()
        batch = source.read_cells(spec, watermark, as_of)
        reads.append(time.perf_counter() - began)
        # (b) the look itself
        began = time.perf_counter()
        record = take_look(config, comparison, as_of=as_of, engine=store, source=source, memory=memory)
        looks.append(time.perf_counter() - began)
        timings = dict(record.detail.get("timings_ms", {})) if record is not None else {}
        timings["write+rest"] = looks[-1] * 1000.0 - sum(timings.values())
        parts.append(timings)
        if record is None:
            raise SystemExit("the benchmark comparison stopped (a boundary was crossed); rerun with another seed")
        assert batch.new_events == new and record.new_events == new, (record.new_events, batch.new_events)
        watermark = batch.watermark
        cutoff = as_of
    # The same look when this process kept no cells from the previous one: its state is
    # read from the store (the boundary kept in memory still serves) …
    cold = []
    for _ in range(repeats):
        latest = append(url, pg, rng, index, new)
        index += new
        as_of = latest + timedelta(seconds=1)
        memory.forget(store, boundaries=False)
        began = time.perf_counter()
        record = take_look(config, comparison, as_of=as_of, engine=store, source=source, memory=memory)
        cold.append(time.perf_counter() - began)
        assert record is not None and record.new_events == new
    # … and when it kept nothing at all (a restarted worker): the boundary is resumed from
    # the recorded testing looks too.
    fresh = []
    for _ in range(repeats):
        latest = append(url, pg, rng, index, new)
        index += new
        as_of = latest + timedelta(seconds=1)
        began = time.perf_counter()
        record = take_look(config, comparison, as_of=as_of, engine=store, source=source, memory=LookMemory())
        fresh.append(time.perf_counter() - began)
        assert record is not None and record.new_events == new
    naives = []
    naive_rows = None
    for _ in range(naive_repeats):
        seconds, naive_rows, _p = naive(url)
        naives.append(seconds)
    source.dispose()
    source_engine.dispose()
    store.dispose()
    return {
        "label": label,
        "rows": rows,
        "build": build_seconds,
        "first_look": first_look,
        "bare": statistics.median(bares),
        "read": statistics.median(reads),
        "look": statistics.median(looks),
        "cold_look": statistics.median(cold),
        "fresh_look": statistics.median(fresh),
        "naive": statistics.median(naives),
        "look_parts": {k: statistics.median(p.get(k, 0.0) for p in parts) for k in parts[0]},
        "first_read": first_read,
        "bare_rows": sorted(bare_counts),
        "naive_rows": naive_rows,
    }


def report(results, new, repeats, naive_repeats):
    ms = lambda s: f"{s * 1000:9.2f}"  # noqa: E731
    print()
    print(f"medians over {repeats} looks ({new} new events each); naive reload x{naive_repeats}")
    header = f"{'source':<11}{'rows':>12}{'build s':>9}{'1st look s':>11}{'bare ms':>10}{'read ms':>10}{'look ms':>10}{'naive ms':>11}{'look/bare':>10}{'naive/look':>11}  target"
    print(header)
    print("-" * len(header))
    for r in results:
        ratio = r["look"] / r["bare"]
        speedup = r["naive"] / r["look"]
        met = r["look"] <= 3 * r["bare"] + 0.010 and speedup >= 100
        print(
            f"{r['label']:<11}{r['rows']:>12,}{r['build']:>9.1f}{r['first_look']:>11.2f}{ms(r['bare']):>10}{ms(r['read']):>10}"
            f"{ms(r['look']):>10}{ms(r['naive']):>11}{ratio:>10.2f}{speedup:>11.0f}  {'met' if met else 'MISSED'}"
        )
    print()
    for r in results:
        parts = ", ".join(f"{k} {v:.2f}" for k, v in r["look_parts"].items())
        print(f"{r['label']}: look breakdown (median ms): {parts}; first full read {r['first_read']:.2f} s")
        print(f"{r['label']}: look with its cells read back from the store (no cells kept in the process): "
              f"median {r['cold_look'] * 1000:.2f} ms")
        print(f"{r['label']}: look in a process that kept nothing (cells read back, boundary resumed "
              f"from the recorded testing looks): median {r['fresh_look'] * 1000:.2f} ms")
    print()
    print("bare  = per-group count/sum/sum of squares over the new rows, one SQL statement")
    print("read  = Source.read_cells incremental (time range + late rows by id, bad-row CASE, per-slot cells)")
    print("look  = monitor.look.take_look end to end (read + statistics + boundary + one store transaction)")
    print("naive = pandas.read_sql of the whole table + scipy.stats.ttest_ind")
    print("target: look <= 3 x bare + 10 ms and naive/look >= 100")
    load = os.getloadavg() if hasattr(os, "getloadavg") else None
    if load:
        print(f"load average at the end: {load[0]:.1f} {load[1]:.1f} {load[2]:.1f} on {os.cpu_count()} cores")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=10_000_000, help="rows in the events table (default 10,000,000)")
    parser.add_argument("--new", type=int, default=1000, help="events appended before each look (default 1000)")
    parser.add_argument("--repeats", type=int, default=9, help="looks measured (default 9)")
    parser.add_argument("--naive-repeats", type=int, default=3, help="full reloads measured (default 3)")
    parser.add_argument("--dir", type=Path, default=None, help="folder for the SQLite files (default: a temporary one)")
    parser.add_argument("--pg-url", default=os.environ.get("GAPWATCH_TEST_PG_URL"),
                        help="PostgreSQL server URL; a fresh database is created there (default $GAPWATCH_TEST_PG_URL)")
    parser.add_argument("--skip-sqlite", action="store_true")
    parser.add_argument("--skip-postgres", action="store_true")
    args = parser.parse_args(argv)
    if args.rows < 10 * args.new:
        parser.error(f"--rows must be at least ten times --new; got {args.rows} and {args.new}")
    if args.repeats < 1 or args.naive_repeats < 1:
        parser.error("--repeats and --naive-repeats must be at least 1")

    results = []
    with tempfile.TemporaryDirectory(prefix="bench-look-") as tmp:
        folder = args.dir or Path(tmp)
        folder.mkdir(parents=True, exist_ok=True)
        if not args.skip_sqlite:
            path = folder / "bench-events.sqlite"
            if path.exists():
                path.unlink()
            print(f"building SQLite table of {args.rows:,} rows …", flush=True)
            build = build_sqlite(path, args.rows)
            print(f"  built in {build:.1f} s ({path.stat().st_size / 1e6:.0f} MB)", flush=True)
            results.append(measure("sqlite", f"sqlite:///{path}", False, args.rows, args.new, args.repeats,
                                   args.naive_repeats, folder, build))
        if args.pg_url and not args.skip_postgres:
            server = sa.engine.make_url(args.pg_url)
            name = f"gw_bench_{uuid.uuid4().hex[:8]}"
            admin = sa.create_engine(server, isolation_level="AUTOCOMMIT")
            with admin.connect() as conn:
                conn.execute(sa.text(f'CREATE DATABASE "{name}"'))
            url = server.set(database=name).render_as_string(hide_password=False)
            try:
                print(f"building PostgreSQL table of {args.rows:,} rows …", flush=True)
                build = build_postgres(url, args.rows)
                print(f"  built in {build:.1f} s", flush=True)
                results.append(measure("postgresql", url, True, args.rows, args.new, args.repeats,
                                       args.naive_repeats, folder, build))
            finally:
                with admin.connect() as conn:
                    conn.execute(sa.text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
                admin.dispose()
    report(results, args.new, args.repeats, args.naive_repeats)
    for r in results:
        assert r["bare_rows"] == [args.new], r["bare_rows"]
        assert r["naive_rows"] == args.rows + 3 * args.repeats * args.new
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
