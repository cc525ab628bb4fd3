"""Planning: fixed-sample sizes, inflation factors and expected events.

References: statsmodels (NormalIndPower, zt_ind_solve_power,
samplesize_proportions_2indep_onetail, proportion_effectsize), Zar (1999)
Example 24.26, the inflation-factor tables of Jennison & Turnbull (2000) (see
tests/reference_planning.py), and Monte Carlo over simulated z statistics.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.power import NormalIndPower, zt_ind_solve_power
from statsmodels.stats.proportion import proportion_effectsize, samplesize_proportions_2indep_onetail

from monitor.stats.boundaries import crossing_probabilities
from monitor.errors import InvalidArgumentError, UnknownSpendingError
from monitor.stats.planning import (
    Plan,
    fixed_sample_mean,
    fixed_sample_proportion,
    inflation_for_boundaries,
    plan_mean,
    plan_proportion,
)
from tests import reference_planning as ref


def _monte_carlo(fractions, upper, lower, drift, streams, seed):
    """Share crossing ``upper`` first, and mean fraction at the stop, from simulated paths."""
    rng = np.random.default_rng(seed)
    t = np.asarray(fractions)
    steps = np.diff(np.concatenate([[0.0], t]))
    z = np.cumsum(drift * steps + np.sqrt(steps) * rng.standard_normal((streams, t.size)), axis=1) / np.sqrt(t)
    up = z >= np.asarray(upper)
    down = z <= np.asarray(lower) if lower is not None else np.zeros_like(up)
    stop_any = up | down
    stop_any[:, -1] = True
    stop = np.argmax(stop_any, axis=1)
    crossed_up = up[np.arange(streams), stop]
    return crossed_up.mean(), t[stop]


# ---------------------------------------------------------- fixed sample


@pytest.mark.parametrize("effect", [0.2, 0.5, 1.0])
def test_fixed_mean_matches_statsmodels(effect):
    exact = 2 * (stats.norm.isf(0.025) + stats.norm.isf(0.2)) ** 2 / effect**2
    assert fixed_sample_mean(effect * 3.0, 3.0) == pytest.approx(exact, rel=1e-12)
    # statsmodels counts the far tail of the two-sided test too, so it needs slightly fewer.
    sm = NormalIndPower().solve_power(effect_size=effect, alpha=0.05, power=0.8, alternative="two-sided")
    assert fixed_sample_mean(effect, 1.0) == pytest.approx(sm, rel=2e-3)
    assert fixed_sample_mean(effect, 1.0) >= sm
    one = zt_ind_solve_power(effect_size=effect, alpha=0.05, power=0.8, alternative="larger")
    assert fixed_sample_mean(effect, 1.0, alternative="greater") == pytest.approx(one, rel=1e-6)


@pytest.mark.parametrize(
    "p1, p2, power, alternative",
    [(0.6, 0.4, 0.8, "two-sided"), (0.12, 0.1, 0.9, "two-sided"), (0.3, 0.2, 0.8, "greater"), (0.05, 0.1, 0.8, "two-sided")],
)
def test_fixed_proportion_matches_statsmodels(p1, p2, power, alternative):
    sm_alt = "larger" if alternative == "greater" else alternative
    sm = samplesize_proportions_2indep_onetail(p1 - p2, p2, power, alpha=0.05, alternative=sm_alt)
    assert fixed_sample_proportion(p1, p2, power=power, alternative=alternative) == pytest.approx(sm, rel=1e-9)
    # Cohen's arcsine effect size gives a close, not equal, answer.
    h = proportion_effectsize(p1, p2)
    approx = NormalIndPower().solve_power(effect_size=abs(h), alpha=0.05, power=power,
                                          alternative="two-sided" if alternative == "two-sided" else "larger")
    assert fixed_sample_proportion(p1, p2, power=power, alternative=alternative) == pytest.approx(approx, rel=0.05)


def test_fixed_proportion_reproduces_zar_example():
    case = ref.ZAR_24_26
    n = fixed_sample_proportion(case["p1"], case["p2"], alpha=case["alpha"], power=case["power"])
    d = abs(case["p1"] - case["p2"])
    corrected = n / 4 * (1 + math.sqrt(1 + 4 / (n * d))) ** 2
    assert corrected == pytest.approx(case["n_corrected"], abs=1e-3)


def test_fixed_proportion_has_the_planned_power():
    p1, p2 = 0.25, 0.18
    n = fixed_sample_proportion(p1, p2)
    pbar = (p1 + p2) / 2
    null_se = math.sqrt(2 * pbar * (1 - pbar) / n)
    alt_se = math.sqrt((p1 * (1 - p1) + p2 * (1 - p2)) / n)
    power = stats.norm.sf((stats.norm.isf(0.025) * null_se - (p1 - p2)) / alt_se)
    assert power == pytest.approx(0.8, abs=1e-9)


# ------------------------------------------------------------- inflation


@pytest.mark.parametrize("looks", [2, 3, 4, 5])
def test_classical_pocock_inflation(looks):
    t = np.arange(1, looks + 1) / looks
    c = ref.POCOCK_CONSTANT[looks]
    up, low = crossing_probabilities(t, np.full(looks, c), np.full(looks, -c))
    assert up.sum() + low.sum() == pytest.approx(0.05, abs=5e-4)  # the constant is for alpha 0.05
    r = inflation_for_boundaries(t, np.full(looks, c), np.full(looks, -c), 0.05, 0.8, "two-sided")
    assert r == pytest.approx(ref.POCOCK_INFLATION[looks], abs=2e-3)


@pytest.mark.parametrize("looks", [2, 3, 4, 5])
def test_classical_obrien_fleming_inflation(looks):
    k = np.arange(1, looks + 1)
    t = k / looks
    b = ref.OBRIEN_FLEMING_CONSTANT[looks] * np.sqrt(looks / k)
    up, low = crossing_probabilities(t, b, -b)
    assert up.sum() + low.sum() == pytest.approx(0.05, abs=5e-4)
    r = inflation_for_boundaries(t, b, -b, 0.05, 0.8, "two-sided")
    assert r == pytest.approx(ref.OBRIEN_FLEMING_INFLATION[looks], abs=2e-3)


def test_lan_demets_obrien_fleming_plan_and_its_power_by_monte_carlo():
    plan = plan_mean(1.0, 4.0, looks=5)
    assert plan.inflation == pytest.approx(ref.LAN_DEMETS_OBF_INFLATION_5, abs=5e-3)
    assert plan.efficacy_z == pytest.approx(ref.LAN_DEMETS_OBF_BOUNDARIES_5, abs=1e-3)
    upper = np.array(plan.efficacy_z)
    streams = 40_000
    power, fraction = _monte_carlo(plan.fractions, upper, -upper, plan.drift, streams, seed=5)
    assert abs(power - 0.8) < 3 * math.sqrt(0.16 / streams)
    mean_events = fraction.mean() * plan.max_per_group
    se = fraction.std(ddof=1) * plan.max_per_group / math.sqrt(streams)
    # The plan rounds its expectation up to a whole event.
    assert plan.expected_per_group_alternative - 1 - 4 * se <= mean_events <= plan.expected_per_group_alternative + 4 * se
    # At the fixed-sample drift the sequential design falls short of the planned power.
    short, _ = _monte_carlo(plan.fractions, upper, -upper, plan.fixed_drift, streams, seed=6)
    assert short < 0.8 - 3 * math.sqrt(0.16 / streams)


def test_single_look_plan_is_the_fixed_sample_plan():
    plan = plan_mean(2.0, 10.0, looks=1)
    assert plan.inflation == pytest.approx(1.0, abs=1e-9)
    assert plan.max_per_group == plan.fixed_per_group == math.ceil(fixed_sample_mean(2.0, 10.0))
    assert plan.expected_per_group_null == plan.expected_per_group_alternative == plan.max_per_group
    assert plan.drift == pytest.approx(plan.fixed_drift, abs=1e-8)


def test_more_looks_and_pocock_cost_more():
    obf = [plan_mean(1.0, 5.0, looks=k).inflation for k in (1, 2, 5, 10)]
    assert obf == sorted(obf)
    assert plan_mean(1.0, 5.0, spending="pocock").inflation > plan_mean(1.0, 5.0).inflation
    pocock = plan_mean(1.0, 5.0, spending="pocock")
    # Pocock-type spending stops earlier when the difference is there.
    assert pocock.expected_per_group_alternative / pocock.max_per_group < 0.75


def test_expected_events_under_no_difference_by_monte_carlo():
    plan = plan_proportion(0.3, 0.25, spending="pocock", looks=4)
    upper = np.array(plan.efficacy_z)
    streams = 40_000
    _, fraction = _monte_carlo(plan.fractions, upper, -upper, 0.0, streams, seed=8)
    mean_events = fraction.mean() * plan.max_per_group
    se = fraction.std(ddof=1) * plan.max_per_group / math.sqrt(streams)
    assert plan.expected_per_group_null - 1 - 4 * se <= mean_events <= plan.expected_per_group_null + 4 * se


def test_futility_plan_holds_power_when_futility_is_followed():
    plan = plan_mean(0.4, 1.0, alternative="greater", futility=True, looks=4)
    no_futility = plan_mean(0.4, 1.0, alternative="greater", looks=4)
    assert plan.futility_z is not None and no_futility.futility_z is None
    assert plan.futility_z[-1] == pytest.approx(plan.efficacy_z[-1])
    assert plan.efficacy_z == pytest.approx(no_futility.efficacy_z)  # non-binding
    assert plan.max_per_group > no_futility.max_per_group
    assert plan.expected_per_group_null < 0.7 * no_futility.expected_per_group_null
    streams = 40_000
    power, fraction = _monte_carlo(plan.fractions, plan.efficacy_z, plan.futility_z, plan.drift, streams, seed=9)
    assert abs(power - 0.8) < 3 * math.sqrt(0.16 / streams)
    _, null_fraction = _monte_carlo(plan.fractions, plan.efficacy_z, plan.futility_z, 0.0, streams, seed=10)
    mean_events = null_fraction.mean() * plan.max_per_group
    se = null_fraction.std(ddof=1) * plan.max_per_group / math.sqrt(streams)
    assert plan.expected_per_group_null - 1 - 4 * se <= mean_events <= plan.expected_per_group_null + 4 * se


def test_two_sided_futility_plan():
    plan = plan_mean(0.4, 1.0, futility=True, looks=3)
    assert plan.futility_z is not None
    assert plan.expected_per_group_null < plan.max_per_group


def test_less_mirrors_greater():
    g = plan_proportion(0.3, 0.2, alternative="greater", looks=3)
    s = plan_proportion(0.2, 0.3, alternative="less", looks=3)
    assert (s.max_per_group, s.expected_per_group_null, s.expected_per_group_alternative) == (
        g.max_per_group, g.expected_per_group_null, g.expected_per_group_alternative)
    assert s.difference == pytest.approx(-0.1)


def test_plan_to_dict_is_json_ready():
    plan = plan_mean(1.5, 6.0, looks=3, alternative="greater", futility=True)
    d = json.loads(json.dumps(plan.to_dict()))
    for key in ("fixed_per_group", "inflation", "max_per_group", "expected_per_group_null",
                "expected_per_group_alternative", "drift", "alpha", "power", "spending", "looks"):
        assert key in d
    assert isinstance(d["max_per_group"], int)
    # Many looks under O'Brien-Fleming spending: the first boundaries are infinite, and
    # the dict stays strict JSON (no Infinity token) so it can be frozen in the store.
    many = plan_mean(1.5, 6.0, looks=30).to_dict()
    assert many["efficacy_z"][0] is None
    json.dumps(many, allow_nan=False)
    assert isinstance(plan, Plan)
    with pytest.raises(AttributeError):
        plan.looks = 4


# ------------------------------------------------------------ validation


@pytest.mark.parametrize(
    "kwargs, word",
    [
        (dict(alpha=0.0), "alpha"),
        (dict(alpha=1.0), "alpha"),
        (dict(alpha=float("nan")), "alpha"),
        (dict(power=0.04), "power"),
        (dict(power=1.0), "power"),
        (dict(looks=0), "looks"),
        (dict(looks=2.5), "looks"),
        (dict(looks=True), "looks"),
        (dict(alternative="bigger"), "alternative"),
    ],
)
def test_bad_design_arguments_are_named(kwargs, word):
    with pytest.raises(InvalidArgumentError, match=word):
        plan_mean(1.0, 2.0, **kwargs)
    with pytest.raises(InvalidArgumentError, match=word):
        plan_proportion(0.2, 0.3, **kwargs)


@pytest.mark.parametrize(
    "args, kwargs, word",
    [
        ((0.0, 1.0), {}, "difference"),
        ((1.0, 0.0), {}, "sd"),
        ((1.0, -2.0), {}, "sd"),
        ((-1.0, 2.0), dict(alternative="greater"), "difference"),
        ((1.0, 2.0), dict(alternative="less"), "difference"),
        (("a", 2.0), {}, "difference"),
    ],
)
def test_bad_mean_arguments_are_named(args, kwargs, word):
    with pytest.raises(InvalidArgumentError, match=word):
        plan_mean(*args, **kwargs)


@pytest.mark.parametrize(
    "args, word",
    [((0.0, 0.3), "p1"), ((0.3, 1.0), "p2"), ((0.3, 0.3), "p1 and p2"), ((1.2, 0.3), "p1")],
)
def test_bad_proportion_arguments_are_named(args, word):
    with pytest.raises(InvalidArgumentError, match=word):
        plan_proportion(*args)


def test_unknown_spending_is_reported():
    with pytest.raises(UnknownSpendingError, match="nonsense"):
        plan_mean(1.0, 2.0, spending="nonsense")
