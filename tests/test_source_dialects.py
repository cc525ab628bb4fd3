"""The source on every tested database: SQLite, PostgreSQL, MariaDB/MySQL and DuckDB.

One matrix, the same on each: aggregates equal pandas at every cutoff, bad and late rows,
looks equal scipy on the raw rows, injection attempts, an unreachable source, read-only
sessions. PostgreSQL and MariaDB need the servers tests/run.sh starts; DuckDB and SQLite
are files.
"""

from __future__ import annotations

import math
import os
from datetime import timedelta
from decimal import Decimal

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa
from scipy import stats

from live_helpers import LiveWorld, at, event_rows
from monitor.verify import verify_looks
from monitor.errors import SourceSchemaError, SourceUnavailableError
from monitor.source import Source
from source_helpers import (
    DOUBLE,
    START,
    TIMESTAMP,
    backend_url,  # noqa: F401 - fixture
    backends,
    create_events_table,
    events_table,
    insert_seconds,
    make_events,
    numbering,
    seconds_table,
)
from test_source import GROUPS, as_dict, assert_cells_equal, group_summaries, reference_cells, spec_for, stored_epoch

EVERY_DATABASE = backends("sqlite", "postgresql", "mysql", "duckdb")
SERVERS_AND_FILES = backends("postgresql", "mysql", "duckdb")  # typed columns (SQLite has its own tests)
T0 = at(2, 6)


def _name(url):
    return sa.engine.make_url(url).get_backend_name()


def _count(url, table="events"):
    engine = sa.create_engine(url)
    try:
        with engine.connect() as conn:
            return conn.execute(sa.select(sa.func.count()).select_from(sa.table(table))).scalar()
    finally:
        engine.dispose()


# --------------------------------------------------------------------------- aggregates


@pytest.mark.parametrize("storage", ["timestamp", "iso", "epoch", "epoch_int"])
@pytest.mark.parametrize("backend_url", EVERY_DATABASE, indirect=True)
def test_cells_equal_pandas_at_every_cutoff(backend_url, storage):
    if storage == "timestamp" and _name(backend_url) == "sqlite":
        storage = "iso_z"  # SQLite keeps timestamps as text
    frame = make_events(1500, seed=61, keys=3, span=timedelta(hours=9))
    create_events_table(backend_url, frame, time_storage=storage, key_column="crew")
    source = Source(backend_url, name="ops")
    spec = spec_for(key_column="crew", arrival_column="id")
    final = START + timedelta(hours=9, minutes=30)
    total = {}
    since = None
    for hours in (1, 2.5, 2.5, 4, 6.25, 7 + 33 / 60 + 1 / 3600, 9.5):
        cutoff = START + timedelta(hours=hours)
        batch = source.read_cells(spec, since, cutoff)
        for k, v in as_dict(batch.cells).items():
            n, s1, s2 = total.get(k, (0, 0.0, 0.0))
            total[k] = (n + v[0], s1 + v[1], s2 + v[2])
        # Everything up to this cutoff, read in increments, equals pandas on the raw rows.
        assert_cells_equal(total, reference_cells(frame, storage, 100.0, high=cutoff, key="crew"))
        since = batch.watermark
    one_shot = source.read_cells(spec, None, final)
    t = stored_epoch(frame, storage)
    for gi, summary in enumerate(group_summaries(one_shot.cells, 100.0)):
        values = frame.loc[(frame["site"] == GROUPS[gi]) & (t <= final.timestamp()), "value"]
        assert summary.mean == pytest.approx(values.mean(), rel=1e-12)
        assert summary.variance == pytest.approx(values.var(ddof=1), rel=1e-9)
    rows = source.read_rows(spec, final)
    assert len(rows) == len(frame) and str(rows["time"].dt.tz) == "UTC"
    assert np.allclose(np.sort(rows["time"].map(pd.Timestamp.timestamp)), np.sort(t), atol=1e-6)
    assert source.check(spec) == []
    source.dispose()


