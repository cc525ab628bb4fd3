"""Planning a clustered comparison: design effect, clusters per group and the few-clusters t."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from monitor.errors import InvalidArgumentError
from monitor.stats import clustered
from monitor.stats.planning import fixed_sample_mean

from reference_clustered import COHEN_T_PER_GROUP, DONNER_KLAR


@pytest.mark.parametrize("rho, m, expected", DONNER_KLAR, ids=[f"rho{r}-m{m}" for r, m, _ in DONNER_KLAR])
def test_design_effect_is_donner_and_klar(rho, m, expected):
    assert clustered.design_effect_from_icc(rho, m) == pytest.approx(expected)
    plan = clustered.plan_clusters(1000, m, icc=rho)
    assert plan.design_effect == pytest.approx(expected)
    assert plan.clustered_per_group == math.ceil(1000 * expected - 1e-9)


@pytest.mark.parametrize("d, expected", COHEN_T_PER_GROUP, ids=[f"d{d}" for d, _ in COHEN_T_PER_GROUP])
def test_clusters_of_one_give_the_published_two_sample_t_sizes(d, expected):
    base = fixed_sample_mean(d, 1.0)
    plan = clustered.plan_clusters(base, 1, design_effect=1.0, shared=False)
    assert plan.clusters_per_group == plan.events_per_group == expected
    assert plan.df == 2 * (expected - 1)


def _simulated_power(df, lam, alpha, alternative, draws, rng):
    # Independent of scipy's noncentral t: T = (Z + λ) / sqrt(χ²_ν / ν) drawn directly.
    t = (rng.standard_normal(draws) + lam) / np.sqrt(rng.chisquare(df, draws) / df)
    if alternative == "two-sided":
        crit = stats.t.isf(alpha / 2, df)
        return float(np.mean(np.abs(t) >= crit))
    return float(np.mean(t >= stats.t.isf(alpha, df)))


@pytest.mark.parametrize("df", [1, 3, 9, 30])
@pytest.mark.parametrize("alternative", ["two-sided", "greater"])
def test_noncentrality_gives_the_power_by_simulation(df, alternative):
    draws = 200_000
    lam = clustered.t_noncentrality(df, alpha=0.05, power=0.8, alternative=alternative)
    power = _simulated_power(df, lam, 0.05, alternative, draws, np.random.default_rng(df))
    se = math.sqrt(0.8 * 0.2 / draws)   # Monte Carlo s.e. about 0.0009
    assert abs(power - 0.8) < 4 * se, (power, se)


def test_noncentrality_tends_to_the_normal_value_and_falls_with_df():
    z = stats.norm.isf(0.025) + stats.norm.isf(0.2)
    assert clustered.t_noncentrality(1e8) == pytest.approx(z, abs=1e-5)
    assert clustered.t_inflation(1e8) == pytest.approx(1.0, abs=1e-5)
    values = [clustered.t_inflation(df) for df in (1, 2, 5, 10, 30, 100)]
    assert all(a > b > 1 for a, b in zip(values, values[1:]))
    z1 = stats.norm.isf(0.05) + stats.norm.isf(0.1)
    assert clustered.t_noncentrality(1e8, alpha=0.05, power=0.9, alternative="less") == pytest.approx(z1, abs=1e-5)


@pytest.mark.parametrize("shared", [True, False], ids=["days shared", "clusters nested"])
@pytest.mark.parametrize("k", [3, 6, 15])
def test_planning_df_is_the_looks_df_for_equal_clusters(shared, k):
    rng = np.random.default_rng(k)
    m = 7
    if shared:
        groups, keys = [0] * k + [1] * k, list(range(k)) * 2
        variance = "cr1"
    else:
        groups, keys = [0] * k + [1] * k, list(range(2 * k))
        variance = "cr2"
    result = clustered.cluster_robust_difference(groups, keys, [m] * (2 * k), rng.normal(size=2 * k) * m,
                                                 0.0, variance=variance)
    assert result.df == pytest.approx(clustered.planning_df(k, shared=shared))


@pytest.mark.parametrize("shared", [True, False])
def test_the_planned_clusters_are_the_fewest_with_the_power(shared):
    base, m, rho = 300.0, 15, 0.08
    plan = clustered.plan_clusters(base, m, icc=rho, shared=shared)
    z = stats.norm.isf(0.025) + stats.norm.isf(0.2)
    deff = 1 + (m - 1) * rho

    def power(k):
        # Expected z at k clusters per group: the unclustered plan's drift, scaled by the
        # information k·m/deff holds against the base events.
        lam = z * math.sqrt(k * m / (base * deff))
        df = (k - 1) if shared else 2 * (k - 1)
        crit = stats.t.isf(0.025, df)
        return stats.nct.sf(crit, df, lam) + stats.nct.cdf(-crit, df, lam)

    k = plan.clusters_per_group
    assert power(k) >= 0.8 - 1e-9 > power(k - 1)
    assert plan.events_per_group <= k * m
    assert plan.t_inflation > 1 and not plan.raised_to_minimum


def test_a_minimum_of_clusters_sets_the_plan_when_power_needs_fewer():
    plan = clustered.plan_clusters(60, 40, icc=0.05, minimum_clusters=10)
    assert plan.raised_to_minimum and plan.clusters_per_group == 10
    assert plan.events_per_group == 400 and plan.df == 9


@pytest.mark.parametrize("kwargs, words", [
    ({"df": 0.5}, "df"),
    ({"df": 5, "alpha": 0.5, "power": 0.4}, "power"),
    ({"df": 5, "alternative": "both"}, "both"),
])
def test_noncentrality_refuses_bad_arguments(kwargs, words):
    df = kwargs.pop("df")
    with pytest.raises(InvalidArgumentError, match=words):
        clustered.t_noncentrality(df, **kwargs)


def test_plan_clusters_refuses_bad_arguments():
    with pytest.raises(InvalidArgumentError, match="not both"):
        clustered.plan_clusters(100, 10, icc=0.1, design_effect=2.0)
    with pytest.raises(InvalidArgumentError, match="events_per_cluster"):
        clustered.plan_clusters(100, 0.5, icc=0.1)
    with pytest.raises(InvalidArgumentError, match="minimum_clusters"):
        clustered.plan_clusters(100, 10, icc=0.1, minimum_clusters=1)
