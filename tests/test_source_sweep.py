"""The swept first read (SQLite, ISO-text times) gives exactly what the one-statement read gives.

The sweep reads the text range one 15-minute slot at a time and trusts a slot's cheap screen only
where every row plainly passes; every other slot is read again by the full statement. Here both
reads run on the same tables, full of the rows that must send a slot back to the full statement
(unreadable and rolled-over dates, other layouts and offsets, numbers as text, text that starts
like a number, blobs, huge and infinite values, unknown groups, bad denominators), and around
the gaps the seek must jump. The one-statement read is the reference: the same cells (counts
exact, sums to rounding), the same exclusions and the same watermark, at every cutoff.
"""

from __future__ import annotations

import sqlite3
import threading
from datetime import datetime, timedelta, timezone

import numpy as np
import pytest

from monitor.source import Source
from monitor.source import sweep as sweep_module
from monitor.source.dialects import SQLiteDialect
from test_source import spec_for

UTC = timezone.utc
T0 = datetime(2025, 2, 26, 6, 0, tzinfo=UTC)  # the days around the end of a short month


def _text(moment: datetime) -> str:
    return moment.astimezone(UTC).replace(tzinfo=None).isoformat(sep=" ", timespec="seconds")


def _rows(seed=7):
    """Dense days, a two-day gap, sparse events, and one of every row the screen must not trust."""
    rng = np.random.default_rng(seed)
    rows = []
    moment = T0
    while moment < T0 + timedelta(days=2, hours=20):  # dense: an event every 41 s
        rows.append(["east" if rng.random() < 0.5 else "west", float(rng.normal(100, 12)), _text(moment),
                     f"k{rng.integers(4)}", float(rng.uniform(1, 9)), "day" if moment.hour < 18 else "night",
                     int(rng.random() < 0.3)])
        moment += timedelta(seconds=41)
    for hours in (0, 5, 11, 30):  # sparse, after a gap of two days
        late = T0 + timedelta(days=5, hours=hours, minutes=7)
        rows.append(["west", 101.5, _text(late), "k1", 2.0, "day", 1])
    odd_values = [None, "abc", " 12 ", "1.0e+4abc", b"\x00", 1e60, float("inf"), -float("inf"), "nan", 7]
    for i, value in enumerate(odd_values):
        rows.append(["east", value, _text(T0 + timedelta(hours=2, minutes=3 * i, seconds=5)), "k2", 3.0, "day", value])
    odd_times = [
        None, "pending", "2025-02-29 10:00:00", "2025-02-28 23:5x:00", "2025-02-27T10:00:00",
        "2025-02-27 10:00:00+05:00", "2025-02-27 11:14:59.9996", "2025-02-27 12:00", int((T0 + timedelta(hours=9)).timestamp()),
        (T0 + timedelta(hours=10)).timestamp() + 0.25, "2025-02-31 00:00:00",
    ]
    for i, when in enumerate(odd_times):
        rows.append(["west", 99.0 + i, when, "k3", 4.0, "day", i % 2])
    rows.append(["north", 100.0, _text(T0 + timedelta(hours=3)), "k0", 1.0, "day", 1])  # unknown group
    rows.append([None, 100.0, _text(T0 + timedelta(hours=3, minutes=1)), "k0", 1.0, "day", 0])
    for i, den in enumerate([0.0, -1.0, None, "x", 1e60]):  # bad denominators
        rows.append(["west", 100.0, _text(T0 + timedelta(hours=4, minutes=i)), "k1", den, "day", 1])
    for i, done in enumerate([0, 1, 1.0, 0.5, 2, "1"]):  # for the rate: values that are not 0 or 1
        rows.append(["east", 100.0, _text(T0 + timedelta(hours=5, minutes=i)), "k1", 1.0, "day", done])
    return rows