def _typed_table(url):
    engine = sa.create_engine(url)
    metadata = sa.MetaData()
    ids = numbering("events_id_seq") if engine.dialect.name == "duckdb" else {}
    table = sa.Table(
        "events", metadata,
        sa.Column("id", sa.Integer, primary_key=True, autoincrement=True, **ids),
        sa.Column("site", sa.String(40)),
        sa.Column("value", DOUBLE),
        sa.Column("amount", sa.Numeric(38, 6)),
        sa.Column("done_at", TIMESTAMP),
        sa.Index("ix_events_done_at", "done_at"),
    )
    metadata.create_all(engine)
    return engine, table


@pytest.mark.parametrize("backend_url", SERVERS_AND_FILES, indirect=True)
def test_every_bad_row_reason_is_counted(backend_url):
    engine, table = _typed_table(backend_url)
    at_ = (START + timedelta(minutes=20)).replace(tzinfo=None)
    rows = [
        ("east", 4.0, Decimal("4"), at_, None),
        ("west", 6.0, Decimal("6"), at_, None),
        ("east", 1.0, Decimal("1"), None, "null_time"),
        ("north", 1.0, Decimal("1"), at_, "unknown_group"),
        (None, 1.0, Decimal("1"), at_, "unknown_group"),
        ("east", None, None, at_, "null_value"),
        ("west", -3.0, Decimal("-3"), at_, "out_of_range"),
        ("east", 900.0, Decimal("900"), at_, "out_of_range"),
        ("east", 1e300, Decimal("1e24"), at_, "too_large"),
    ]
    if _name(backend_url) != "mysql":  # MySQL stores no NaN or infinity
        rows += [("east", math.nan, Decimal("1"), at_, "not_finite"), ("west", math.inf, Decimal("1"), at_, "not_finite")]
    with engine.begin() as conn:
        conn.execute(sa.insert(table), [dict(site=s, value=v, amount=a, done_at=d) for s, v, a, d, _r in rows])
    engine.dispose()
    source = Source(backend_url)
    cutoff = START + timedelta(hours=1)
    value_spec = spec_for(value_column="value", valid_range=(0.0, 500.0), shift=0.0, arrival_column="id")
    expected = {}
    for *_rest, reason in rows:
        if reason:
            expected[reason] = expected.get(reason, 0) + 1
    batch = source.read_cells(value_spec, None, cutoff)
    assert batch.excluded == expected
    assert sorted((c.group_index, c.n, c.sum_dev) for c in batch.cells) == [(0, 1, 4.0), (1, 1, 6.0)]
    assert source.read_rows(value_spec, cutoff).attrs["excluded"] == expected
    # A decimal column: 1e24 is only out of range, its NaN/infinity rows are plain 1s.
    amount = source.read_cells(spec_for(value_column="amount", valid_range=(0.0, 500.0), shift=0.0), None, cutoff)
    assert amount.excluded["out_of_range"] == 3 and "too_large" not in amount.excluded
    rate = source.read_cells(spec_for(metric="proportion", shift=0.0), None, cutoff)
    assert rate.excluded["not_binary"] == 4  # 4.0, 6.0, -3.0 and 900.0
    source.dispose()


@pytest.mark.parametrize("backend_url", SERVERS_AND_FILES, indirect=True)
def test_late_events_with_an_id_and_with_an_inserted_at_column(backend_url):
    engine = sa.create_engine(backend_url)
    metadata = sa.MetaData()
    table = events_table(metadata, time_storage="timestamp", id_sequence=engine.dialect.name == "duckdb")
    table.append_column(sa.Column("inserted_at", TIMESTAMP))
    sa.Index("ix_events_inserted_at", table.c.inserted_at)
    metadata.create_all(engine)

    def insert(part, stamp):
        with engine.begin() as conn:
            conn.execute(sa.insert(table), [
                dict(site=r.site, value=r.value, done_at=r.done_at.to_pydatetime().replace(tzinfo=None),
                     inserted_at=stamp.replace(tzinfo=None)) for r in part.itertuples()
            ])

    insert(make_events(600, seed=5, span=timedelta(hours=3)), START + timedelta(hours=3, minutes=1))
    engine.dispose()  # a DuckDB file takes one writer or readers, not both at once
    source = Source(backend_url)
    specs = {arrival: spec_for(arrival_column=arrival) for arrival in ("id", "inserted_at")}
    first = {a: source.read_cells(spec, None, START + timedelta(hours=3)) for a, spec in specs.items()}
    assert all(b.new_events == 600 for b in first.values())
    insert(make_events(30, seed=6, span=timedelta(hours=2)), START + timedelta(hours=3, minutes=30))
    engine.dispose()
    for arrival, spec in specs.items():
        second = source.read_cells(spec, first[arrival].watermark, START + timedelta(hours=4))
        assert (second.late_events, second.new_events) == (30, 30), arrival
        third = source.read_cells(spec, second.watermark, START + timedelta(hours=5))
        assert third.new_events == 0 and third.late_events == 0, arrival
    assert first["inserted_at"].watermark.arrival == (START + timedelta(hours=3, minutes=1)).isoformat()
    assert first["id"].watermark.arrival == 600
    source.dispose()
    engine.dispose()


