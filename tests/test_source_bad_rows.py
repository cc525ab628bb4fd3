"""One bad row never stops or distorts a read: huge values, numbers among text times, unreadable times.

Each case runs on every database the source is tested on; each reproduces a defect that once
stalled a comparison (a failed statement, a NaN variance, or rows hidden for good).
"""

from __future__ import annotations

from datetime import timedelta

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa
from scipy import stats

from live_helpers import UTC, LiveWorld, at, event_rows
from monitor.source import Source
from source_helpers import (
    DOUBLE,
    START,
    TIME_TEXT,
    TIMESTAMP_STORAGE,
    append_events,
    backend_url,  # noqa: F401 - fixture
    backends,
    create_events_table,
    make_events,
    numbering,
    seconds_table,
    stored_time,
)
from test_source import as_dict, assert_cells_equal, reference_cells, spec_for

EVERY_DATABASE = backends("sqlite", "postgresql", "mysql", "duckdb")
T0 = at(2, 6)


def _backend(url: str) -> str:
    return sa.engine.make_url(url).get_backend_name()


def _iso(moment) -> str:
    """An aware time as naive-UTC ISO text with a space, the layout most tables use."""
    return moment.astimezone(UTC).replace(tzinfo=None).isoformat(sep=" ", timespec="seconds")


# --------------------------------------------------------------------------- huge finite values


@pytest.mark.parametrize("backend_url", EVERY_DATABASE, indirect=True)
def test_huge_finite_values_are_counted_as_too_large(backend_url):
    storage = TIMESTAMP_STORAGE[_backend(backend_url)]
    frame = make_events(300, seed=41, span=timedelta(hours=6))
    at_noon = START + timedelta(hours=3)
    huge = pd.DataFrame(
        [
            {"site": "east", "value": 1e300, "done_at": at_noon},
            {"site": "west", "value": -1e200, "done_at": at_noon},
            {"site": "west", "value": 2e50, "done_at": at_noon + timedelta(minutes=1)},
        ]
    )
    create_events_table(backend_url, pd.concat([frame, huge], ignore_index=True), time_storage=storage)
    source = Source(backend_url, name="ops")
    spec = spec_for(arrival_column="id")
    cutoff = START + timedelta(hours=7)
    batch = source.read_cells(spec, None, cutoff)
    assert batch.excluded == {"too_large": 3}
    assert all(np.isfinite([c.sum_dev, c.sum_dev2]).all() for c in batch.cells)
    assert_cells_equal(as_dict(batch.cells), reference_cells(frame, storage, 100.0, high=cutoff))
    # The next read neither stalls nor counts them again.
    append_events(backend_url, make_events(20, seed=42, start=cutoff, span=timedelta(minutes=30)), time_storage=storage)
    later = source.read_cells(spec, batch.watermark, cutoff + timedelta(hours=1))
    assert later.new_events == 20 and later.excluded == {}
    rows = source.read_rows(spec, cutoff)
    assert rows.attrs["excluded"] == {"too_large": 3} and len(rows) == 300
    assert 60 < source.first_value(spec) < 140
    source.dispose()


@pytest.mark.parametrize("backend_url", EVERY_DATABASE, indirect=True)
def test_ratio_cells_and_bad_denominators(backend_url):
    """The denominator's shifted sums and the cross-product equal pandas; every unusable
    denominator (missing, zero, negative, beyond VALUE_LIMIT) is one bad_denominator, and a row
    whose numerator is already bad keeps the numerator's reason (the order of EXCLUSION_REASONS)."""
    storage = TIMESTAMP_STORAGE[_backend(backend_url)]
    rng = np.random.default_rng(47)
    frame = make_events(240, seed=47, span=timedelta(hours=6))
    frame["units"] = rng.uniform(50.0, 900.0, size=len(frame)).round(1)
    frame["value"] = rng.poisson(frame["units"] * 0.004).astype(float)
    at_noon = START + timedelta(hours=3)
    bad = pd.DataFrame(
        [
            {"site": "east", "value": 1.0, "units": None, "done_at": at_noon},
            {"site": "east", "value": 0.0, "units": 0.0, "done_at": at_noon},
            {"site": "west", "value": 2.0, "units": -40.0, "done_at": at_noon},
            {"site": "west", "value": 1.0, "units": 3e50, "done_at": at_noon},
            {"site": "west", "value": 1.0, "units": -3e200, "done_at": at_noon},
            {"site": "west", "value": 2e50, "units": 10.0, "done_at": at_noon},  # too_large comes first
        ]
    )
    create_events_table(
        backend_url, pd.concat([frame, bad], ignore_index=True), time_storage=storage,
        extra_columns=[("units", DOUBLE)],
    )
    source = Source(backend_url, name="ops")
    shift, shift_den = 1.0, 400.0
    spec = spec_for(metric="ratio", denominator_column="units", shift=shift, shift_den=shift_den, arrival_column="id")
    cutoff = START + timedelta(hours=7)
    batch = source.read_cells(spec, None, cutoff)
    assert batch.excluded == {"too_large": 1, "bad_denominator": 5}
    assert_cells_equal(as_dict(batch.cells), reference_cells(frame, storage, shift, high=cutoff))
    reference = frame.assign(
        group_index=frame["site"].map({"east": 0, "west": 1}),
        den=frame["units"] - shift_den,
        cross=(frame["value"] - shift) * (frame["units"] - shift_den),
    )
    reference["den2"] = reference["den"] ** 2
    for gi, part in reference.groupby("group_index"):
        cells = [c for c in batch.cells if c.group_index == gi]
        for name, column in (("sum_den", "den"), ("sum_den2", "den2"), ("sum_cross", "cross")):
            got = sum(getattr(c, name) for c in cells)
            assert got == pytest.approx(part[column].sum(), rel=1e-9, abs=1e-6), (gi, name)
    rows = source.read_rows(spec, cutoff)
    assert rows.attrs["excluded"] == {"too_large": 1, "bad_denominator": 5}
    assert len(rows) == 240 and sorted(rows["denominator"]) == pytest.approx(sorted(frame["units"]))
    source.dispose()


