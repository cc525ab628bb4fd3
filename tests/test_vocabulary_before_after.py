"""The start of a before/after comparison and the words for the gap before it."""

from datetime import datetime, timezone
from zoneinfo import ZoneInfo

import pytest

from monitor.vocabulary import baseline_gap_words, parse_moment

UTC = timezone.utc


@pytest.mark.parametrize("text, zone, want", [
    ("2026-03-04T06:00:00+01:00", UTC, datetime(2026, 3, 4, 5, 0, tzinfo=UTC)),
    ("2026-03-04T06:00:00Z", ZoneInfo("Europe/Lisbon"), datetime(2026, 3, 4, 6, 0, tzinfo=UTC)),
    ("2026-03-04 06:00", ZoneInfo("Europe/Lisbon"), datetime(2026, 3, 4, 6, 0, tzinfo=UTC)),
    # Naive in summer time: the zone's own offset that day.
    ("2026-07-04 06:00", ZoneInfo("Europe/Lisbon"), datetime(2026, 7, 4, 5, 0, tzinfo=UTC)),
    (datetime(2026, 3, 4, 6, 0), ZoneInfo("America/Chicago"), datetime(2026, 3, 4, 12, 0, tzinfo=UTC)),
])
def test_parse_moment(text, zone, want):
    assert parse_moment(text, "start", zone) == want


@pytest.mark.parametrize("bad", ["yesterday", "2026-13-01T00:00", 20260304, None])
def test_parse_moment_names_the_key(bad):
    with pytest.raises(ValueError, match=r"start must be an ISO-8601 date-time"):
        parse_moment(bad, "start")


def test_gap_words_for_durations_rates_and_others():
    assert baseline_gap_words(("hollin", "saltmarsh"), 7.06, 5.2, 8.9, value_column="seconds") == \
        "before the change, hollin was 7.1 seconds slower than saltmarsh (interval 5.2 to 8.9)"
    assert "faster" in baseline_gap_words(("a", "b"), -1.0, -2.0, -0.5, value_column="pick_minutes")
    assert baseline_gap_words(("wren", "heron"), -0.031, -0.05, -0.01, value_column="resolved",
                              metric="proportion") == (
        "before the change, wren was 3.1 percentage points lower than heron in resolved (interval -5.0 to -1.0)")
    assert baseline_gap_words(("a", "b"), 2.0, None, None, value_column="cases") == \
        "before the change, a was 2 higher than b in cases"
    assert "not measured yet" in baseline_gap_words(("a", "b"), None, None, None)
    assert "nan" not in baseline_gap_words(("a", "b"), float("nan"), None, None)
