"""Repeated confidence intervals, stagewise p-values and median-unbiased estimates.

References: the single-look reduction to fixed-sample inference (scipy.stats.norm),
Monte Carlo over simulated sequential z statistics (Brownian increments), and the
Lan-DeMets O'Brien-Fleming boundaries of tests/reference_planning.py.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import optimize, stats

from monitor.stats import inference
from monitor.stats.boundaries import efficacy_boundaries
from monitor.errors import InvalidArgumentError
from monitor.stats.inference import (
    median_unbiased_estimate,
    repeated_confidence_interval,
    stagewise_p_value,
)
from tests.reference_planning import LAN_DEMETS_OBF_BOUNDARIES_5


def _paths(rng, fractions, drift, streams):
    """Sequential z statistics at ``fractions`` for ``streams`` Brownian paths."""
    t = np.asarray(fractions, dtype=float)
    steps = np.diff(np.concatenate([[0.0], t]))
    score = np.cumsum(drift * steps + np.sqrt(steps) * rng.standard_normal((streams, t.size)), axis=1)
    return score / np.sqrt(t)


def _stop(z, upper, two_sided):
    crossed = (np.abs(z) >= upper) if two_sided else (z >= upper)
    crossed[:, -1] = True
    return np.argmax(crossed, axis=1)


# --------------------------------------------------------------- single look


@pytest.mark.parametrize("z", [-2.7, -0.4, 0.0, 1.1, 2.5, 3.9])
def test_single_look_p_values_are_fixed_sample(z):
    assert stagewise_p_value([1.0], [1.96], 1, z, "greater") == pytest.approx(stats.norm.sf(z), abs=1e-9)
    assert stagewise_p_value([1.0], [1.96], 1, z, "less") == pytest.approx(stats.norm.cdf(z), abs=1e-9)
    assert stagewise_p_value([1.0], [1.96], 1, z, "two-sided") == pytest.approx(
        min(1.0, 2 * stats.norm.sf(abs(z))), abs=1e-9
    )


@pytest.mark.parametrize("z, information", [(2.5, 4.0), (-1.3, 10.0), (0.2, 0.5)])
def test_single_look_estimate_and_interval_are_fixed_sample(z, information):
    se = 1 / math.sqrt(information)
    r = median_unbiased_estimate([1.0], [1.96], 1, z, information, "two-sided", alpha=0.05)
    q = stats.norm.isf(0.025)
    assert r.estimate == pytest.approx(z * se, abs=1e-8)
    assert r.naive_estimate == pytest.approx(z * se, abs=1e-12)
    assert r.ci[0] == pytest.approx(z * se - q * se, abs=1e-7)
    assert r.ci[1] == pytest.approx(z * se + q * se, abs=1e-7)
    assert r.p_value == pytest.approx(2 * stats.norm.sf(abs(z)), abs=1e-9)

    one = median_unbiased_estimate([1.0], [1.64], 1, z, information, "greater", alpha=0.05)
    assert one.ci[1] is None
    assert one.ci[0] == pytest.approx(z * se - stats.norm.isf(0.05) * se, abs=1e-7)
    less = median_unbiased_estimate([1.0], [1.64], 1, z, information, "less", alpha=0.05)
    assert less.ci[0] is None
    assert less.ci[1] == pytest.approx(z * se + stats.norm.isf(0.05) * se, abs=1e-7)
    assert less.estimate == pytest.approx(z * se, abs=1e-8)


def test_repeated_interval_at_one_look_is_the_wald_interval():
    q = stats.norm.isf(0.025)
    low, high = repeated_confidence_interval(3.0, 0.8, q, "two-sided")
    assert (low, high) == pytest.approx((3.0 - q * 0.8, 3.0 + q * 0.8), abs=1e-12)
    assert repeated_confidence_interval(3.0, 0.8, 1.645, "greater") == (pytest.approx(3.0 - 1.645 * 0.8), None)
    assert repeated_confidence_interval(3.0, 0.8, 1.645, "less") == (None, pytest.approx(3.0 + 1.645 * 0.8))


def test_repeated_interval_degenerate_standard_error_is_nan():
    low, high = repeated_confidence_interval(1.0, 0.0, 2.0)
    assert math.isnan(low) and math.isnan(high)
    low, high = repeated_confidence_interval(1.0, float("nan"), 2.0, "greater")
    assert math.isnan(low) and high is None


def test_repeated_interval_accepts_an_infinite_boundary():
    # A look that may spend nothing (boundary +inf) says nothing about the difference.
    assert repeated_confidence_interval(1.0, 0.5, math.inf) == (-math.inf, math.inf)


# ------------------------------------------------------------ Monte Carlo


def test_obf_boundaries_match_reference():
    got = [b.z for b in efficacy_boundaries([0.2, 0.4, 0.6, 0.8, 1.0], 0.05, "obrien-fleming", "two-sided")]
    assert got == pytest.approx(LAN_DEMETS_OBF_BOUNDARIES_5, abs=1e-3)


@pytest.mark.parametrize(
    "stop_look, z_observed, alternative",
    [(3, 2.4, "two-sided"), (4, -2.1, "two-sided"), (2, 2.9, "greater"), (4, 1.0, "greater"), (3, -2.6, "less")],
)
def test_stagewise_p_value_matches_monte_carlo(stop_look, z_observed, alternative):
    fractions = [0.25, 0.5, 0.75, 1.0]
    upper = np.array([b.z for b in efficacy_boundaries(fractions, 0.05, "obrien-fleming", alternative)])
    p = stagewise_p_value(fractions, upper, stop_look, z_observed, alternative)

    rng = np.random.default_rng(20240601 + stop_look)
    streams = 200_000
    z = _paths(rng, fractions, 0.0, streams)
    s = stop_look - 1
    if alternative == "two-sided":
        frame = z * np.sign(z_observed)  # one-sided in the observed direction, then doubled
        inside = np.all(np.abs(z[:, :s]) < upper[:s], axis=1)
        earlier = np.zeros(streams, dtype=bool)
        alive = np.ones(streams, dtype=bool)
        for k in range(s):
            earlier |= alive & (frame[:, k] >= upper[k])
            alive &= np.abs(z[:, k]) < upper[k]
        extreme = earlier | (inside & (frame[:, s] >= abs(z_observed)))
        expected = min(1.0, 2 * extreme.mean())
        se = 2 * math.sqrt(extreme.mean() * (1 - extreme.mean()) / streams)
    else:
        frame = z if alternative == "greater" else -z
        zo = z_observed if alternative == "greater" else -z_observed
        below = np.all(frame[:, :s] < upper[:s], axis=1)
        extreme = ~below | (frame[:, s] >= zo)
        expected = extreme.mean()
        se = math.sqrt(expected * (1 - expected) / streams)
    assert abs(p - expected) < 4 * se + 1e-4


def test_two_sided_p_value_is_symmetric_and_capped():
    fractions = [0.3, 0.6, 1.0]
    upper = [b.z for b in efficacy_boundaries(fractions, 0.05, "pocock", "two-sided")]
    assert stagewise_p_value(fractions, upper, 2, 1.3) == pytest.approx(stagewise_p_value(fractions, upper, 2, -1.3))
    assert stagewise_p_value(fractions, upper, 3, 0.0) == pytest.approx(1.0)
    # A later stop is less extreme than any earlier crossing.
    assert stagewise_p_value(fractions, upper, 3, 6.0) > stagewise_p_value(fractions, upper, 2, upper[1])


def test_less_is_the_mirror_of_greater():
    fractions = [0.4, 0.7, 1.0]
    upper = [b.z for b in efficacy_boundaries(fractions, 0.025, "obrien-fleming", "greater")]
    assert stagewise_p_value(fractions, upper, 2, -2.9, "less") == pytest.approx(
        stagewise_p_value(fractions, upper, 2, 2.9, "greater"), abs=1e-12
    )
    g = median_unbiased_estimate(fractions, upper, 2, 2.9, 9.0, "greater")
    s = median_unbiased_estimate(fractions, upper, 2, -2.9, 9.0, "less")
    assert s.estimate == pytest.approx(-g.estimate, abs=1e-9)
    assert s.ci[1] == pytest.approx(-g.ci[0], abs=1e-9)


def _threshold_z(fractions, upper, look, drift, target, two_sided):
    """z at look ``look`` at which the stagewise upper-tail probability under ``drift`` is ``target``."""
    t = np.asarray(fractions[:look], dtype=float)
    b = np.asarray(upper[:look], dtype=float)
    def gap(z):
        return inference._at_or_beyond(t, b, z, drift, two_sided) - target

    # Enough mass may already have left upwards (or too little remains) for any z at this
    # look to reach the target: then every z there is on one side of it.
    if gap(15.0) > 0:
        return math.inf
    if gap(-15.0) < 0:
        return -math.inf
    return optimize.brentq(gap, -15.0, 15.0, xtol=1e-10)


def test_median_unbiased_estimate_is_median_unbiased_and_naive_is_not():
    fractions = [0.25, 0.5, 0.75, 1.0]
    upper = np.array([b.z for b in efficacy_boundaries(fractions, 0.05, "obrien-fleming", "two-sided")])
    information = 16.0
    theta = 0.75  # drift 3.0: early stops are common, so the naive estimate is visibly biased
    drift = theta * math.sqrt(information)

    # For a stop at look k the estimate rises with z, so "estimate <= theta" is "z <= z*_k",
    # where z*_k is the z whose estimate is exactly theta. Check that on the public function,
    # then count over many simulated stopped streams.
    thresholds = [_threshold_z(fractions, upper, k, drift, 0.5, True) for k in range(1, 5)]
    assert np.all(np.isfinite(thresholds[:2]))
    for k, zk in enumerate(thresholds, start=1):
        if not math.isfinite(zk):
            continue
        r = median_unbiased_estimate(fractions, upper, k, zk, information, "two-sided")
        assert r.estimate == pytest.approx(theta, abs=1e-6)

    rng = np.random.default_rng(7)
    streams = 20_000
    z = _paths(rng, fractions, drift, streams)
    stop = _stop(z, upper, two_sided=True)
    z_stop = z[np.arange(streams), stop]
    at_or_below = z_stop <= np.asarray(thresholds)[stop]
    share = at_or_below.mean()
    assert abs(share - 0.5) < 3 * math.sqrt(0.25 / streams)

    naive = z_stop / np.sqrt(information * np.asarray(fractions)[stop])
    bias = naive.mean() - theta
    assert bias > 5 * naive.std(ddof=1) / math.sqrt(streams)
    # The naive estimate is not median-unbiased either.
    assert abs(np.mean(naive <= theta) - 0.5) > 5 * math.sqrt(0.25 / streams)

    # Direct check on a handful of streams: the public estimate agrees with the threshold rule.
    for i in range(12):
        r = median_unbiased_estimate(fractions, upper, int(stop[i]) + 1, float(z_stop[i]), information)
        assert (r.estimate <= theta) == bool(at_or_below[i])


def test_adjusted_interval_covers_at_its_level():
    fractions = [0.2, 0.4, 0.6, 0.8, 1.0]
    upper = np.array([b.z for b in efficacy_boundaries(fractions, 0.05, "obrien-fleming", "two-sided")])
    information, theta, alpha = 9.0, 0.9, 0.1
    drift = theta * math.sqrt(information)
    # theta is inside the interval when the stagewise probability at theta is within
    # [alpha/2, 1 - alpha/2], i.e. z between two look-specific thresholds.
    high = np.array([_threshold_z(fractions, upper, k, drift, alpha / 2, True) for k in range(1, 6)])
    low = np.array([_threshold_z(fractions, upper, k, drift, 1 - alpha / 2, True) for k in range(1, 6)])
    r = median_unbiased_estimate(fractions, upper, 3, float(low[2]), information, alpha=alpha)
    assert r.ci[1] == pytest.approx(theta, abs=1e-6)

    rng = np.random.default_rng(11)
    streams = 20_000
    z = _paths(rng, fractions, drift, streams)
    stop = _stop(z, upper, two_sided=True)
    z_stop = z[np.arange(streams), stop]
    covered = ((z_stop >= low[stop]) & (z_stop <= high[stop])).mean()
    assert abs(covered - (1 - alpha)) < 3 * math.sqrt(alpha * (1 - alpha) / streams)


@pytest.mark.parametrize("alternative", ["two-sided", "greater"])
def test_repeated_intervals_cover_simultaneously(alternative):
    fractions = [0.2, 0.4, 0.6, 0.8, 1.0]
    alpha = 0.05
    upper = [b.z for b in efficacy_boundaries(fractions, alpha, "obrien-fleming", alternative)]
    information, theta = 25.0, 0.3
    rng = np.random.default_rng(3 if alternative == "two-sided" else 4)
    streams = 5_000
    z = _paths(rng, fractions, theta * math.sqrt(information), streams)
    covered_all = np.ones(streams, dtype=bool)
    unadjusted_all = np.ones(streams, dtype=bool)
    q = stats.norm.isf(alpha / 2 if alternative == "two-sided" else alpha)
    for k, t in enumerate(fractions):
        se = 1 / math.sqrt(information * t)
        for i in range(streams):
            low, high = repeated_confidence_interval(z[i, k] * se, se, upper[k], alternative)
            inside = low <= theta and (high is None or theta <= high)
            covered_all[i] &= inside
        estimate = z[:, k] * se
        unadjusted_all &= (estimate - q * se <= theta) & (
            (estimate + q * se >= theta) if alternative == "two-sided" else True
        )
    coverage = covered_all.mean()
    assert abs(coverage - (1 - alpha)) < 3 * math.sqrt(alpha * (1 - alpha) / streams)
    # Fixed-sample intervals read at every look do not hold their level.
    assert unadjusted_all.mean() < 1 - alpha - 5 * math.sqrt(alpha * (1 - alpha) / streams)


# -------------------------------------------------------------- validation


@pytest.mark.parametrize(
    "kwargs, word",
    [
        (dict(fractions=[0.5, 0.4], upper_z=[2, 2], stop_look=1, z_observed=1.0), "fractions"),
        (dict(fractions=[0.5, 1.0], upper_z=[2], stop_look=1, z_observed=1.0), "upper_z"),
        (dict(fractions=[0.5, 1.0], upper_z=[2, -1], stop_look=1, z_observed=1.0), "upper_z"),
        (dict(fractions=[0.5, 1.0], upper_z=[2, 2], stop_look=3, z_observed=1.0), "stop_look"),
        (dict(fractions=[0.5, 1.0], upper_z=[2, 2], stop_look=0, z_observed=1.0), "stop_look"),
        (dict(fractions=[0.5, 1.0], upper_z=[2, 2], stop_look=1.0, z_observed=1.0), "stop_look"),
        (dict(fractions=[0.5, 1.0], upper_z=[2, 2], stop_look=1, z_observed=float("nan")), "z_observed"),
        (dict(fractions=[], upper_z=[], stop_look=1, z_observed=1.0), "fractions"),
        (dict(fractions=[1.0], upper_z=[2], stop_look=1, z_observed=1.0, alternative="both"), "alternative"),
    ],
)
def test_bad_arguments_are_named(kwargs, word):
    with pytest.raises(InvalidArgumentError, match=word):
        stagewise_p_value(**kwargs)


def test_bad_estimate_arguments_are_named():
    with pytest.raises(InvalidArgumentError, match="information"):
        median_unbiased_estimate([1.0], [1.96], 1, 1.0, 0.0)
    with pytest.raises(InvalidArgumentError, match="alpha"):
        median_unbiased_estimate([1.0], [1.96], 1, 1.0, 1.0, alpha=1.5)
    with pytest.raises(InvalidArgumentError, match="standard_error"):
        repeated_confidence_interval(1.0, -1.0, 2.0)
    with pytest.raises(InvalidArgumentError, match="boundary_z"):
        repeated_confidence_interval(1.0, 1.0, 0.0)
    with pytest.raises(InvalidArgumentError, match="alternative"):
        repeated_confidence_interval(1.0, 1.0, 2.0, "two_sided")


def test_estimate_to_dict_and_float():
    r = median_unbiased_estimate([0.5, 1.0], [2.797, 1.977], 2, 2.3, 4.0)
    d = r.to_dict()
    assert set(d) >= {"estimate", "ci", "alpha", "p_value", "naive_estimate", "stop_look"}
    assert float(r) == r.estimate
    assert r.ci[0] < r.estimate < r.ci[1]


# ---------------------------------------------------------------- properties

_DESIGN = [0.3, 0.55, 0.8, 1.0]
_UPPER = {alt: [b.z for b in efficacy_boundaries(_DESIGN, 0.05, "obrien-fleming", alt)]
          for alt in ("two-sided", "greater")}


@settings(max_examples=25, deadline=None)
@given(
    look=st.integers(1, 4),
    z=st.floats(-6, 6, allow_nan=False),
    step=st.floats(0.05, 2.0),
    alternative=st.sampled_from(["two-sided", "greater"]),
)
def test_p_value_is_a_probability_and_monotone(look, z, step, alternative):
    upper = _UPPER[alternative]
    p = stagewise_p_value(_DESIGN, upper, look, z, alternative)
    assert 0.0 <= p <= 1.0
    if alternative == "greater":
        assert stagewise_p_value(_DESIGN, upper, look, z + step, alternative) <= p + 1e-12
    else:
        assert stagewise_p_value(_DESIGN, upper, look, abs(z) + step, alternative) <= (
            stagewise_p_value(_DESIGN, upper, look, abs(z), alternative) + 1e-12
        )


@settings(max_examples=15, deadline=None)
@given(look=st.integers(1, 4), z=st.floats(-4, 4, allow_nan=False), step=st.floats(0.1, 2.0))
def test_estimate_rises_with_z_and_sits_inside_its_interval(look, z, step):
    upper = _UPPER["two-sided"]
    low = median_unbiased_estimate(_DESIGN, upper, look, z, 10.0)
    high = median_unbiased_estimate(_DESIGN, upper, look, z + step, 10.0)
    assert high.estimate > low.estimate
    assert low.ci[0] < low.estimate < low.ci[1]


def test_infinite_boundaries_at_early_looks_are_accepted():
    # Small first fractions under O'Brien-Fleming spending get boundary +inf: no stop possible.
    fractions = [0.001, 0.5, 1.0]
    upper = [b.z for b in efficacy_boundaries(fractions, 0.05, "obrien-fleming", "two-sided")]
    assert math.isinf(upper[0])
    with_inf = stagewise_p_value(fractions, upper, 3, 2.2)
    without = stagewise_p_value([0.5, 1.0], upper[1:], 2, 2.2)
    # Looking at fraction 0.001 (nothing spent) changes the p-value only through Z at 0.001,
    # which never stops the path: the two agree.
    assert with_inf == pytest.approx(without, abs=1e-6)
    r = median_unbiased_estimate(fractions, upper, 3, 2.2, 8.0)
    assert r.ci[0] < r.estimate < r.ci[1]