def _table(path, rows, value_type="REAL", time_type="TEXT"):
    conn = sqlite3.connect(path)
    conn.execute(f"CREATE TABLE events (id INTEGER PRIMARY KEY, site TEXT, value {value_type}, done_at {time_type},"
                 " crew TEXT, hours REAL, shift_name TEXT, done)")
    conn.execute("CREATE INDEX ix_events_done_at ON events (done_at)")
    conn.executemany("INSERT INTO events (site, value, done_at, crew, hours, shift_name, done)"
                     " VALUES (?, ?, ?, ?, ?, ?, ?)", rows)
    conn.commit()
    conn.close()


def _batch_dict(batch):
    cells = {(c.group_index, c.slot, c.key): c for c in batch.cells}
    return cells, batch.excluded, batch.new_events, batch.late_events, batch.watermark


def _assert_same(swept, single):
    got, want = _batch_dict(swept), _batch_dict(single)
    assert set(got[0]) == set(want[0])
    for key, cell in want[0].items():
        other = got[0][key]
        assert (other.n, other.late) == (cell.n, cell.late), key
        for name in ("sum_dev", "sum_dev2", "sum_den", "sum_den2", "sum_cross"):
            assert getattr(other, name) == pytest.approx(getattr(cell, name), rel=1e-9, abs=1e-6), (key, name)
    assert got[1:] == want[1:]


@pytest.fixture
def sweeps(monkeypatch):
    """Counts the first reads that swept (the others gave up and ran one statement)."""
    seen = {"swept": 0}
    walk = sweep_module._walk

    def counting_walk(*args):
        rows = walk(*args)
        seen["swept"] += isinstance(rows, list)
        return rows

    monkeypatch.setattr(sweep_module, "_walk", counting_walk)
    return seen


def _one_statement(monkeypatch, url, spec, cutoff):
    monkeypatch.setattr(SQLiteDialect, "sweeps_first_reads", False)
    try:
        source = Source(url)
        return source.read_cells(spec, None, cutoff)
    finally:
        monkeypatch.setattr(SQLiteDialect, "sweeps_first_reads", True)
        source.dispose()


def _assert_sweeps_match(monkeypatch, url, spec, cutoffs):
    """A first read up to each cutoff, swept and as one statement, is the same; returns the last swept."""
    for cutoff in cutoffs:
        source = Source(url)
        swept = source.read_cells(spec, None, cutoff)
        source.dispose()
        _assert_same(swept, _one_statement(monkeypatch, url, spec, cutoff))
    return swept


SPECS = {
    "mean": dict(arrival_column="id"),
    "mean-rowid": dict(),
    "range": dict(arrival_column="id", valid_range=(80.0, 130.0)),
    "rate": dict(arrival_column="id", metric="proportion", value_column="done", shift=0.5),
    "ratio": dict(arrival_column="id", metric="ratio", denominator_column="hours", shift=20.0, shift_den=5.0),
    "keyed": dict(arrival_column="id", key_column="crew"),
    "start": dict(arrival_column="id", start=T0 + timedelta(hours=7, minutes=31)),
    "filter": dict(arrival_column="id", filters=(("shift_name", "=", "day"),)),
}
CUTOFFS = [T0 - timedelta(hours=1), T0 + timedelta(hours=6, minutes=15), T0 + timedelta(days=1, hours=3, seconds=17),
           T0 + timedelta(days=9)]


@pytest.mark.parametrize("name", SPECS)
def test_the_sweep_reads_exactly_what_one_statement_reads(tmp_path, monkeypatch, sweeps, name):
    path = tmp_path / "ops.sqlite"
    _table(path, _rows())
    url = f"sqlite:///{path}"
    spec = spec_for(**SPECS[name])
    _assert_sweeps_match(monkeypatch, url, spec, CUTOFFS)
    assert sweeps["swept"] >= 2  # every cutoff after the first text (and the start) swept
    final = _one_statement(monkeypatch, url, spec, CUTOFFS[-1])
    assert final.new_events > 2000 and final.excluded  # the table's bad rows were read and counted


