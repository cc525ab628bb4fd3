"""The source layer on a real PostgreSQL server (each test in its own fresh database)."""

from __future__ import annotations

import math
from datetime import timedelta
from decimal import Decimal

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa

from monitor.errors import SourceSchemaError, SourceUnavailableError
from monitor.source.reader import Source, SourceSpec

from source_helpers import START, append_events, create_events_table, events_table, make_events
from test_source import GROUPS, as_dict, assert_cells_equal, captured_statements, group_summaries, reference_cells, spec_for, stored_epoch

pytestmark = pytest.mark.postgres


@pytest.fixture
def pg_writer(pg_database_url):
    engine = sa.create_engine(pg_database_url)
    yield engine
    engine.dispose()


@pytest.fixture
def source(pg_database_url):
    src = Source(pg_database_url, name="ops-pg")
    yield src
    src.dispose()


VALUE_TYPES = {
    "float8": sa.Float(),
    "numeric": sa.Numeric(18, 6),
    "real": sa.REAL(),
}


@pytest.mark.parametrize(
    "storage,value_type",
    [("timestamptz", "float8"), ("timestamp", "numeric"), ("epoch", "float8"), ("epoch_int", "real")],
)
def test_cells_equal_pandas_groupby_one_shot_and_incremental(pg_database_url, source, storage, value_type):
    frame = make_events(2500, seed=17, keys=4, span=timedelta(hours=9))
    if value_type == "numeric":
        frame["value"] = frame["value"].round(6)
    if value_type == "real":
        frame["value"] = frame["value"].astype(np.float32).astype(float)
    create_events_table(pg_database_url, frame, time_storage=storage, key_column="crew", value_type=VALUE_TYPES[value_type])
    spec = spec_for(key_column="crew", arrival_column="id")
    cutoff = START + timedelta(hours=7, minutes=33, seconds=1.25)
    one_shot = source.read_cells(spec, None, cutoff)
    expected = reference_cells(frame, storage, 100.0, high=cutoff, key="crew")
    assert_cells_equal(as_dict(one_shot.cells), expected)
    t = stored_epoch(frame, storage)
    seen = frame.loc[t <= cutoff.timestamp()]
    for gi, summary in enumerate(group_summaries(one_shot.cells, 100.0)):
        values = seen.loc[seen["site"] == GROUPS[gi], "value"]
        assert summary.mean == pytest.approx(values.mean(), rel=1e-12)
        assert summary.variance == pytest.approx(values.var(ddof=1), rel=1e-9)
    since, total = None, {}
    for hours in (1, 2.5, 2.5, 4, 6.25, 7 + 33 / 60 + 1.25 / 3600):
        batch = source.read_cells(spec, since, START + timedelta(hours=hours))
        for k, v in as_dict(batch.cells).items():
            n, s1, s2 = total.get(k, (0, 0.0, 0.0))
            total[k] = (n + v[0], s1 + v[1], s2 + v[2])
        since = batch.watermark
    assert_cells_equal(total, expected)


def test_every_bad_row_reason_is_counted(pg_writer, source):
    metadata = sa.MetaData()
    t = sa.Table(
        "events",
        metadata,
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column("site", sa.Text),
        sa.Column("value", sa.Float),
        sa.Column("amount", sa.Numeric),
        sa.Column("done_at", sa.DateTime(timezone=True), index=True),
    )
    metadata.create_all(pg_writer)
    at = START + timedelta(minutes=20)
    rows = [
        ("east", 4.0, Decimal("4"), at, None),
        ("west", 6.0, Decimal("6"), at, None),
        ("east", 1.0, Decimal("1"), None, "null_time"),
        ("north", 1.0, Decimal("1"), at, "unknown_group"),
        (None, 1.0, Decimal("1"), at, "unknown_group"),
        ("east", None, None, at, "null_value"),
        ("east", math.nan, Decimal("NaN"), at, "not_finite"),
        ("west", math.inf, Decimal("Infinity"), at, "not_finite"),
        ("west", -math.inf, Decimal("-Infinity"), at, "not_finite"),
        ("west", -3.0, Decimal("-3"), at, "out_of_range"),
        ("east", 900.0, Decimal("900"), at, "out_of_range"),
    ]
    with pg_writer.begin() as conn:
        conn.execute(sa.insert(t), [dict(site=s, value=v, amount=a, done_at=d) for s, v, a, d, _r in rows])
    expected = {}
    for *_rest, reason in rows:
        if reason:
            expected[reason] = expected.get(reason, 0) + 1
    for column in ("value", "amount"):
        spec = spec_for(value_column=column, valid_range=(0.0, 500.0), shift=0.0, arrival_column="id")
        batch = source.read_cells(spec, None, START + timedelta(hours=1))
        assert batch.excluded == expected, column
        assert sorted((c.group_index, c.n, c.sum_dev) for c in batch.cells) == [(0, 1, 4.0), (1, 1, 6.0)]
        assert source.read_rows(spec, START + timedelta(hours=1)).attrs["excluded"] == expected
    rate = source.read_cells(spec_for(metric="proportion", shift=0.0), None, START + timedelta(hours=1))
    assert rate.excluded["not_binary"] == 4  # 4.0, 6.0, -3.0 and 900.0