def _scipy_welch(rows, cutoff):
    """Welch's t from scipy on the raw rows up to ``cutoff`` that a look should use."""
    east = [r["seconds"] for r in rows if r["site"] == "east" and r["done_at"] <= cutoff]
    west = [r["seconds"] for r in rows if r["site"] == "west" and r["done_at"] <= cutoff]
    return len(east), len(west), stats.ttest_ind(east, west, equal_var=False)


@pytest.mark.parametrize("backend_url", EVERY_DATABASE, indirect=True)
def test_a_huge_value_never_stalls_the_looks(backend_url, tmp_path):
    rows = event_rows(np.random.default_rng(43), 400, T0, east=101.0)
    huge = [{"site": "east", "seconds": 1e300, "done_at": T0 + timedelta(hours=2)},
            {"site": "west", "seconds": -3e154, "done_at": T0 + timedelta(hours=9)}]
    seconds_table(backend_url, rows + huge)
    world = LiveWorld(tmp_path, source_url=backend_url, arrival_column="id", planned_per_group=5000)
    for hours in (4, 8, 12, 20):
        record = world.look(T0 + timedelta(hours=hours))
        n1, n2, ref = _scipy_welch(rows, record.cutoff)
        assert (record.n1, record.n2) == (n1, n2)
        assert record.statistic == pytest.approx(ref.statistic, rel=1e-9)
        assert record.p_value == pytest.approx(ref.pvalue, rel=1e-7)
    # Each look records the exclusions so far: one huge row by look 1, both by the last.
    assert world.looks()[0].excluded == {"too_large": 1}
    assert world.looks()[-1].excluded == {"too_large": 2}


# --------------------------------------------------------------------------- numbers among text times


def _text_time_table(url, rows, time_type=TIME_TEXT):
    """An events table whose time column holds exactly the given values (text or numbers)."""
    engine = sa.create_engine(url)
    metadata = sa.MetaData()
    ids = numbering("events_id_seq") if engine.dialect.name == "duckdb" else {}
    table = sa.Table(
        "events", metadata,
        sa.Column("id", sa.Integer, primary_key=True, autoincrement=True, **ids),
        sa.Column("site", sa.String(40)),
        sa.Column("value", DOUBLE),
        sa.Column("done_at", time_type),
        sa.Index("ix_events_done_at", "done_at"),
    )
    metadata.create_all(engine)
    with engine.begin() as conn:
        conn.execute(sa.insert(table), rows)
    engine.dispose()


def _sqlite_raw_table(path, declared: str, rows):
    import sqlite3

    conn = sqlite3.connect(path)
    conn.execute(f"CREATE TABLE events (id INTEGER PRIMARY KEY, site TEXT, value REAL, done_at {declared})")
    conn.execute("CREATE INDEX ix_events_done_at ON events (done_at)")
    conn.executemany("INSERT INTO events (site, value, done_at) VALUES (?, ?, ?)", rows)
    conn.commit()
    conn.close()