# --------------------------------------------------------------------------- looks against scipy


def _check_against_scipy(world, record):
    raw = world.raw()
    seconds = raw.seconds.astype(float)
    usable = np.isfinite(seconds) & (seconds.abs() <= 1e50)
    upto = raw[(raw.done_at <= pd.Timestamp(record.cutoff)) & usable]
    upto = upto[upto.site.isin(["east", "west"])]
    east = upto[upto.site == "east"].seconds.to_numpy()
    west = upto[upto.site == "west"].seconds.to_numpy()
    ref = stats.ttest_ind(east, west, equal_var=False)
    assert (record.n1, record.n2) == (len(east), len(west))
    assert record.statistic == pytest.approx(ref.statistic, rel=1e-9)
    assert record.p_value == pytest.approx(ref.pvalue, rel=1e-7)


@pytest.mark.parametrize("backend_url", EVERY_DATABASE, indirect=True)
def test_looks_with_late_and_bad_rows_match_scipy(backend_url, tmp_path):
    rng = np.random.default_rng(31)
    rows = event_rows(rng, 800, T0, east=101.0)
    bad = [{"site": "east", "seconds": None, "done_at": T0}, {"site": "north", "seconds": 5.0, "done_at": T0},
           {"site": "east", "seconds": 1.0, "done_at": None}, {"site": "west", "seconds": 1e300, "done_at": T0}]
    expected = {"null_value": 1, "unknown_group": 1, "null_time": 1, "too_large": 1}
    if _name(backend_url) in ("postgresql", "duckdb"):
        bad.append({"site": "west", "seconds": float("nan"), "done_at": T0})
        expected["not_finite"] = 1
    seconds_table(backend_url, rows + bad)
    world = LiveWorld(tmp_path, source_url=backend_url, arrival_column="id", planned_per_group=2000, lateness="5m")
    first = world.look(T0 + timedelta(hours=6))
    _check_against_scipy(world, first)
    assert first.excluded == expected
    late = [{"site": "west", "seconds": 150.0, "done_at": T0 + timedelta(hours=1)},
            {"site": "east", "seconds": 99.0, "done_at": T0 + timedelta(hours=2)}]
    insert_seconds(backend_url, late)
    for hours in (12, 20, 30):
        record = world.look(T0 + timedelta(hours=hours))
        _check_against_scipy(world, record)
        if hours == 12:
            assert record.late_events == 2
    assert all(r["ok"] for r in verify_looks(world.config, "handle-time", world.engine))


# --------------------------------------------------------------------------- safety


@pytest.mark.parametrize("backend_url", EVERY_DATABASE, indirect=True)
def test_the_source_session_is_read_only(backend_url):
    create_events_table(backend_url, make_events(50, seed=1), time_storage="timestamp"
                        if _name(backend_url) != "sqlite" else "iso")
    source = Source(backend_url)
    assert source.read_cells(spec_for(), None, START + timedelta(days=1)).new_events == 50
    for statement in ("DELETE FROM events", "CREATE TABLE intruder (x int)", "DROP TABLE events"):
        with pytest.raises(sa.exc.DBAPIError):
            with source.engine.begin() as conn:
                conn.execute(sa.text(statement))
    source.dispose()
    assert _count(backend_url) == 50


