"""Operating characteristics by simulation, checked against the design's promises.

The promises come from the boundary engine (false-alarm rate alpha for any look
schedule) and from planning (power, expected events); Monte Carlo error is
judged with the standard errors the simulation reports.
"""

from __future__ import annotations

import json

import pytest

from monitor.errors import InvalidArgumentError
from monitor.stats.planning import plan_mean, plan_proportion
from monitor.stats.simulate import OperatingCharacteristics, simulate_design


@pytest.fixture(scope="module")
def obf_plan():
    return plan_mean(0.5, 1.0, looks=5)


def test_regular_schedule_keeps_the_promises(obf_plan):
    oc = simulate_design(obf_plan, streams=20_000, seed=1)
    assert isinstance(oc, OperatingCharacteristics)
    assert abs(oc.false_alarm_rate - obf_plan.alpha) < 4 * oc.false_alarm_rate_se
    assert abs(oc.power - obf_plan.power) < 4 * oc.power_se
    # The plan rounds expectations up to whole events; events here are whole too.
    for events, expected in ((oc.events_null, obf_plan.expected_per_group_null),
                             (oc.events_alternative, obf_plan.expected_per_group_alternative)):
        assert expected - 1.5 - 4 * events.mean_se <= events.mean <= expected + 4 * events.mean_se
        q = events.quantiles
        assert q[25] <= q[50] <= q[75] <= q[90] <= obf_plan.max_per_group
    assert oc.false_alarm_rate_ignoring_futility == oc.false_alarm_rate
    assert oc.futility_stop_null == 0.0


def test_irregular_schedules_keep_the_false_alarm_rate(obf_plan):
    oc = simulate_design(obf_plan, streams=20_000, looks=12, schedule="irregular", seed=2, schedules=40)
    assert oc.schedules == 40
    assert abs(oc.false_alarm_rate - obf_plan.alpha) < 4 * oc.false_alarm_rate_se
    # Power moves a little with the schedule, but stays near the plan.
    assert abs(oc.power - obf_plan.power) < 0.03


def test_more_looks_than_planned_still_hold_alpha(obf_plan):
    oc = simulate_design(obf_plan, streams=20_000, looks=20, seed=3)
    assert abs(oc.false_alarm_rate - obf_plan.alpha) < 4 * oc.false_alarm_rate_se
    assert oc.looks == 20


def test_futility_is_non_binding():
    plan = plan_proportion(0.3, 0.24, alternative="greater", futility=True, looks=4)
    oc = simulate_design(plan, streams=20_000, seed=4)
    se = (plan.alpha * (1 - plan.alpha) / oc.streams) ** 0.5
    assert abs(oc.false_alarm_rate_ignoring_futility - plan.alpha) < 4 * se
    assert oc.false_alarm_rate < oc.false_alarm_rate_ignoring_futility
    assert abs(oc.power - plan.power) < 4 * oc.power_se
    assert oc.futility_stop_null > 0.4
    assert abs(oc.events_null.mean - plan.expected_per_group_null) < 1.5 + 4 * oc.events_null.mean_se


def test_less_alternative():
    plan = plan_mean(-2.0, 5.0, alternative="less", spending="pocock", looks=3)
    oc = simulate_design(plan, streams=10_000, seed=5)
    assert abs(oc.false_alarm_rate - plan.alpha) < 4 * oc.false_alarm_rate_se
    assert abs(oc.power - plan.power) < 4 * oc.power_se


def test_seed_repeats_and_differs(obf_plan):
    a = simulate_design(obf_plan, streams=2_000, seed=11, schedule="irregular", schedules=5)
    b = simulate_design(obf_plan, streams=2_000, seed=11, schedule="irregular", schedules=5)
    c = simulate_design(obf_plan, streams=2_000, seed=12, schedule="irregular", schedules=5)
    assert a == b
    assert a != c


def test_standard_errors_are_monte_carlo_errors(obf_plan):
    oc = simulate_design(obf_plan, streams=10_000, seed=6)
    p = oc.false_alarm_rate
    assert oc.false_alarm_rate_se == pytest.approx((p * (1 - p) / 10_000) ** 0.5)
    assert oc.events_alternative.mean_se > 0
    assert set(oc.events_alternative.quantile_se) == {25, 50, 75, 90}


def test_to_dict_is_json_ready(obf_plan):
    # 150 streams are too few for batch-means quantile errors: they come out as None.
    d = json.loads(json.dumps(simulate_design(obf_plan, streams=150, seed=7).to_dict(), allow_nan=False))
    assert d["events_null"]["quantile_se"]["50"] is None
    assert {"false_alarm_rate", "power", "events_null", "events_alternative"} <= set(d)
    assert set(d["events_null"]["quantiles"]) == {"25", "50", "75", "90"}


def test_progress_bar_goes_to_stderr(obf_plan, capsys):
    simulate_design(obf_plan, streams=500, seed=8, progress=True)
    captured = capsys.readouterr()
    assert captured.out == ""
    assert "simulating design" in captured.err


@pytest.mark.parametrize(
    "kwargs, word",
    [
        (dict(streams=1), "streams"),
        (dict(streams=10.5), "streams"),
        (dict(looks=0), "looks"),
        (dict(schedule="random"), "schedule"),
        (dict(seed="x"), "seed"),
        (dict(schedules=0), "schedules"),
    ],
)
def test_bad_arguments_are_named(obf_plan, kwargs, word):
    with pytest.raises(InvalidArgumentError, match=word):
        simulate_design(obf_plan, **kwargs)


def test_plan_must_be_a_plan():
    with pytest.raises(InvalidArgumentError, match="plan"):
        simulate_design({"alpha": 0.05})
