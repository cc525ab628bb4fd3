"""``gapwatch plan`` and ``gapwatch simulate`` from the command line."""

from __future__ import annotations

import json
import math

import pytest

from monitor import cli
from monitor.stats.planning import fixed_sample_mean, plan_mean, plan_proportion


def _run(capsys, *argv):
    code = cli.main(list(argv))
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_plan_mean_json(capsys):
    code, out, err = _run(capsys, "plan", "--metric", "mean", "--difference", "2.5", "--sd", "12",
                          "--looks", "4", "--json")
    assert code == 0 and err == ""
    data = json.loads(out)
    expected = plan_mean(2.5, 12.0, looks=4)
    for key in ("fixed_per_group", "inflation", "max_per_group", "expected_per_group_null",
                "expected_per_group_alternative"):
        assert data[key] == getattr(expected, key)
    assert data["fixed_per_group"] == math.ceil(fixed_sample_mean(2.5, 12.0))
    assert all(isinstance(data[k], int) for k in ("fixed_per_group", "max_per_group",
                                                  "expected_per_group_null",
                                                  "expected_per_group_alternative"))


def test_plan_proportion_json_with_options(capsys):
    code, out, _ = _run(capsys, "plan", "--metric", "proportion", "--p1", "0.18", "--p2", "0.15",
                        "--alternative", "greater", "--alpha", "0.025", "--power", "0.9",
                        "--spending", "pocock", "--looks", "3", "--futility", "--json")
    assert code == 0
    data = json.loads(out)
    expected = plan_proportion(0.18, 0.15, alternative="greater", alpha=0.025, power=0.9,
                               spending="pocock", looks=3, futility=True)
    assert data["max_per_group"] == expected.max_per_group
    assert data["futility"] is True and len(data["futility_z"]) == 3


def test_plan_text_explains_the_numbers(capsys):
    code, out, _ = _run(capsys, "plan", "--metric", "mean", "--difference", "0.5", "--sd", "1")
    assert code == 0
    plan = plan_mean(0.5, 1.0)
    assert f"{plan.fixed_per_group} events per group" in out
    assert f"plan for {plan.max_per_group} events per group" in out
    assert str(plan.expected_per_group_alternative) in out
    assert "false-alarm rate" in out


def test_infinite_boundary_is_shown_and_serialised(capsys):
    # A tiny first look under O'Brien-Fleming spending may spend nothing: boundary +inf.
    code, out, _ = _run(capsys, "plan", "--metric", "mean", "--difference", "0.5", "--sd", "1",
                        "--looks", "40", "--json")
    assert code == 0
    data = json.loads(out)
    assert len(data["efficacy_z"]) == 40
    assert data["efficacy_z"][0] is None and data["efficacy_z"][-1] > 1.9
    code, out, _ = _run(capsys, "plan", "--metric", "mean", "--difference", "0.5", "--sd", "1",
                        "--looks", "40")
    assert code == 0
    first_row = [line for line in out.splitlines() if line.strip().startswith("1 ")][0]
    assert first_row.split()[-1] == "none"


@pytest.mark.parametrize(
    "argv, words",
    [
        (["--metric", "mean", "--difference", "1", "--sd", "2", "--alpha", "1.5"], ["alpha", "1.5"]),
        (["--metric", "mean", "--difference", "1", "--sd", "2", "--alpha", "0"], ["alpha"]),
        (["--metric", "mean", "--difference", "1", "--sd", "2", "--power", "0.01"], ["power", "0.01"]),
        (["--metric", "mean", "--difference", "1", "--sd", "2", "--power", "1"], ["power"]),
        (["--metric", "mean", "--difference", "1", "--sd", "2", "--spending", "sometimes"], ["sometimes"]),
        (["--metric", "mean", "--difference", "1"], ["--sd"]),
        (["--metric", "mean", "--difference", "0", "--sd", "2"], ["difference"]),
        (["--metric", "mean", "--difference", "1", "--sd", "-2"], ["sd"]),
        (["--metric", "proportion", "--p1", "0.2"], ["--p2"]),
        (["--metric", "proportion", "--p1", "0.2", "--p2", "0.2"], ["p1", "p2"]),
        (["--metric", "proportion", "--p1", "1.2", "--p2", "0.2"], ["p1"]),
        (["--metric", "proportion", "--p1", "0.3", "--p2", "0.2", "--sd", "1"], ["--sd"]),
        (["--metric", "mean", "--difference", "1", "--sd", "2", "--looks", "0"], ["looks"]),
    ],
)
def test_plan_errors_exit_2_with_one_line(capsys, argv, words):
    code, out, err = _run(capsys, "plan", *argv)
    assert code == 2 and out == ""
    assert len(err.strip().splitlines()) == 1
    for word in words:
        assert word in err


