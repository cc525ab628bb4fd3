"""A comparison's event-time window on every tested database and time storage.

Before/after comparisons read events from their start on (inclusive) and their baseline
once, up to the start (exclusive); rows dated before the start that arrive after the first
read are counted as ``before_start``, never used. Checked against pandas on the raw rows.
"""

from __future__ import annotations

from dataclasses import replace
from datetime import timedelta

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa

from monitor.source import Source
from source_helpers import (START, append_events, backend_url, backends, create_events_table,  # noqa: F401
                            make_events, stored_time)
from test_source import as_dict, assert_cells_equal, reference_cells, spec_for, stored_epoch

EVERY_DATABASE = backends("sqlite", "postgresql", "mysql", "duckdb")
BEGIN = START + timedelta(hours=3)        # the change goes live
END = START + timedelta(hours=6)          # a window's end (exclusive)


def _window_reference(frame, storage, low, high, *, inclusive_high):
    """Reference cells of the rows with ``low <= t`` and ``t < high`` (or ``<= high``)."""
    t = stored_epoch(frame, storage)
    keep = t >= low.timestamp()
    keep &= (t <= high.timestamp()) if inclusive_high else (t < high.timestamp())
    part = frame.loc[keep].reset_index(drop=True)
    return reference_cells(part, storage, 100.0, key="crew"), int(keep.sum())


@pytest.mark.parametrize("storage", ["timestamp", "iso", "epoch", "epoch_int"])
@pytest.mark.parametrize("backend_url", EVERY_DATABASE, indirect=True)
def test_a_window_reads_only_its_events(backend_url, storage):
    if storage == "timestamp" and sa.engine.make_url(backend_url).get_backend_name() == "sqlite":
        storage = "iso_z"
    frame = make_events(1200, seed=73, keys=3, span=timedelta(hours=9))
    # Events exactly at the start and the end: the start is in, the end is out.
    edges = frame.iloc[:2].copy()
    edges["done_at"] = [BEGIN, END]
    frame = pd.concat([frame.iloc[2:], edges], ignore_index=True)
    create_events_table(backend_url, frame, time_storage=storage, key_column="crew")
    source = Source(backend_url, name="ops")
    spec = spec_for(key_column="crew", arrival_column="id", start=BEGIN)
    final = START + timedelta(hours=9, minutes=30)

    # The baseline-like read: [start, end), once.
    closed = source.read_cells(replace(spec, end=END), None, final)
    want, count = _window_reference(frame, storage, BEGIN, END, inclusive_high=False)
    assert_cells_equal(as_dict(closed.cells), want)
    assert closed.new_events == count

    # The comparison's own reads from the start on, in increments.
    total, since = {}, None
    for hours in (2, 4.5, 9.5):
        batch = source.read_cells(spec, since, START + timedelta(hours=hours))
        for k, v in as_dict(batch.cells).items():
            n, s1, s2 = total.get(k, (0, 0.0, 0.0))
            total[k] = (n + v[0], s1 + v[1], s2 + v[2])
        since = batch.watermark
    want, count = _window_reference(frame, storage, BEGIN, final, inclusive_high=True)
    assert_cells_equal(total, want)
    assert sum(v[0] for v in total.values()) == count

    # Raw rows for verify honour the same window.
    rows = source.read_rows(replace(spec, end=END), final)
    assert len(rows) == _window_reference(frame, storage, BEGIN, END, inclusive_high=False)[1]

    # Rows dated before the start that arrive later are counted as before_start, never used.
    late = make_events(7, seed=74, keys=3, span=timedelta(hours=2))
    late["id"] = np.arange(len(frame) + 1, len(frame) + 8)
    append_events(backend_url, late, time_storage=storage)
    again = source.read_cells(spec, since, START + timedelta(hours=9, minutes=40))
    assert again.excluded.get("before_start") == 7
    assert again.new_events == 0 and again.late_events == 0
    assert source.count_before(spec, BEGIN, again.watermark.arrival) - source.count_before(
        spec, BEGIN, since.arrival) == 7
    source.dispose()


@pytest.mark.parametrize("declared", ["DATETIME", "", "NUMERIC"], ids=["datetime", "untyped", "numeric"])
def test_sqlite_times_stored_as_numbers_among_text_meet_their_own_bound(tmp_path, declared):
    import sqlite3

    frame = make_events(600, seed=75, span=timedelta(hours=9))
    times = [stored_time(t, "iso") for t in frame["done_at"]]
    # Every third event stored as epoch seconds (real), the rest as ISO text: SQLite keeps both.
    for i in range(0, len(times), 3):
        times[i] = frame["done_at"][i].timestamp()
    path = tmp_path / "ops.sqlite"
    conn = sqlite3.connect(path)
    conn.execute(f"CREATE TABLE events (id INTEGER PRIMARY KEY, site TEXT, value REAL, done_at {declared})")
    conn.execute("CREATE INDEX ix_events_done_at ON events (done_at)")
    conn.executemany("INSERT INTO events (site, value, done_at) VALUES (?, ?, ?)",
                     list(zip(frame["site"], frame["value"], times)))
    conn.commit()
    conn.close()
    source = Source(f"sqlite:///{path}", name="ops")
    final = START + timedelta(hours=10)
    for start, end in ((BEGIN, END), (BEGIN, None), (None, END)):
        batch = source.read_cells(spec_for(start=start, end=end), None, final)
        low = start or START - timedelta(days=1)
        high, inclusive = (end, False) if end is not None else (final, True)
        t = stored_epoch(frame, "iso")
        keep = (t >= low.timestamp()) & ((t <= high.timestamp()) if inclusive else (t < high.timestamp()))
        assert batch.new_events == int(keep.sum()), (start, end)
        assert_cells_equal(as_dict(batch.cells), reference_cells(frame.loc[keep].reset_index(drop=True), "iso", 100.0))
    source.dispose()