def test_numbers_kept_as_text_go_back_to_the_full_statement(tmp_path, monkeypatch, sweeps):
    # A value column declared TEXT keeps '12' as text: the screen never trusts it, the full statement reads it.
    path = tmp_path / "ops.sqlite"
    rows = [[site, str(value) if i % 3 else value, when, crew, hours, shift, done]
            for i, (site, value, when, crew, hours, shift, done) in enumerate(_rows(seed=9)) if isinstance(value, float)]
    _table(path, rows, value_type="TEXT")
    url = f"sqlite:///{path}"
    spec = spec_for(arrival_column="id")
    source = Source(url)
    swept = source.read_cells(spec, None, CUTOFFS[-1])
    source.dispose()
    _assert_same(swept, _one_statement(monkeypatch, url, spec, CUTOFFS[-1]))
    assert sweeps["swept"] == 1 and swept.new_events > 4000


def test_later_reads_after_a_sweep_hide_nothing_and_count_nothing_twice(tmp_path, monkeypatch):
    path = tmp_path / "ops.sqlite"
    rows = _rows()
    _table(path, rows)
    url = f"sqlite:///{path}"
    spec = spec_for(arrival_column="id")
    source = Source(url)
    since, seen, excluded = None, 0, 0
    for cutoff in (T0 + timedelta(hours=20), T0 + timedelta(days=2), T0 + timedelta(days=9)):
        batch = source.read_cells(spec, since, cutoff)
        seen += batch.new_events
        excluded += sum(batch.excluded.values())
        since = batch.watermark
    source.dispose()
    everything = _one_statement(monkeypatch, url, spec, T0 + timedelta(days=9))
    assert seen == everything.new_events
    assert excluded == sum(everything.excluded.values())


def test_rows_written_during_a_sweep_are_read_later_never_lost(tmp_path, monkeypatch):
    """The sweep's statements share one snapshot: a row written into a slot it has passed is late, not lost."""
    path = tmp_path / "ops.sqlite"
    _table(path, _rows())
    with sqlite3.connect(path) as conn:
        conn.execute("PRAGMA journal_mode=WAL")
    url = f"sqlite:///{path}"
    spec = spec_for(arrival_column="id")
    early, later = _text(T0 + timedelta(minutes=20)), _text(T0 + timedelta(days=2, hours=1))
    written = threading.Event()
    run = sweep_module._Raw.run
    calls = {"n": 0}

    def write_once_midway(self, cursor, values):
        calls["n"] += 1
        if calls["n"] == 50 and not written.is_set():
            writer = sqlite3.connect(path)
            writer.executemany("INSERT INTO events (site, value, done_at, crew, hours, shift_name, done)"
                               " VALUES (?, ?, ?, ?, ?, ?, ?)",
                               [["east", 5000.0, early, "k1", 1.0, "day", 1], ["west", 5000.0, later, "k1", 1.0, "day", 0]])
            writer.commit()
            writer.close()
            written.set()
        return run(self, cursor, values)

    cutoff = T0 + timedelta(days=3)
    before = _one_statement(monkeypatch, url, spec, cutoff)
    monkeypatch.setattr(sweep_module._Raw, "run", write_once_midway)
    source = Source(url)
    first = source.read_cells(spec, None, cutoff)
    assert written.is_set()
    monkeypatch.setattr(sweep_module._Raw, "run", run)
    # Neither new row is in the first read (one snapshot), though the sweep reached the later one's slot after the write.
    _assert_same(first, before)
    second = source.read_cells(spec, first.watermark, cutoff + timedelta(hours=1))
    source.dispose()
    assert second.new_events == 2 and second.late_events == 2  # both arrive late, once


LAYOUTS = {
    "space-seconds": lambda m: m.astimezone(UTC).replace(tzinfo=None).isoformat(sep=" ", timespec="seconds"),
    "t-millis-z": lambda m: m.astimezone(UTC).replace(tzinfo=None).isoformat(sep="T", timespec="milliseconds") + "Z",
    "offset": lambda m: m.astimezone(timezone(timedelta(hours=5, minutes=45))).isoformat(sep="T", timespec="seconds"),
    "minutes": lambda m: m.astimezone(UTC).replace(tzinfo=None).isoformat(sep=" ", timespec="minutes"),
}