@pytest.mark.parametrize("backend_url", SERVERS_AND_FILES, indirect=True)
def test_an_unreachable_source_names_source_and_table_but_not_the_password(backend_url, tmp_path):
    if _name(backend_url) == "duckdb":
        missing = tmp_path / "nowhere.duckdb"
        source = Source(f"duckdb:///{missing}", name="depot-db")
        with pytest.raises(SourceUnavailableError, match="depot-db.*'events'"):
            source.read_cells(spec_for(), None, START)
        with pytest.raises(SourceUnavailableError):
            source.check(spec_for())
        assert not missing.exists()
        return
    url = sa.engine.make_url(backend_url).set(password="s3cret-Pw!", database="gw_does_not_exist")
    for broken in (url, url.set(port=1)):
        source = Source(broken.render_as_string(hide_password=False), name="depot-db")
        with pytest.raises(SourceUnavailableError) as caught:
            source.read_cells(spec_for(), None, START)
        message = str(caught.value)
        assert "depot-db" in message and "'events'" in message
        assert "s3cret" not in message and "s3cret" not in repr(caught.value)
        with pytest.raises(SourceUnavailableError) as caught:
            source.check(spec_for())
        assert "s3cret" not in str(caught.value)


@pytest.mark.parametrize(
    "overrides",
    [
        {"table": "events; DROP TABLE events"},
        {"table": 'events" WHERE 1=1; --'},
        {"table": "events` WHERE 1=1; --"},
        {"value_column": "value) FROM events; DROP TABLE events; --"},
        {"group_column": "site; DROP TABLE events"},
        {"time_column": "done_at OR 1=1"},
        {"key_column": "crew`; --"},
        {"filters": (("crew OR 1=1", "=", "x"),)},
    ],
    ids=["table", "table-double-quote", "table-backtick", "value", "group", "time", "key", "filter-column"],
)
@pytest.mark.parametrize("backend_url", SERVERS_AND_FILES, indirect=True)
def test_injected_identifiers_are_rejected(backend_url, overrides):
    create_events_table(backend_url, make_events(20), time_storage="timestamp", key_column="crew")
    source = Source(backend_url)
    with pytest.raises(SourceSchemaError):
        source.read_cells(spec_for(**overrides), None, START + timedelta(days=1))
    assert source.check(spec_for(**overrides))
    source.dispose()
    assert _count(backend_url) == 20


@pytest.mark.parametrize("backend_url", SERVERS_AND_FILES, indirect=True)
def test_injected_values_are_bound(backend_url):
    frame = make_events(200, seed=6, keys=2)
    tricky = pd.DataFrame([{"site": "east", "value": 1.0, "done_at": START, "crew": "x' OR '1'='1"},
                           {"site": "east", "value": 1.0, "done_at": START, "crew": "x\\' OR 1=1 -- "}])
    create_events_table(backend_url, pd.concat([frame, tricky]), time_storage="timestamp", key_column="crew")
    source = Source(backend_url)
    cutoff = START + timedelta(days=1)
    assert source.read_cells(spec_for(filters=(("crew", "=", "x' OR '1'='1"),)), None, cutoff).new_events == 1
    assert source.read_cells(spec_for(filters=(("crew", "=", "x\\' OR 1=1 -- "),)), None, cutoff).new_events == 1
    assert source.read_cells(spec_for(filters=(("crew", "=", "'; DROP TABLE events; --"),)), None, cutoff).new_events == 0
    assert source.read_cells(spec_for(filters=(("crew", "in", ["1') OR ('1'='1"]),)), None, cutoff).new_events == 0
    grouped = source.read_cells(spec_for(groups=("east' OR '1'='1", "west")), None, cutoff)
    assert grouped.excluded.get("unknown_group") == int((frame["site"] == "east").sum()) + 2
    source.dispose()
    assert _count(backend_url) == 202


@pytest.mark.mysql
def test_the_mysql_session_reads_times_in_utc():
    url = os.environ.get("GAPWATCH_TEST_MYSQL_URL")
    if not url:
        pytest.skip("GAPWATCH_TEST_MYSQL_URL is not set (tests/run.sh sets it)")
    with Source(url).engine.connect() as conn:
        assert conn.execute(sa.text("SELECT @@session.time_zone")).scalar() == "+00:00"