@pytest.mark.parametrize("declared", ["DATETIME", "", "NUMERIC"], ids=["datetime", "untyped", "numeric"])
def test_sqlite_numbers_among_iso_text_are_each_read_by_their_storage(tmp_path, declared):
    frame = make_events(400, seed=44, span=timedelta(hours=8))
    times = [stored_time(t, "iso") for t in frame["done_at"]]
    # One event stored as integer epoch seconds, one as real, among ISO text (SQLite keeps both).
    times[100] = int(frame["done_at"][100].timestamp())
    times[300] = frame["done_at"][300].timestamp()
    path = tmp_path / "ops.sqlite"
    _sqlite_raw_table(path, declared, list(zip(frame["site"], frame["value"], times)))
    expected_frame = frame.copy()
    expected_frame.loc[100, "done_at"] = frame["done_at"][100].replace(microsecond=0)
    source = Source(f"sqlite:///{path}")
    spec = spec_for(arrival_column="id")
    final = START + timedelta(hours=9)
    one_shot = source.read_cells(spec, None, final)
    assert one_shot.new_events == 400 and one_shot.excluded == {}
    assert_cells_equal(as_dict(one_shot.cells), reference_cells(expected_frame, "iso", 100.0))
    # Increments: nothing hidden, nothing counted twice.
    since, seen = None, 0
    for hours in (1, 3, 5.5, 7, 9):
        batch = source.read_cells(spec, since, START + timedelta(hours=hours))
        seen += batch.new_events
        since = batch.watermark
    assert seen == 400
    problems = source.check(spec)
    assert any("2 numbers among 398 text times" in p and p.startswith("warning:") for p in problems), problems
    rows = source.read_rows(spec, final)
    assert len(rows) == 400 and str(rows["time"].dt.tz) == "UTC"
    source.dispose()


@pytest.mark.parametrize("backend_url", EVERY_DATABASE, indirect=True)
def test_an_epoch_number_written_as_text_is_a_bad_time_and_hides_nothing(backend_url):
    frame = make_events(200, seed=45, span=timedelta(hours=4))
    rows = [{"site": s, "value": v, "done_at": stored_time(t, "iso")} for s, v, t in frame.itertuples(index=False)]
    rows.insert(0, {"site": "east", "value": 1.0, "done_at": str(int(START.timestamp()))})
    _text_time_table(backend_url, rows)
    source = Source(backend_url)
    spec = spec_for(arrival_column="id")
    first = source.read_cells(spec, None, START + timedelta(hours=2))
    second = source.read_cells(spec, first.watermark, START + timedelta(hours=5))
    assert first.new_events + second.new_events == 200
    assert first.excluded == {"bad_time": 1} and second.excluded == {}
    source.dispose()


# --------------------------------------------------------------------------- unreadable time text


# Unreadable texts that sort before the dates read (or after every date, as words do). One that
# sorts among future dates ('2026-13-01') is counted when a read's range reaches it.
BAD_TIMES = ["02/03/2026 10:00", "yesterday", "2026-02-30 10:00:00", "2026-00-01 10:00:00", "now", "10:00"]


def _read_in_steps(source, spec, hours):
    """Read up to each of ``hours`` after START in turn: (cells added up, exclusions added up, last watermark)."""
    since, total, excluded = None, {}, {}
    for step in hours:
        batch = source.read_cells(spec, since, START + timedelta(hours=step))
        for k, v in as_dict(batch.cells).items():
            n, s1, s2 = total.get(k, (0, 0.0, 0.0))
            total[k] = (n + v[0], s1 + v[1], s2 + v[2])
        for reason, count in batch.excluded.items():
            excluded[reason] = excluded.get(reason, 0) + count
        since = batch.watermark
    return total, excluded, since


@pytest.mark.parametrize("backend_url", EVERY_DATABASE, indirect=True)
def test_unreadable_time_text_is_counted_as_bad_time_once(backend_url):
    frame = make_events(300, seed=46, span=timedelta(hours=6))
    rows = [{"site": s, "value": v, "done_at": stored_time(t, "iso")} for s, v, t in frame.itertuples(index=False)]
    bad = [{"site": "east", "value": 1.0, "done_at": text} for text in BAD_TIMES]
    _text_time_table(backend_url, bad[:3] + rows + bad[3:])
    source = Source(backend_url)
    spec = spec_for(arrival_column="id")
    expected = reference_cells(frame, "iso", 100.0)
    total, excluded, since = _read_in_steps(source, spec, (2, 4, 7))
    assert_cells_equal(total, expected)
    # Words ('yesterday', 'now') sort after every date: they are still counted, once.
    assert excluded == {"bad_time": len(BAD_TIMES)}
    # Rows arriving later with an unreadable time are counted by their arrival.
    append_events(backend_url, [{"site": "west", "value": 2.0, "done_at": "tomorrow"},
                                {"site": "west", "value": 2.0, "done_at": "01/01/2026"}])
    later = source.read_cells(spec, since, START + timedelta(hours=8))
    assert later.excluded == {"bad_time": 2} and later.new_events == 0
    assert source.read_rows(spec, START + timedelta(hours=8)).attrs["excluded"] == {"bad_time": len(BAD_TIMES) + 2}
    problems = source.check(spec)
    assert any(p.startswith("warning:") and "bad_time" in p and "8 rows" in p for p in problems), problems
    source.dispose()


