"""Starting a comparison at a date with a filter on its time column, as the README shows.

The README tells a user who wants a comparison to count only events from a date on to add
``filters = [["<time column>", ">=", "<ISO date-time>"]]`` (epoch seconds as a number for an
epoch column). The text is read by the one time rule (no zone: UTC) and written the way the
column stores times, as a cutoff is. These tests hold that advice to account on each kind of
time column.
"""

from __future__ import annotations

from datetime import timedelta

import pytest

from monitor.source.reader import Source, SourceSpec
from source_helpers import START, backend_url, backends, create_events_table, make_events  # noqa: F401

FROM = START + timedelta(hours=5)


def _spec(value):
    return SourceSpec(table="events", group_column="site", groups=("east", "west"), value_column="value",
                      time_column="done_at", shift=100.0, filters=(("done_at", ">=", value),))


def _expected(frame):
    return int((frame["done_at"] >= FROM).sum())


# (storage, the filter value written as that column stores times)
CASES = [
    ("iso", "2026-03-02 11:00:00"),
    ("iso", "2026-03-02T11:00:00Z"),
    ("iso", "2026-03-02T12:00:00+01:00"),
    ("iso_z", "2026-03-02T11:00:00Z"),
    ("iso_z", "2026-03-02 11:00"),
    ("epoch", FROM.timestamp()),
]


@pytest.mark.parametrize("storage, value", CASES, ids=[f"{c[0]}-{c[1]}" for c in CASES])
def test_a_time_filter_starts_a_sqlite_comparison_at_a_date(tmp_path, storage, value):
    frame = make_events(600, seed=5)
    url = f"sqlite:///{tmp_path / 'ops.sqlite'}"
    create_events_table(url, frame, time_storage=storage)
    batch = Source(url).read_cells(_spec(value), None, START + timedelta(days=1))
    assert batch.new_events == _expected(frame)
    assert 0 < batch.new_events < len(frame)


@pytest.mark.parametrize("backend_url", backends("postgresql", "duckdb"), indirect=True)
@pytest.mark.parametrize("value", ["2026-03-02T11:00:00Z", "2026-03-02 12:00:00+01:00", "2026-03-02 11:00"],
                         ids=["Z", "offset", "no zone"])
def test_a_time_filter_starts_a_timestamp_comparison_at_a_date(backend_url, value):
    if backend_url.startswith("duckdb"):
        pytest.importorskip("duckdb_engine")
    frame = make_events(600, seed=6)
    storage = "timestamptz" if backend_url.startswith("postgresql") else "timestamp"
    create_events_table(backend_url, frame, time_storage=storage)
    batch = Source(backend_url).read_cells(_spec(value), None, START + timedelta(days=1))
    assert batch.new_events == _expected(frame)
