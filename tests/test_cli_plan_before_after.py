"""``gapwatch plan`` for a before/after comparison (a baseline before the start)."""

from __future__ import annotations

import json

import pytest

from monitor import cli
from monitor.stats.before_after import plan_before_after


def _run(capsys, *argv):
    code = cli.main(list(argv))
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_plan_before_after_json_matches_the_library(capsys):
    code, out, err = _run(capsys, "plan", "--metric", "mean", "--difference", "-6", "--sd", "50",
                          "--baseline-days", "28", "--day-sd", "4", "--events-per-day", "400", "--looks", "3",
                          "--json")
    assert code == 0 and err == ""
    data = json.loads(out)
    want = plan_before_after(-6.0, 50.0, day_sd=4.0, events_per_day=400, baseline_days=28, looks=3)
    for key in ("after_days", "after_days_exact", "planned_per_group", "inflation", "planned_df"):
        assert data[key] == pytest.approx(getattr(want, key), rel=1e-12)


def test_plan_before_after_text_with_daily_looks(capsys):
    code, out, _ = _run(capsys, "plan", "--metric", "mean", "--difference", "-6", "--sd", "50",
                        "--baseline-days", "28", "--day-sd", "4", "--events-per-day", "400",
                        "--daily-from", "10")
    assert code == 0
    want = plan_before_after(-6.0, 50.0, day_sd=4.0, events_per_day=400, baseline_days=28, first_look_day=10)
    assert f"plan for {want.after_days_exact:.1f} days after the start" in out
    assert "one look a day from day 10" in out
    assert out.count("\n") > 10 and "nan" not in out and "None" not in out


def test_plan_before_after_rates(capsys):
    code, out, _ = _run(capsys, "plan", "--metric", "proportion", "--p1", "0.78", "--p2", "0.75",
                        "--baseline-days", "28", "--day-sd", "0.015", "--events-per-day", "300", "--json")
    assert code == 0
    data = json.loads(out)
    assert data["metric"] == "proportion" and data["rate"] == 0.75
    assert data["difference"] == pytest.approx(0.03)


@pytest.mark.parametrize("argv, message", [
    (["--difference", "2", "--sd", "5", "--day-sd", "1"], "--day-sd plans a before/after comparison"),
    (["--difference", "2", "--sd", "5", "--baseline-days", "14"], "--events-per-day is required"),
    (["--difference", "2", "--sd", "5", "--baseline-days", "1", "--day-sd", "3", "--events-per-day", "50"],
     "baseline_days 1 is too short"),
])
def test_plan_before_after_refusals(capsys, argv, message):
    code, out, err = _run(capsys, "plan", "--metric", "mean", *argv)
    assert code == 2 and message in err and out == ""


def test_plan_refuses_a_before_after_ratio_in_one_line(capsys):
    code, out, err = _run(capsys, "plan", "--metric", "ratio", "--difference", "0.001", "--residual-sd", "4",
                          "--mean-denominator", "800", "--baseline-days", "28", "--events-per-day", "400")
    lines = err.strip().splitlines()
    assert code == 2 and out == "" and len(lines) == 1, err
    assert "--baseline-days" in lines[0] and "ratio" in lines[0]