@pytest.mark.parametrize("backend_url", backends("postgresql", "duckdb"), indirect=True)
def test_infinite_timestamps_are_bad_times_and_stop_no_read(backend_url):
    """PostgreSQL and DuckDB timestamps can be ±infinity: each is counted once as bad_time, never fails a read."""
    frame = make_events(300, seed=48, span=timedelta(hours=6))
    infinite = pd.DataFrame([{"site": "east", "value": 1.0, "done_at": "-infinity"},
                             {"site": "west", "value": 2.0, "done_at": "infinity"}])
    create_events_table(backend_url, pd.concat([frame.iloc[:150], infinite, frame.iloc[150:]]).reset_index(drop=True),
                        time_storage="timestamptz" if _backend(backend_url) == "postgresql" else "timestamp")
    source = Source(backend_url)
    spec = spec_for(arrival_column="id")
    total, excluded, since = _read_in_steps(source, spec, (2, 4, 7))
    storage = "timestamptz" if _backend(backend_url) == "postgresql" else "timestamp"
    assert_cells_equal(total, reference_cells(frame, storage, 100.0))
    assert excluded == {"bad_time": 2}
    # A later one is counted by its arrival, once.
    append_events(backend_url, [{"site": "west", "value": 2.0, "done_at": "-infinity"}])
    later = source.read_cells(spec, since, START + timedelta(hours=8))
    assert later.excluded == {"bad_time": 1} and later.new_events == 0
    assert source.read_rows(spec, START + timedelta(hours=8)).attrs["excluded"] == {"bad_time": 3}
    problems = source.check(spec)
    assert any(p.startswith("warning:") and "3 rows whose time is infinity or -infinity" in p for p in problems), problems
    source.dispose()


@pytest.mark.parametrize("backend_url", EVERY_DATABASE, indirect=True)
def test_an_unreadable_earliest_time_does_not_block_the_looks(backend_url, tmp_path):
    rows = event_rows(np.random.default_rng(47), 300, T0, east=101.0)
    text_rows = [{"site": "east", "seconds": 5.0, "done_at": "02/03/2026 10:00"},
                 {"site": "west", "seconds": 5.0, "done_at": "yesterday"}]
    text_rows += [dict(r, done_at=_iso(r["done_at"])) for r in rows]
    seconds_table(backend_url, text_rows, time_type=TIME_TEXT)
    world = LiveWorld(tmp_path, source_url=backend_url, arrival_column="id", planned_per_group=5000)
    first = world.look(T0 + timedelta(hours=5))
    assert first.excluded == {"bad_time": 2}
    for hours in (5, 9, 14):
        record = world.look(T0 + timedelta(hours=hours)) if hours != 5 else first
        n1, n2, ref = _scipy_welch(rows, record.cutoff)
        assert (record.n1, record.n2) == (n1, n2)
        assert record.statistic == pytest.approx(ref.statistic, rel=1e-9)


@pytest.mark.parametrize("backend_url", EVERY_DATABASE, indirect=True)
def test_check_reports_mixed_iso_layouts(backend_url):
    t = START + timedelta(minutes=5)
    rows = [{"site": "east", "value": 1.0, "done_at": t.replace(tzinfo=None).isoformat(sep=" ")} for _ in range(3)]
    rows += [{"site": "west", "value": 1.0, "done_at": t.replace(tzinfo=None).isoformat(sep="T")}]
    rows += [{"site": "west", "value": 1.0, "done_at": t.replace(tzinfo=None).isoformat(sep=" ") + "Z"}]
    _text_time_table(backend_url, rows)
    source = Source(backend_url)
    problems = source.check(spec_for(arrival_column="id"))
    layout = [p for p in problems if "mixes text layouts" in p]
    assert len(layout) == 1 and not layout[0].startswith("warning")
    assert "3 like" in layout[0] and "T06:05:00" in layout[0] and "06:05:00Z" in layout[0], layout
    # Each row is still read at its own instant, though the 'T' row, compared as text, only
    # falls inside a later read's range (what the problem warns about).
    first = source.read_cells(spec_for(arrival_column="id"), None, START + timedelta(hours=1))
    later = source.read_cells(spec_for(arrival_column="id"), first.watermark, START + timedelta(days=1))
    assert (first.new_events, later.new_events) == (4, 1)
    assert {c.slot for c in first.cells + later.cells} == {int(START.timestamp())}
    source.dispose()
