"""Information-based fractions (Mehta & Tsiatis 2001) and the projected completion date."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from monitor.errors import InvalidArgumentError
from monitor.stats.forecast import Projection, daily_rates, project_completion
from monitor.stats.information import (
    FRACTION_KINDS,
    events_for_information,
    information_fraction,
    max_information,
    plan_information,
)
from monitor.stats.planning import plan_mean, plan_proportion


@pytest.mark.parametrize("looks, spending", [(1, "obrien-fleming"), (4, "obrien-fleming"), (5, "pocock")])
@pytest.mark.parametrize("sd", [0.3, 2.0, 45.0])
def test_maximum_information_is_the_events_plan_at_the_planning_sd(looks, spending, sd):
    plan = plan_mean(0.4 * sd, sd, looks=looks, spending=spending)
    info = plan_information(plan)
    # 1/se² of a difference of two means with n per group and common sd: n / (2 sd²).
    assert 2 * sd**2 * info == pytest.approx(plan.fixed_per_group_exact * plan.inflation, rel=1e-10)


def test_single_analysis_information_from_the_normal_quantiles():
    # (z_.975 + z_.8)² / δ²: scipy's quantiles, no planning code.
    expected = (stats.norm.isf(0.025) + stats.norm.isf(0.2)) ** 2 / 0.25**2
    assert plan_information(plan_mean(0.25, 1.0, looks=1)) == pytest.approx(expected, rel=1e-9)


def test_null_difference_shifts_the_distance_to_detect():
    plan = plan_mean(0.5, 1.0, looks=1)
    assert plan_information(plan, null_difference=0.25) == pytest.approx(4 * plan_information(plan), rel=1e-12)


def test_proportion_plans_have_information_too():
    plan = plan_proportion(0.3, 0.2, looks=3)
    assert plan_information(plan) == pytest.approx((plan.drift / 0.1) ** 2, rel=1e-12)


def test_information_fraction_and_degenerate_errors():
    assert information_fraction(0.2, 25.0) == pytest.approx(1.0)
    assert information_fraction(0.4, 25.0) == pytest.approx(0.25)
    for se in (None, 0.0, math.inf, math.nan, -1.0):
        assert math.isnan(information_fraction(se, 25.0))
    with pytest.raises(InvalidArgumentError, match="maximum must be positive"):
        information_fraction(0.2, 0.0)
    with pytest.raises(InvalidArgumentError, match="non-zero"):
        max_information(2.8, 0.0)
    assert FRACTION_KINDS == ("events", "information")


def test_information_fraction_tracks_the_true_sd_not_the_planning_one():
    # Planned with sd 1 for δ = 0.1; the data have sd 1.3. Events say the plan is done at
    # max_per_group; information says only 1/1.69 of it is there.
    plan = plan_mean(0.1, 1.0, looks=3)
    info = plan_information(plan)
    n = plan.max_per_group
    rng = np.random.default_rng(3)
    a, b = rng.normal(0.1, 1.3, n), rng.normal(0.0, 1.3, n)
    se = math.sqrt(a.var(ddof=1) / n + b.var(ddof=1) / n)
    fraction = information_fraction(se, info)
    assert fraction == pytest.approx(1 / 1.69, rel=0.05)
    assert events_for_information(n, fraction) == pytest.approx(n * 1.69, rel=0.05)
    assert events_for_information(n, 0.0) == math.inf


def test_projection_is_arithmetic_on_counts_and_days():
    rates = daily_rates([210, 84], 7)
    assert rates == (30.0, 12.0)
    p = project_completion([600, 260], 500, rates)
    assert p == Projection(days_left=20.0, rates=(30.0, 12.0), short=(0.0, 240.0), slowest=1)
    assert p.to_dict()["days_left"] == 20.0
    done = project_completion([600, 520], 500, rates)
    assert done.days_left == 0.0 and done.slowest is None
    stalled = project_completion([600, 260], [500, 300], [30.0, 0.0])
    assert not stalled.reachable and stalled.to_dict()["days_left"] is None


def test_projection_rejects_bad_input():
    with pytest.raises(InvalidArgumentError, match="days must be positive"):
        daily_rates([1, 2], 0)
    with pytest.raises(InvalidArgumentError, match=r"counts\[1\] must be >= 0"):
        daily_rates([1, -2], 3)
    with pytest.raises(InvalidArgumentError, match="one value per group"):
        project_completion([1, 2], 10, [1.0])
    with pytest.raises(InvalidArgumentError, match="rates must be >= 0"):
        project_completion([1, 2], 10, [1.0, -1.0])
    with pytest.raises(InvalidArgumentError, match="target needs one value per group"):
        project_completion([1, 2], [10], [1.0, 1.0])