@pytest.mark.parametrize("layout", LAYOUTS)
def test_every_iso_layout_sweeps_to_the_same_cells(tmp_path, monkeypatch, sweeps, layout):
    write = LAYOUTS[layout]
    rng = np.random.default_rng(11)
    rows, moment = [], T0
    while moment < T0 + timedelta(days=1, hours=7):
        rows.append(["east" if rng.random() < 0.5 else "west", float(rng.normal(100, 12)), write(moment),
                     "k1", 2.0, "day", 1])
        moment += timedelta(seconds=int(rng.integers(5, 120)))
    # Another layout and another offset among them: read at their own instants, in other slots.
    rows.append(["east", 90.0, _text(T0 + timedelta(hours=3, minutes=7)), "k1", 2.0, "day", 1])
    rows.append(["west", 95.0, (T0 + timedelta(hours=4)).astimezone(timezone(timedelta(hours=-3))).isoformat(),
                 "k1", 2.0, "day", 1])
    path = tmp_path / "ops.sqlite"
    _table(path, rows)
    url = f"sqlite:///{path}"
    spec = spec_for(arrival_column="id")
    swept = _assert_sweeps_match(monkeypatch, url, spec, (T0 + timedelta(hours=5, minutes=7, seconds=30),
                                                           T0 + timedelta(days=2)))
    assert sweeps["swept"] == 2 and swept.new_events > 1000

@pytest.mark.parametrize("text", ["2025-02-26 06:00:00", "2025-02-26T06:00:00.123Z", "2025-02-26T06:00:00+05:45",
                                  "2025-02-26T06:00-03:30", "2025-02-26 06:00:00.1234567"])
def test_slot_starts_are_written_as_the_layout_writes_them(text):
    from monitor.source.times import IsoLayout

    layout = IsoLayout.detect(text)
    texts = sweep_module._SlotTexts(layout)
    rng = np.random.default_rng(5)
    for slot in [0, -900, 951782400, 4102444800, *(int(s) * 900 for s in rng.integers(-3_000_000, 3_000_000, 500))]:
        assert texts(slot) == sweep_module._text(layout, slot), slot


def _as_epochs(rows, real):
    """The rows with each readable text time stored as epoch seconds (real or integer); other times dropped."""
    out = []
    for row in rows:
        when = row[2]
        if isinstance(when, str):
            try:
                moment = datetime.fromisoformat(when)
            except ValueError:
                continue
            moment = moment if moment.tzinfo else moment.replace(tzinfo=UTC)
            when = moment.timestamp() + 0.25 if real else int(moment.timestamp())
        out.append([row[0], row[1], when, *row[3:]])
    return out


@pytest.mark.parametrize("real", [False, True], ids=["integer", "real"])
@pytest.mark.parametrize("name", ["mean", "rate", "ratio", "keyed", "start", "filter"])
def test_epoch_seconds_sweep_to_the_cells_of_one_statement(tmp_path, monkeypatch, sweeps, name, real):
    rows = _as_epochs(_rows(), real)
    # Numbers no time can be (before the year 1, after 9999) and negative epochs among them.
    rows += [["east", 100.0, -1e12, "k1", 1.0, "day", 1], ["west", 100.0, 1e13, "k1", 1.0, "day", 1],
             ["east", 100.0, -86400.5, "k1", 1.0, "day", 1]]
    path = tmp_path / "ops.sqlite"
    _table(path, rows, time_type="INTEGER" if not real else "REAL")
    url = f"sqlite:///{path}"
    spec = spec_for(**SPECS[name])
    _assert_sweeps_match(monkeypatch, url, spec, CUTOFFS)
    assert sweeps["swept"] >= 2  # every cutoff after the first time (and the start) swept
