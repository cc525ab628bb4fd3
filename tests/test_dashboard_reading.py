"""The dashboard's pure text (formats and the plain-language reading), checked without Streamlit."""

from __future__ import annotations

import subprocess
import sys
from datetime import datetime, timedelta, timezone

import pytest

from dashboard import formats, reading

REF = datetime(2026, 3, 2, 12, 0, tzinfo=timezone.utc)


def _row(**changes):
    row = {
        "name": "pick-seconds", "version": 1, "state": "collecting", "stopped": False, "archived": False,
        "looks": 9, "groups": ["east", "west"], "metric": "mean", "alpha": 0.05, "estimate": 1.25,
        "ci_low": -0.5, "ci_high": 3.0, "fraction": 0.42, "null_difference": 0.0, "clusters": None,
        "design_effect": None, "next_look_at": (REF + timedelta(minutes=12)).isoformat(),
        "seconds_to_plan": 7200.0,
    }
    row.update(changes)
    return row


def _look(**changes):
    look = {"look": 9, "statistic": 1.1, "boundary_z": 2.9, "warnings": []}
    look.update(changes)
    return look


@pytest.mark.parametrize("seconds, expected", [
    (0.4, "now"), (-30, "30 s ago"), (12 * 60, "in 12 min"), (-3 * 3600, "3.0 h ago"),
], ids=["within-a-second", "behind", "ahead", "hours"])
def test_relative_words(seconds, expected):
    assert formats.relative(seconds, "now") == expected


def test_times_against_an_injected_reference():
    assert formats.when((REF - timedelta(minutes=8)).isoformat(), REF) == "2026-03-02 11:52 UTC (8 min ago)"
    assert formats.when(None, REF) == "—"
    assert formats.clock(REF.isoformat(), REF) == "12:00 UTC"
    assert formats.clock((REF - timedelta(days=1)).isoformat(), REF) == "2026-03-01 12:00 UTC"
    assert formats.next_look_text(_row(), REF) == "12:12 UTC (in 12 min)"
    assert formats.next_look_text(_row(next_look_at=(REF - timedelta(minutes=1)).isoformat()), REF) == "due (11:59 UTC)"
    assert formats.next_look_text(_row(stopped=True), REF) == "stopped"


def test_intervals_and_open_ends():
    assert formats.interval_text(_row()) == "1.25 [-0.5, 3]"
    assert formats.interval_text(_row(ci_high=None)) == "1.25 [-0.5, ∞]"
    assert formats.interval_text(_row(ci_low=None, ci_high=None)) == "1.25 (no interval at this look)"
    assert formats.interval_text(_row(estimate=None)) == "—"
    assert formats.fraction_text(_row()) == "42%"
    assert formats.confidence_percent(_row(alpha=0.01)) == "99%"
    assert formats.comparison_link(_row(name="a b", archived=True, version=2)) == "comparison?name=a%20b&version=2"


def test_reading_while_collecting_says_what_it_does_not_show():
    text = reading.reading(_row(), [_look()])
    assert "east minus west" in text[0] and "1.25 [-0.5, 3]" in text[0]
    assert "not evidence that the groups are the same" in text[1]
    assert text[-1] == reading.CAUTION


def test_reading_warns_of_clustering_only_above_the_shared_threshold():
    from monitor.vocabulary import DESIGN_EFFECT_WARNING

    above = reading.reading(_row(design_effect=DESIGN_EFFECT_WARNING + 0.01), [_look()])
    at = reading.reading(_row(design_effect=DESIGN_EFFECT_WARNING), [_look()])
    assert any("Cluster the comparison" in p for p in above)
    assert not any("Cluster the comparison" in p for p in at)


def test_reading_without_looks():
    assert reading.reading(_row(), []) == ["No look has been recorded yet, so there is nothing to read."]


def test_pure_text_modules_do_not_load_streamlit():
    code = ("import sys; import dashboard.formats, dashboard.reading; "
            "print('streamlit' in sys.modules, 'altair' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.split() == ["False", "False"]
