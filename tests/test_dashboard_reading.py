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


def _t_look(look, statistic, df, boundary, warnings=()):
    return {"look": look, "statistic": statistic, "df": df, "boundary_z": boundary, "warnings": list(warnings)}


def test_a_t_look_is_read_on_the_scale_its_decision_is_taken_on():
    # t = 5.924 on 4 df is above the z boundary 3.301, but its one-sided p-value 0.0020 is not at or
    # below the nominal level 0.00048: the look did not cross, and the reading must say inside.
    text = reading.reading(_row(looks=4), [_t_look(4, 5.924, 4.0, 3.301)])
    assert "t = 5.924 on 4 degrees of freedom (one-sided p-value 0.0020, the same tail as z = 2.873)" in text[0]
    assert "is inside this look's boundary of ±3.301" in text[0]
    assert "at or below 0.00048" in text[0]


def test_a_look_that_tested_nothing_is_not_read_as_a_boundary():
    looks = [_t_look(3, 4.03, 3.0, 3.39), _t_look(4, 4.03, 3.0, None, ["no new information since the last testing look"])]
    text = reading.reading(_row(looks=4), looks)
    assert "boundary of ±3.39" in text[0]
    assert "Look 4 took no test (no new information since the last testing look), so look 3 is the one read here" in text[0]
    assert "±-" not in " ".join(text)


def test_no_testing_look_yet():
    looks = [_t_look(1, None, None, None, ["1 complete pair(s) so far; a paired test needs at least 2"])]
    text = reading.reading(_row(looks=1, estimate=None, ci_low=None, ci_high=None), looks)
    assert "no test has been taken yet (1 complete pair(s) so far" in text[0]
    assert "there is no estimate of east minus west yet" in text[0]


def test_one_sided_boundaries_are_worded_with_their_sign():
    assert reading.boundary_phrase(2.5, "greater") == "2.5"
    assert reading.boundary_phrase(2.5, "less") == "−2.5"
    assert reading.boundary_phrase(2.5, "two-sided") == "±2.5"


@pytest.mark.parametrize("alternative", ["two-sided", "greater", "less"])
@pytest.mark.parametrize("statistic, df, boundary", [
    (461.0, 1.0, 5.367), (10.73, 2.0, 4.333), (-3.2, None, 3.1), (3.0, None, 3.1), (2.2, 40.0, 2.1),
])
def test_the_reading_never_calls_a_crossing_inside(statistic, df, boundary, alternative):
    from dashboard import scale

    text = reading.reading(_row(alternative=alternative), [_t_look(5, statistic, df, boundary)])[0]
    crossed = scale.crossed(scale.z_equivalent(statistic, df), boundary, alternative)
    assert ("is inside this look's boundary" in text) == (not crossed)
