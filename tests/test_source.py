"""The source layer on SQLite: aggregates against pandas, bad rows, increments, late rows, safety."""

from __future__ import annotations

import hashlib
import math
import sqlite3
from datetime import datetime, timedelta, timezone

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa

from monitor.errors import InvalidArgumentError, SourceSchemaError, SourceUnavailableError
from monitor.source.reader import EXCLUSION_REASONS, SLOT_SECONDS, Batch, Source, SourceSpec, Watermark
from monitor.stats.summaries import MomentSummary

from source_helpers import START, append_events, create_events_table, make_events, sqlite_url, stored_time

GROUPS = ("east", "west")


def spec_for(**overrides):
    options = dict(
        table="events",
        group_column="site",
        groups=GROUPS,
        value_column="value",
        time_column="done_at",
        shift=100.0,
    )
    options.update(overrides)
    return SourceSpec(**options)


def stored_epoch(frame, storage):
    """Event times in epoch seconds exactly as the table stores them."""
    micros = np.array([int(round(t.timestamp() * 1e6)) for t in frame["done_at"]], dtype="int64")
    if storage == "epoch_int":
        return (micros // 1_000_000).astype(float)
    if storage == "iso_z":
        return (micros // 1000).astype(float) / 1e3
    return micros.astype(float) / 1e6


def reference_cells(frame, storage, shift, low=None, high=None, key=None):
    """Per (group, slot[, key]) n and shifted sums from pandas, for times in (low, high]."""
    t = stored_epoch(frame, storage)
    keep = np.ones(len(frame), dtype=bool)
    if low is not None:
        keep &= t > low.timestamp()
    if high is not None:
        keep &= t <= high.timestamp()
    part = frame.loc[keep].copy()
    part["slot"] = (np.floor(t[keep] / SLOT_SECONDS) * SLOT_SECONDS).astype("int64")
    part["group_index"] = part["site"].map({GROUPS[0]: 0, GROUPS[1]: 1})
    part["dev"] = part["value"].astype(float) - shift
    part["dev2"] = part["dev"] ** 2
    by = ["group_index", "slot"] + ([key] if key else [])
    table = part.groupby(by).agg(n=("dev", "size"), sum_dev=("dev", "sum"), sum_dev2=("dev2", "sum"))
    out = {}
    for idx, row in table.iterrows():
        gi, slot = int(idx[0]), int(idx[1])
        out[(gi, slot, idx[2] if key else None)] = (int(row.n), float(row.sum_dev), float(row.sum_dev2))
    return out


def as_dict(cells):
    out = {}
    for c in cells:
        k = (c.group_index, c.slot, c.key)
        n, s1, s2 = out.get(k, (0, 0.0, 0.0))
        out[k] = (n + c.n, s1 + c.sum_dev, s2 + c.sum_dev2)
    return out


def assert_cells_equal(got, expected):
    assert set(got) == set(expected)
    for k, (n, s1, s2) in expected.items():
        gn, g1, g2 = got[k]
        assert gn == n, k
        assert g1 == pytest.approx(s1, rel=1e-9, abs=1e-7), k
        assert g2 == pytest.approx(s2, rel=1e-9, abs=1e-7), k


def group_summaries(cells, shift):
    out = [MomentSummary(0, shift, 0.0, 0.0), MomentSummary(0, shift, 0.0, 0.0)]
    for c in cells:
        out[c.group_index] = out[c.group_index].merge(MomentSummary(c.n, shift, c.sum_dev, c.sum_dev2))
    return out


def sha256(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture
def db_path(tmp_path):
    return tmp_path / "ops.sqlite"


# --------------------------------------------------------------------------- aggregates


@pytest.mark.parametrize("storage", ["iso", "iso_z", "epoch", "epoch_int"])
def test_one_shot_cells_equal_pandas_groupby(db_path, storage):
    frame = make_events(3000, seed=11, keys=5, span=timedelta(hours=20))
    url = sqlite_url(db_path)
    create_events_table(url, frame, time_storage=storage, key_column="crew")
    source = Source(url, name="ops")
    cutoff = START + timedelta(hours=15, minutes=7, seconds=3)
    batch = source.read_cells(spec_for(key_column="crew"), None, cutoff)
    expected = reference_cells(frame, storage, 100.0, high=cutoff, key="crew")
    assert_cells_equal(as_dict(batch.cells), expected)
    assert batch.new_events == sum(v[0] for v in expected.values())
    assert batch.late_events == 0 and batch.excluded == {}
    assert batch.watermark.cutoff == cutoff
    # Means and variances derived from the shifted sums match pandas on the raw values.
    t = stored_epoch(frame, storage)
    seen = frame.loc[t <= cutoff.timestamp()]
    for gi, summary in enumerate(group_summaries(batch.cells, 100.0)):
        values = seen.loc[seen["site"] == GROUPS[gi], "value"]
        assert summary.n == len(values)
        assert summary.mean == pytest.approx(values.mean(), rel=1e-12)
        assert summary.variance == pytest.approx(values.var(ddof=1), rel=1e-9)
    source.dispose()


def test_cells_without_key_and_large_offset_keep_their_digits(db_path):
    # Values like 1e9 + noise: the shifted sums still give the variance to many digits.
    frame = make_events(2000, seed=3, means=(1e9, 1e9 + 2.0), sds=(1.0, 1.5))
    url = sqlite_url(db_path)
    create_events_table(url, frame)
    source = Source(url)
    shift = source.first_value(spec_for())
    assert abs(shift - 1e9) < 10
    batch = source.read_cells(spec_for(shift=shift), None, START + timedelta(days=1))
    for gi, summary in enumerate(group_summaries(batch.cells, shift)):
        values = frame.loc[frame["site"] == GROUPS[gi], "value"]
        assert summary.variance == pytest.approx(values.var(ddof=1), rel=1e-6)
    assert all(c.key is None for c in batch.cells)
    slots = {c.slot for c in batch.cells}
    assert all(s % SLOT_SECONDS == 0 for s in slots)


def test_numeric_text_values_count_as_numbers(db_path):
    frame = make_events(400, seed=5)
    text = frame.copy()
    text["value"] = [f"  {v:.6f} " if i % 3 == 0 else (f"{v:.4e}" if i % 3 == 1 else repr(v)) for i, v in enumerate(frame["value"])]
    url = sqlite_url(db_path)
    create_events_table(url, text, value_type=sa.Text())
    batch = Source(url).read_cells(spec_for(), None, START + timedelta(days=1))
    assert batch.excluded == {}
    numbers = frame.copy()
    numbers["value"] = [float(v) for v in text["value"]]
    assert_cells_equal(as_dict(batch.cells), reference_cells(numbers, "iso", 100.0))


def test_iso_text_with_utc_offset(db_path):
    frame = make_events(600, seed=8)
    url = sqlite_url(db_path)
    create_events_table(url, frame, time_storage="iso")
    plus2 = timezone(timedelta(hours=2))
    engine = sa.create_engine(url)
    with engine.begin() as conn:
        # Rewrite every time as local "+02:00" text: the same instants, another layout.
        rows = conn.execute(sa.text("SELECT id, done_at FROM events")).all()
        for rid, text in rows:
            moment = datetime.fromisoformat(text).replace(tzinfo=timezone.utc).astimezone(plus2)
            conn.execute(
                sa.text("UPDATE events SET done_at = :t WHERE id = :i"),
                {"t": moment.isoformat(timespec="microseconds"), "i": rid},
            )
    engine.dispose()
    cutoff = START + timedelta(hours=5, seconds=0.5)
    batch = Source(url).read_cells(spec_for(), None, cutoff)
    assert_cells_equal(as_dict(batch.cells), reference_cells(frame, "iso", 100.0, high=cutoff))


# --------------------------------------------------------------------------- bad rows


def bad_rows():
    t = START + timedelta(minutes=10)
    good = [{"site": "east", "value": 5.0, "done_at": t}, {"site": "west", "value": "7", "done_at": t}]
    bad = [
        ({"site": "east", "value": 1.0, "done_at": None}, "null_time"),
        ({"site": "east", "value": 1.0, "done_at": "not a time"}, "bad_time"),  # a word: counted once
        ({"site": "north", "value": 1.0, "done_at": t}, "unknown_group"),
        ({"site": None, "value": 1.0, "done_at": t}, "unknown_group"),
        ({"site": "east", "value": None, "done_at": t}, "null_value"),
        ({"site": "west", "value": "abc", "done_at": t}, "non_numeric"),
        ({"site": "west", "value": "12abc", "done_at": t}, "non_numeric"),
        ({"site": "west", "value": "", "done_at": t}, "non_numeric"),
        ({"site": "west", "value": '"12"', "done_at": t}, "non_numeric"),
        ({"site": "west", "value": b"\x01\x02", "done_at": t}, "non_numeric"),
        ({"site": "east", "value": math.inf, "done_at": t}, "not_finite"),
        ({"site": "east", "value": -math.inf, "done_at": t}, "not_finite"),
        ({"site": "east", "value": "NaN", "done_at": t}, "not_finite"),
        ({"site": "east", "value": "-Infinity", "done_at": t}, "not_finite"),
        ({"site": "east", "value": "1e999", "done_at": t}, "not_finite"),
        ({"site": "east", "value": -5.0, "done_at": t}, "out_of_range"),
        ({"site": "west", "value": 250.0, "done_at": t}, "out_of_range"),
    ]
    return good, bad


def test_every_bad_row_reason_is_counted_in_the_database(db_path):
    good, bad = bad_rows()
    url = sqlite_url(db_path)
    create_events_table(url, good + [row for row, _ in bad], value_type=sa.Text())
    spec = spec_for(valid_range=(0.0, 200.0), shift=0.0)
    batch = Source(url).read_cells(spec, None, START + timedelta(hours=1))
    expected = {}
    for _row, reason in bad:
        if reason:
            expected[reason] = expected.get(reason, 0) + 1
    assert batch.excluded == {r: expected[r] for r in EXCLUSION_REASONS if r in expected}
    assert batch.new_events == 2
    assert sorted((c.group_index, c.n, c.sum_dev) for c in batch.cells) == [(0, 1, 5.0), (1, 1, 7.0)]
    frame = Source(url).read_rows(spec, START + timedelta(hours=1))
    assert frame.attrs["excluded"] == batch.excluded
    assert sorted(frame["value"]) == [5.0, 7.0]


def test_one_sided_valid_range_and_proportion_metric(db_path):
    t = START + timedelta(minutes=3)
    rows = [{"site": s, "value": v, "done_at": t} for s, v in
            [("east", 0.0), ("east", 1.0), ("east", 1.0), ("west", 0.0), ("west", 2.0), ("west", 0.5), ("west", -1.0)]]
    url = sqlite_url(db_path)
    create_events_table(url, rows)
    source = Source(url)
    rate = source.read_cells(spec_for(metric="proportion", shift=0.0), None, t)
    assert rate.excluded == {"not_binary": 3}
    assert sorted((c.group_index, c.n, c.sum_dev) for c in rate.cells) == [(0, 3, 2.0), (1, 1, 0.0)]
    low_only = source.read_cells(spec_for(valid_range=(0.0, None), shift=0.0), None, t)
    assert low_only.excluded == {"out_of_range": 1}
    high_only = source.read_cells(spec_for(valid_range=(None, 1.0), shift=0.0), None, t)
    assert high_only.excluded == {"out_of_range": 1}
    assert high_only.new_events == 6


# --------------------------------------------------------------------------- increments and late rows


@pytest.mark.parametrize("storage", ["iso", "epoch"])
def test_incremental_reads_sum_to_the_one_shot_read(db_path, storage):
    frame = make_events(2500, seed=21, keys=3, span=timedelta(hours=10))
    url = sqlite_url(db_path)
    create_events_table(url, frame, time_storage=storage, key_column="crew")
    source = Source(url)
    spec = spec_for(key_column="crew", arrival_column="id")
    final = START + timedelta(hours=11)
    one_shot = source.read_cells(spec, None, final)
    since = None
    total = {}
    count = 0
    rng = np.random.default_rng(4)
    cutoffs = sorted(START + timedelta(seconds=float(s)) for s in rng.uniform(0, 10 * 3600, size=7)) + [final]
    for cutoff in cutoffs:
        batch = source.read_cells(spec, since, cutoff)
        assert batch.late_events == 0
        count += batch.new_events
        for k, v in as_dict(batch.cells).items():
            n, s1, s2 = total.get(k, (0, 0.0, 0.0))
            total[k] = (n + v[0], s1 + v[1], s2 + v[2])
        since = batch.watermark
    assert count == one_shot.new_events == len(frame)
    assert_cells_equal(total, as_dict(one_shot.cells))
    # Reading again with nothing new returns nothing.
    again = source.read_cells(spec, since, final)
    assert again.new_events == 0 and again.cells == () and again.watermark == since


@pytest.mark.parametrize("arrival", ["id", None])  # None: SQLite's rowid stands in
def test_late_events_are_counted_once_as_late(db_path, arrival):
    frame = make_events(1000, seed=2, span=timedelta(hours=4))
    url = sqlite_url(db_path)
    create_events_table(url, frame)
    source = Source(url)
    spec = spec_for(arrival_column=arrival)
    first_cutoff = START + timedelta(hours=4)
    first = source.read_cells(spec, None, first_cutoff)
    assert first.new_events == 1000
    # Late rows (times before the first cutoff) plus rows from the future (after the next cutoff).
    late = make_events(40, seed=9, span=timedelta(hours=3))
    future = make_events(15, seed=10, start=START + timedelta(hours=6), span=timedelta(minutes=30))
    fresh = make_events(25, seed=12, start=START + timedelta(hours=4, minutes=5), span=timedelta(minutes=30))
    append_events(url, pd.concat([late, future, fresh]))
    second_cutoff = START + timedelta(hours=5)
    second = source.read_cells(spec, first.watermark, second_cutoff)
    assert second.late_events == 40
    assert second.new_events == 65
    assert sum(c.late for c in second.cells) == 40
    late_slots = {c.slot for c in second.cells if c.late}
    assert max(late_slots) < first_cutoff.timestamp()
    # The future rows arrived before this watermark but are read by the next time range, once.
    third = source.read_cells(spec, second.watermark, START + timedelta(hours=7))
    assert third.new_events == 15 and third.late_events == 0
    fourth = source.read_cells(spec, third.watermark, START + timedelta(hours=8))
    assert fourth.new_events == 0
    # Everything read once: the increments add up to a fresh one-shot read.
    one_shot = source.read_cells(spec, None, START + timedelta(hours=8))
    total = {}
    for batch in (first, second, third, fourth):
        for k, v in as_dict(batch.cells).items():
            n, s1, s2 = total.get(k, (0, 0.0, 0.0))
            total[k] = (n + v[0], s1 + v[1], s2 + v[2])
    assert_cells_equal(total, as_dict(one_shot.cells))


def test_late_null_time_rows_are_excluded_once(db_path):
    url = sqlite_url(db_path)
    create_events_table(url, make_events(50, seed=1))
    source = Source(url)
    spec = spec_for(arrival_column="id")
    first = source.read_cells(spec, None, START + timedelta(days=1))
    append_events(url, [{"site": "east", "value": 1.0, "done_at": None}])
    second = source.read_cells(spec, first.watermark, START + timedelta(days=2))
    assert second.excluded == {"null_time": 1}
    third = source.read_cells(spec, second.watermark, START + timedelta(days=3))
    assert third.excluded == {}


def test_watermark_round_trips_through_a_dict():
    mark = Watermark(cutoff=START, arrival=17)
    assert Watermark.from_dict(mark.to_dict()) == mark


def test_cutoff_before_the_previous_one_is_refused(db_path):
    url = sqlite_url(db_path)
    create_events_table(url, make_events(10))
    with pytest.raises(InvalidArgumentError, match="cutoff"):
        Source(url).read_cells(spec_for(), Watermark(START + timedelta(hours=2)), START)


# --------------------------------------------------------------------------- filters


def test_filters_with_every_operator(db_path):
    frame = make_events(800, seed=31, keys=4)
    url = sqlite_url(db_path)
    create_events_table(url, frame, key_column="crew")
    source = Source(url)
    cutoff = START + timedelta(days=1)
    cases = [
        ("=", "crew-1", frame["crew"] == "crew-1"),
        ("!=", "crew-1", frame["crew"] != "crew-1"),
        ("<", "crew-2", frame["crew"] < "crew-2"),
        ("<=", "crew-2", frame["crew"] <= "crew-2"),
        (">", "crew-2", frame["crew"] > "crew-2"),
        (">=", "crew-2", frame["crew"] >= "crew-2"),
        ("in", ["crew-0", "crew-3"], frame["crew"].isin(["crew-0", "crew-3"])),
        ("not in", ["crew-0", "crew-3"], ~frame["crew"].isin(["crew-0", "crew-3"])),
    ]
    for op, value, mask in cases:
        batch = source.read_cells(spec_for(filters=(("crew", op, value),)), None, cutoff)
        assert_cells_equal(as_dict(batch.cells), reference_cells(frame.loc[mask], "iso", 100.0)), op
    numeric = source.read_cells(spec_for(filters=(("value", ">", 100.0),)), None, cutoff)
    assert numeric.new_events == int((frame["value"] > 100.0).sum())


# --------------------------------------------------------------------------- safety


def test_sqlite_file_is_unchanged_and_writes_fail(db_path):
    url = sqlite_url(db_path)
    create_events_table(url, make_events(300, seed=4))
    before = sha256(db_path)
    source = Source(url)
    spec = spec_for(arrival_column="id")
    source.check(spec)
    source.first_value(spec)
    batch = source.read_cells(spec, None, START + timedelta(hours=3))
    source.read_cells(spec, batch.watermark, START + timedelta(hours=9))
    source.read_rows(spec, START + timedelta(hours=9))
    with pytest.raises(sa.exc.OperationalError, match="readonly|read-only|query_only"):
        with source.engine.begin() as conn:
            conn.execute(sa.text("DELETE FROM events"))
    with pytest.raises(sa.exc.OperationalError):
        with source.engine.begin() as conn:
            conn.execute(sa.text("CREATE TABLE intruder (x)"))
    source.dispose()
    assert sha256(db_path) == before
    assert sorted(p.name for p in db_path.parent.iterdir()) == ["ops.sqlite"]


def test_missing_file_is_unavailable_and_not_created(tmp_path):
    path = tmp_path / "nowhere.sqlite"
    source = Source(sqlite_url(path), name="depot-db")
    with pytest.raises(SourceUnavailableError, match="depot-db.*events"):
        source.read_cells(spec_for(), None, START)
    with pytest.raises(SourceUnavailableError):
        source.check(spec_for())
    assert not path.exists()


def test_in_memory_sqlite_is_refused():
    with pytest.raises(InvalidArgumentError, match="url"):
        Source("sqlite://")


@pytest.mark.parametrize(
    "overrides",
    [
        {"table": "events; DROP TABLE events"},
        {"table": 'events" WHERE 1=1; --'},
        {"value_column": "value) FROM events; DROP TABLE events; --"},
        {"group_column": "site; DROP TABLE events"},
        {"time_column": "done_at OR 1=1"},
        {"filters": (("crew OR 1=1", "=", "x"),)},
        {"key_column": "crew; --"},
    ],
    ids=["table", "table-quote", "value", "group", "time", "filter-column", "key"],
)
def test_injected_identifiers_are_rejected(db_path, overrides):
    url = sqlite_url(db_path)
    create_events_table(url, make_events(20), key_column="crew")
    before = sha256(db_path)
    source = Source(url)
    with pytest.raises(SourceSchemaError):
        source.read_cells(spec_for(**overrides), None, START + timedelta(days=1))
    assert source.check(spec_for(**overrides))
    source.dispose()
    assert sha256(db_path) == before
    engine = sa.create_engine(url)
    assert sa.inspect(engine).get_table_names() == ["events"]
    engine.dispose()


def test_injected_filter_values_are_bound_literals(db_path):
    frame = make_events(200, seed=6, keys=2)
    rows = pd.concat([frame, pd.DataFrame([{"site": "east", "value": 1.0, "done_at": START, "crew": "x' OR '1'='1"}])])
    url = sqlite_url(db_path)
    create_events_table(url, rows, key_column="crew")
    source = Source(url)
    cutoff = START + timedelta(days=1)
    hit = source.read_cells(spec_for(filters=(("crew", "=", "x' OR '1'='1"),)), None, cutoff)
    assert hit.new_events == 1
    none = source.read_cells(spec_for(filters=(("crew", "=", "'; DROP TABLE events; --"),)), None, cutoff)
    assert none.new_events == 0
    listed = source.read_cells(spec_for(filters=(("crew", "in", ["1') OR ('1'='1"]),)), None, cutoff)
    assert listed.new_events == 0
    grouped = source.read_cells(spec_for(groups=("east' OR '1'='1", "west")), None, cutoff)
    assert grouped.excluded.get("unknown_group") == int((rows["site"] == "east").sum())


def test_bad_filter_operator_is_refused():
    with pytest.raises(InvalidArgumentError, match="operator"):
        spec_for(filters=(("crew", "LIKE", "%"),))


def captured_statements(source, action):
    """The SQL and parameters ``action`` sends through the source's engine."""
    seen = []

    def listener(conn, cursor, statement, parameters, context, executemany):
        seen.append((statement, parameters))

    sa.event.listen(source.engine, "before_cursor_execute", listener)
    try:
        action()
    finally:
        sa.event.remove(source.engine, "before_cursor_execute", listener)
    return seen


def test_time_and_arrival_predicates_use_the_indexes(db_path):
    url = sqlite_url(db_path)
    create_events_table(url, make_events(2000, seed=1))
    source = Source(url)
    spec = spec_for(arrival_column="id")
    first = source.read_cells(spec, None, START + timedelta(hours=6))
    seen = captured_statements(source, lambda: source.read_cells(spec, first.watermark, START + timedelta(hours=7)))
    statement, parameters = next((s, p) for s, p in seen if "sum_dev2" in s)
    raw = sqlite3.connect(f"file:{db_path}?mode=ro", uri=True)
    plan = " | ".join(row[-1] for row in raw.execute("EXPLAIN QUERY PLAN " + statement, parameters))
    raw.close()
    assert "ix_events_done_at (done_at>? AND done_at<?)" in plan, plan
    # The late branch seeks on the integer primary key, not the whole time index.
    assert "INTEGER PRIMARY KEY (rowid>?)" in plan, plan
    assert "SCAN events" not in plan, plan


def test_predicates_compare_the_raw_columns(db_path):
    url = sqlite_url(db_path)
    create_events_table(url, make_events(50, seed=1), time_storage="epoch")
    source = Source(url)
    spec = spec_for(arrival_column="id")
    first = source.read_cells(spec, None, START + timedelta(hours=6))
    seen = captured_statements(source, lambda: source.read_cells(spec, first.watermark, START + timedelta(hours=7)))
    statement = next(s for s, _p in seen if "sum_dev2" in s)
    for branch in statement.split("UNION ALL"):
        where = branch.split("WHERE", 1)[1]
        assert "CAST" not in where and "strftime" not in where, where


# --------------------------------------------------------------------------- check, first value, rows


def test_check_reports_missing_table_columns_and_index(db_path):
    url = sqlite_url(db_path)
    create_events_table(url, make_events(20), time_index=False)
    source = Source(url)
    assert "'missing'" in source.check(spec_for(table="missing"))[0]
    problems = source.check(spec_for(value_column="seconds", key_column="crew"))
    assert any("'seconds'" in p for p in problems) and any("'crew'" in p for p in problems)
    problems = source.check(spec_for())
    assert len(problems) == 1 and problems[0].startswith("warning:") and "index" in problems[0]


def test_check_warns_without_arrival_on_a_table_without_rowid(db_path):
    url = sqlite_url(db_path)
    engine = sa.create_engine(url)
    with engine.begin() as conn:
        conn.execute(sa.text(
            "CREATE TABLE events (site TEXT, value REAL, done_at TEXT, PRIMARY KEY (done_at, site)) WITHOUT ROWID"))
        conn.execute(sa.text("INSERT INTO events VALUES ('east', 1.5, '2026-03-02 06:00:00')"))
    engine.dispose()
    source = Source(url)
    problems = source.check(spec_for())
    assert any("late events" in p for p in problems)
    batch = source.read_cells(spec_for(), None, START + timedelta(hours=1))
    assert batch.new_events == 1 and batch.watermark.arrival is None


def test_check_flags_unusable_and_mixed_time_text(db_path):
    url = sqlite_url(db_path)
    t = START + timedelta(minutes=1)
    create_events_table(url, [
        {"site": "east", "value": 1.0, "done_at": "2026-03-02 06:00:00"},
        {"site": "east", "value": 1.0, "done_at": "2026-03-02T07:00:00Z"},
    ])
    problems = Source(url).check(spec_for())
    assert any("layout" in p for p in problems)
    other = db_path.parent / "other.sqlite"
    create_events_table(sqlite_url(other), [{"site": "east", "value": 1.0, "done_at": "yesterday"}])
    assert any("ISO-8601" in p and not p.startswith("warning") for p in Source(sqlite_url(other)).check(spec_for()))
    # The unreadable row is counted, not a reason to refuse the read.
    assert Source(sqlite_url(other)).read_cells(spec_for(), None, t).excluded == {"bad_time": 1}


def test_first_value_is_near_the_data_and_none_when_empty(db_path):
    url = sqlite_url(db_path)
    frame = make_events(500, seed=7, means=(5000.0, 5010.0), sds=(3.0, 3.0))
    create_events_table(url, frame)
    source = Source(url)
    value = source.first_value(spec_for())
    assert 4980 < value < 5030
    assert value in set(frame["value"]) or value == pytest.approx(np.median(frame["value"][:25]), rel=0.01)
    empty = db_path.parent / "empty.sqlite"
    create_events_table(sqlite_url(empty), [])
    assert Source(sqlite_url(empty)).first_value(spec_for()) is None
    assert Source(sqlite_url(empty)).read_cells(spec_for(), None, START).new_events == 0


@pytest.mark.parametrize("storage", ["iso", "epoch", "epoch_int"])
def test_read_rows_are_the_valid_rows(db_path, storage):
    frame = make_events(700, seed=14, keys=3)
    url = sqlite_url(db_path)
    create_events_table(url, frame, time_storage=storage, key_column="crew")
    append_events(url, [{"site": "south", "value": 1.0, "done_at": START, "crew": "crew-0"}], time_storage=storage)
    source = Source(url)
    cutoff = START + timedelta(hours=8)
    spec = spec_for(key_column="crew", arrival_column="id")
    rows = source.read_rows(spec, cutoff)
    t = stored_epoch(frame, storage)
    expected = frame.loc[t <= cutoff.timestamp()]
    assert list(rows.columns) == ["group_index", "value", "time", "key"]
    assert rows.attrs["excluded"] == {"unknown_group": 1}
    assert len(rows) == len(expected)
    assert np.allclose(np.sort(rows["value"]), np.sort(expected["value"]))
    assert str(rows["time"].dt.tz) == "UTC"
    assert np.allclose(np.sort(rows["time"].map(pd.Timestamp.timestamp)), np.sort(t[t <= cutoff.timestamp()]), atol=1e-6)
    assert set(rows["key"]) <= {"crew-0", "crew-1", "crew-2"}
    # Cells rebuilt from the rows match the aggregate read.
    batch = source.read_cells(spec, None, cutoff)
    assert len(rows) == batch.new_events
    capped = source.read_rows(spec, cutoff, arrival_max=100)
    assert len(capped) == int((t[:100] <= cutoff.timestamp()).sum())


# --------------------------------------------------------------------------- dialect variants


@pytest.mark.parametrize(
    "url,variant,enforced",
    [
        ("sqlite:///ops.sqlite", "SQLiteDialect", True),
        ("postgresql+psycopg://u@h/db", "PostgreSQLDialect", True),
        ("mysql+pymysql://u@h/db", "MySQLDialect", True),
        ("mariadb+pymysql://u@h/db", "MySQLDialect", True),
        ("oracle://u@h/db", "SourceDialect", False),
    ],
)
def test_each_url_gets_its_dialect_variant(url, variant, enforced):
    from monitor.source.dialects import dialect_for

    dialect = dialect_for(sa.engine.make_url(url))
    assert type(dialect).__name__ == variant
    assert dialect.enforces_read_only is enforced


def test_public_names_import_from_the_package():
    import monitor.source as package
    from monitor.source import EXCLUSION_REASONS as reasons, SLOT_SECONDS as slot, Batch as B, Source as S
    from monitor.source import SourceSpec as Spec, Watermark as W

    assert (reasons, slot, B, S, Spec, W) == (EXCLUSION_REASONS, SLOT_SECONDS, Batch, Source, SourceSpec, Watermark)
    assert set(package.__all__) >= {"Source", "SourceSpec", "Batch", "Watermark", "SLOT_SECONDS", "EXCLUSION_REASONS"}


def test_a_missing_driver_is_one_clear_error():
    with pytest.raises(InvalidArgumentError, match="no driver for 'mysql\\+nosuchdriver'"):
        Source("mysql+nosuchdriver://u:pw@127.0.0.1/db", name="depot")