@pytest.mark.parametrize(
    "argv, option",
    [
        (["--metric", "mean", "--difference", "abc", "--sd", "2"], "--difference"),
        (["--metric", "mean", "--difference", "1", "--sd", "nan"], "--sd"),
        (["--metric", "mean", "--difference", "1", "--sd", "2", "--looks", "2.5"], "--looks"),
        (["--metric", "median", "--difference", "1", "--sd", "2"], "--metric"),
    ],
)
def test_bad_numbers_exit_2(capsys, argv, option):
    with pytest.raises(SystemExit) as exc:
        cli.main(["plan", *argv])
    assert exc.value.code == 2
    assert option in capsys.readouterr().err


def test_simulate_json(capsys):
    code, out, err = _run(capsys, "simulate", "--metric", "mean", "--difference", "0.5", "--sd", "1",
                          "--looks", "5", "--streams", "4000", "--seed", "3", "--json")
    assert code == 0
    data = json.loads(out)
    for key in ("false_alarm_rate", "false_alarm_rate_se", "power", "power_se", "events_null",
                "events_alternative"):
        assert key in data
    assert abs(data["false_alarm_rate"] - 0.05) < 4 * data["false_alarm_rate_se"]
    assert abs(data["power"] - 0.8) < 4 * data["power_se"]
    assert set(data["events_alternative"]["quantiles"]) == {"25", "50", "75", "90"}
    assert data["plan"]["max_per_group"] == plan_mean(0.5, 1.0).max_per_group
    # Same seed, same figures.
    _, again, _ = _run(capsys, "simulate", "--metric", "mean", "--difference", "0.5", "--sd", "1",
                       "--looks", "5", "--streams", "4000", "--seed", "3", "--json")
    assert json.loads(again) == data


def test_simulate_irregular_text(capsys):
    code, out, _ = _run(capsys, "simulate", "--metric", "proportion", "--p1", "0.3", "--p2", "0.25",
                        "--alternative", "greater", "--futility", "--schedule", "irregular",
                        "--actual-looks", "8", "--streams", "2000", "--seed", "1")
    assert code == 0
    assert "wrongly reported a difference" in out
    assert "irregular" in out
    assert "Events per group" in out


@pytest.mark.parametrize(
    "argv, words",
    [
        (["--streams", "1"], ["streams"]),
        (["--actual-looks", "0"], ["looks"]),
        (["--alpha", "2"], ["alpha"]),
    ],
)
def test_simulate_errors_exit_2(capsys, argv, words):
    code, out, err = _run(capsys, "simulate", "--metric", "mean", "--difference", "0.5", "--sd", "1", *argv)
    assert code == 2 and out == ""
    for word in words:
        assert word in err


def test_simulate_bad_schedule_exits_2(capsys):
    with pytest.raises(SystemExit) as exc:
        cli.main(["simulate", "--metric", "mean", "--difference", "0.5", "--sd", "1", "--schedule", "often"])
    assert exc.value.code == 2


def test_plan_ratio_is_a_mean_plan_with_the_residual_sd_over_the_mean_denominator(capsys):
    code, out, err = _run(capsys, "plan", "--metric", "ratio", "--difference", "0.001", "--residual-sd", "4",
                          "--mean-denominator", "800", "--looks", "4", "--json")
    assert code == 0 and err == ""
    data = json.loads(out)
    # Cochran (1977) §6.3: Var(R) = σ_e² / (n μ_x²), a mean of n values with sd σ_e / μ_x = 0.005.
    expected = plan_mean(0.001, 0.005, looks=4)
    assert data["max_per_group"] == expected.max_per_group
    assert data["fixed_per_group"] == math.ceil(fixed_sample_mean(0.001, 0.005))
    assert (data["metric"], data["residual_sd"], data["mean_denominator"]) == ("ratio", 4.0, 800.0)
    code, out, _ = _run(capsys, "plan", "--metric", "ratio", "--difference", "0.001", "--residual-sd", "4",
                        "--mean-denominator", "800")
    assert code == 0 and "sd 0.005 per row" in out


@pytest.mark.parametrize("argv, message", [
    (("--difference", "0.001", "--residual-sd", "4"), "--mean-denominator is required with --metric ratio"),
    (("--difference", "0.001", "--residual-sd", "4", "--mean-denominator", "800", "--sd", "2"),
     "--sd is for --metric mean"),
    (("--difference", "0.001", "--residual-sd", "4", "--mean-denominator", "0"), "mean_denominator must be positive"),
], ids=["missing", "foreign", "zero"])
def test_plan_ratio_bad_input_is_one_line(capsys, argv, message):
    code, out, err = _run(capsys, "plan", "--metric", "ratio", *argv)
    assert code == 2 and message in err and len(err.strip().splitlines()) == 1