def test_late_events_with_an_id_and_with_an_inserted_at_column(pg_writer, pg_database_url, source):
    metadata = sa.MetaData()
    t = events_table(metadata, time_storage="timestamptz")
    t.append_column(sa.Column("inserted_at", sa.DateTime(timezone=True)))
    sa.Index("ix_events_inserted_at", t.c.inserted_at)
    metadata.create_all(pg_writer)
    frame = make_events(600, seed=5, span=timedelta(hours=3))

    def insert(part, stamp):
        with pg_writer.begin() as conn:
            conn.execute(
                sa.insert(t),
                [dict(site=r.site, value=r.value, done_at=r.done_at.to_pydatetime(), inserted_at=stamp) for r in part.itertuples()],
            )

    insert(frame, START + timedelta(hours=3, minutes=1))
    specs = {arrival: spec_for(arrival_column=arrival) for arrival in ("id", "inserted_at")}
    first = {a: source.read_cells(spec, None, START + timedelta(hours=3)) for a, spec in specs.items()}
    assert all(b.new_events == 600 for b in first.values())
    insert(make_events(30, seed=6, span=timedelta(hours=2)), START + timedelta(hours=3, minutes=30))
    for arrival, spec in specs.items():
        second = source.read_cells(spec, first[arrival].watermark, START + timedelta(hours=4))
        assert (second.late_events, second.new_events) == (30, 30), arrival
        third = source.read_cells(spec, second.watermark, START + timedelta(hours=5))
        assert third.new_events == 0 and third.late_events == 0, arrival
    assert first["inserted_at"].watermark.arrival == (START + timedelta(hours=3, minutes=1)).isoformat()
    assert first["id"].watermark.arrival == 600


def test_source_session_is_read_only(pg_writer, pg_database_url, source):
    create_events_table(pg_database_url, make_events(50, seed=1), time_storage="timestamptz")
    source.read_cells(spec_for(), None, START + timedelta(days=1))
    with source.engine.connect() as conn:
        assert conn.execute(sa.text("SHOW default_transaction_read_only")).scalar() == "on"
    with pytest.raises(sa.exc.InternalError, match="read-only transaction"):
        with source.engine.begin() as conn:
            conn.execute(sa.text("DELETE FROM events"))
    with pytest.raises(sa.exc.InternalError, match="read-only transaction"):
        with source.engine.begin() as conn:
            conn.execute(sa.text("CREATE TABLE intruder (x int)"))
    with pg_writer.connect() as conn:
        assert conn.execute(sa.text("SELECT count(*) FROM events")).scalar() == 50


def test_unreachable_source_names_source_and_table_but_not_the_password(pg_database_url):
    url = sa.engine.make_url(pg_database_url).set(password="s3cret-Pw!", database="gw_does_not_exist")
    src = Source(url.render_as_string(hide_password=False), name="depot-pg")
    with pytest.raises(SourceUnavailableError) as caught:
        src.read_cells(spec_for(), None, START)
    message = str(caught.value)
    assert "depot-pg" in message and "'events'" in message
    assert "s3cret-Pw!" not in message and "s3cret" not in repr(caught.value)
    closed = url.set(port=1, database="postgres")
    with pytest.raises(SourceUnavailableError) as caught:
        Source(closed.render_as_string(hide_password=False), name="depot-pg").check(spec_for())
    assert "s3cret" not in str(caught.value)


def test_queries_use_the_indexes_on_a_big_table(pg_writer, source):
    with pg_writer.begin() as conn:
        metadata = sa.MetaData()
        events_table(metadata, time_storage="timestamptz").create(conn)
        # 200,000 rows, one every 3 s, built inside the server.
        series = sa.func.generate_series(1, 200_000).table_valued("g").render_derived(name="series")
        g = series.c.g
        rows = sa.select(
            sa.case((g % 2 == 0, "east"), else_="west"),
            100.0 + (g % 17),
            sa.literal(START) + sa.func.make_interval(0, 0, 0, 0, 0, 0, g * 3),
        ).select_from(series)
        conn.execute(sa.insert(metadata.tables["events"]).from_select(["site", "value", "done_at"], rows))
    with pg_writer.connect().execution_options(isolation_level="AUTOCOMMIT") as conn:
        conn.execute(sa.text("ANALYZE events"))
    spec = spec_for(arrival_column="id")
    first = source.read_cells(spec, None, START + timedelta(days=6))
    assert first.new_events == 172_800
    seen = captured_statements(source, lambda: source.read_cells(spec, first.watermark, START + timedelta(days=6, minutes=50)))
    statement, parameters = next((s, p) for s, p in seen if "sum_dev2" in s)
    raw = pg_writer.raw_connection()
    try:
        cursor = raw.cursor()
        cursor.execute("EXPLAIN " + statement, parameters)
        plan = "\n".join(r[0] for r in cursor.fetchall())
    finally:
        raw.close()
    assert "Seq Scan" not in plan, plan
    assert "ix_events_done_at" in plan and "events_pkey" in plan, plan
    assert "Index Scan" in plan or "Bitmap Index Scan" in plan, plan


def test_check_on_postgres(pg_writer, pg_database_url, source):
    with pg_writer.begin() as conn:
        conn.execute(sa.text(
            "CREATE TABLE shifts (site text, note text, flag boolean, done_at timestamptz, worked real)"))
    problems = source.check(spec_for(table="shifts", value_column="note"))
    assert any("not a numeric type" in p for p in problems)
    assert any("late events" in p for p in problems)
    assert any("index" in p for p in problems)
    problems = source.check(spec_for(table="shifts", value_column="worked", time_column="flag"))
    assert any("'flag'" in p and "type" in p for p in problems)
    with pytest.raises(SourceSchemaError, match="not a numeric type"):
        source.read_cells(spec_for(table="shifts", value_column="note"), None, START)
    create_events_table(pg_database_url, make_events(20), time_storage="timestamptz")
    assert source.check(spec_for(arrival_column="id")) == []


def test_schema_qualified_table_and_injection_attempts(pg_writer, pg_database_url, source):
    with pg_writer.begin() as conn:
        conn.execute(sa.schema.CreateSchema("depot"))
    frame = make_events(120, seed=3, keys=2)
    frame.loc[0, "crew"] = "x' OR '1'='1"
    create_events_table(pg_database_url, frame, time_storage="timestamptz", key_column="crew", schema="depot")
    cutoff = START + timedelta(days=1)
    batch = source.read_cells(spec_for(schema="depot"), None, cutoff)
    assert batch.new_events == 120
    with pytest.raises(SourceSchemaError):
        source.read_cells(spec_for(schema="depot", table="events; DROP TABLE depot.events"), None, cutoff)
    with pytest.raises(SourceSchemaError):
        source.read_cells(spec_for(table="events"), None, cutoff)  # not in the default schema
    hit = source.read_cells(spec_for(schema="depot", filters=(("crew", "=", "x' OR '1'='1"),)), None, cutoff)
    assert hit.new_events == 1
    rows = source.read_rows(spec_for(schema="depot", key_column="crew"), cutoff)
    assert len(rows) == 120 and str(rows["time"].dt.tz) == "UTC"
    with pg_writer.connect() as conn:
        assert conn.execute(sa.text("SELECT count(*) FROM depot.events")).scalar() == 120


def test_integer_groups_and_epoch_seconds(pg_database_url, source):
    frame = make_events(300, seed=8, groups=(7, 9))
    create_events_table(pg_database_url, frame, time_storage="epoch_int", group_type=sa.Integer())
    for groups in ((7, 9), ("7", "9")):
        batch = source.read_cells(spec_for(groups=groups), None, START + timedelta(days=1))
        assert batch.new_events == 300 and batch.excluded == {}
    assert 60 < source.first_value(spec_for(groups=(7, 9))) < 140
