"""Changes of plan by the conditional error principle, and conditional power.

Independent checks: scipy's multivariate normal integration and direct
quadrature (scipy.integrate.quad) of the Brownian-motion model of sequential
z statistics, written here without the module's own recursion.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate, stats

from monitor.errors import InvalidArgumentError, ReplanRefusedError
from monitor.stats.adaptive import (
    METHOD,
    AdaptiveBoundary,
    Replan,
    conditional_crossing,
    remaining_planned_fractions,
)
from monitor.stats.boundaries import FutilitySpec, SequentialBoundary, crossing_probabilities

# --------------------------------------------------------------------------
# Independent helpers
# --------------------------------------------------------------------------


def mvn_conditional_crossing(t0, s0, fractions, upper, lower, drift):
    """P(cross upper first), P(cross lower first) from S(t0) = s0, by scipy's multivariate normal.

    Given S(t0) = s0, the later z values Z_j = S(t_j)/√t_j are jointly normal with
    mean (s0 + drift (t_j − t0))/√t_j and covariance (min(t_i, t_j) − t0)/√(t_i t_j).
    The chance of first leaving upward at look j is
    P(continue at looks < j) − P(continue at looks < j, Z_j < upper_j).
    """
    t = np.asarray(fractions, dtype=float)
    mean = (s0 + drift * (t - t0)) / np.sqrt(t)
    cov = (np.minimum.outer(t, t) - t0) / np.sqrt(np.outer(t, t))
    upper = np.asarray(upper, dtype=float)
    lower = np.asarray(lower, dtype=float)

    def inside(k, hi_last=None, lo_last=None):
        hi = upper[:k].copy()
        lo = lower[:k].copy()
        if hi_last is not None:
            hi[-1] = hi_last
        if lo_last is not None:
            lo[-1] = lo_last
        if k == 0:
            return 1.0
        if k == 1:
            sd = math.sqrt(cov[0, 0])
            return float(stats.norm.cdf((hi[0] - mean[0]) / sd) - stats.norm.cdf((lo[0] - mean[0]) / sd))
        return float(stats.multivariate_normal.cdf(
            np.minimum(hi, 40), mean[:k], cov[:k, :k], lower_limit=np.maximum(lo, -40),
            abseps=1e-8, releps=0.0, maxpts=2_000_000, rng=np.random.default_rng(7)))

    up = low = 0.0
    for k in range(1, t.size + 1):
        before = inside(k - 1)
        up += before - inside(k, lo_last=-np.inf) if k > 1 else 1.0 - inside(1, lo_last=-np.inf)
        low += before - inside(k, hi_last=np.inf) if k > 1 else 1.0 - inside(1, hi_last=np.inf)
        # the two lines above count paths that continued through look k-1 and then crossed at k
    return up, low


def quad_one_remaining(t0, s0, t1, bound, drift):
    """One remaining look: P(Z(t1) ≥ bound | S(t0) = s0), closed form."""
    mean = s0 + drift * (t1 - t0)
    return float(stats.norm.sf((bound * math.sqrt(t1) - mean) / math.sqrt(t1 - t0)))


# --------------------------------------------------------------------------
# conditional_crossing
# --------------------------------------------------------------------------


@pytest.mark.parametrize("drift", [0.0, 1.7, -0.8], ids=lambda d: f"drift={d}")
@pytest.mark.parametrize("s0", [-0.9, 0.3, 1.6])
def test_conditional_crossing_matches_multivariate_normal(s0, drift):
    t0 = 0.35
    fractions = [0.5, 0.72, 1.0]
    upper = [2.9, 2.4, 2.05]
    lower = [-2.9, -2.4, -2.05]
    up, low = conditional_crossing(t0, [s0], fractions, upper, lower, drift=drift)
    ref_up, ref_low = mvn_conditional_crossing(t0, s0, fractions, upper, lower, drift)
    assert up[0] == pytest.approx(ref_up, abs=2e-6)
    assert low[0] == pytest.approx(ref_low, abs=2e-6)


def test_conditional_crossing_single_look_closed_form():
    for s0 in (-1.0, 0.0, 0.8, 1.5):
        up, low = conditional_crossing(0.4, [s0], [1.0], [1.96], [-1.96], drift=2.0)
        assert up[0] == pytest.approx(quad_one_remaining(0.4, s0, 1.0, 1.96, 2.0), abs=1e-12)
        ref_low = float(stats.norm.cdf((-1.96 - s0 - 2.0 * 0.6) / math.sqrt(0.6)))
        assert low[0] == pytest.approx(ref_low, abs=1e-12)


def test_conditional_crossing_from_zero_is_the_unconditional_crossing():
    fractions = [0.2, 0.45, 0.7, 1.0]
    upper = [4.2, 2.9, 2.4, 2.0]
    for drift in (0.0, 2.5):
        up, low = conditional_crossing(0.0, [0.0], fractions, upper, [-u for u in upper], drift=drift)
        ref_up, ref_low = crossing_probabilities(fractions, upper, [-u for u in upper], drift=drift)
        assert up[0] == pytest.approx(ref_up.sum(), abs=1e-9)
        assert low[0] == pytest.approx(ref_low.sum(), abs=1e-9)


def test_conditional_crossing_vectorised_equals_one_at_a_time():
    scores = np.linspace(-2.5, 2.5, 11)
    args = (0.3, [0.6, 1.0], [2.6, 2.0], [-np.inf, -np.inf])
    up, low = conditional_crossing(args[0], scores, *args[1:], drift=1.0)
    for s, u in zip(scores, up):
        one, _ = conditional_crossing(args[0], [s], *args[1:], drift=1.0)
        # The grid follows the range of the starting scores: agreement to quadrature accuracy.
        assert one[0] == pytest.approx(u, rel=1e-8, abs=1e-12)
    assert np.all(np.diff(up) > 0) and np.all(low == 0)


def test_conditional_crossing_rejects_bad_input():
    with pytest.raises(InvalidArgumentError, match="increase"):
        conditional_crossing(0.5, [0.0], [0.5, 1.0], [2, 2])
    with pytest.raises(InvalidArgumentError, match="one value per fraction"):
        conditional_crossing(0.5, [0.0], [0.7, 1.0], [2])
    with pytest.raises(InvalidArgumentError, match="finite"):
        conditional_crossing(0.5, [np.nan], [1.0], [2])


# --------------------------------------------------------------------------
# Segment 0 is the original design
# --------------------------------------------------------------------------


@pytest.mark.parametrize("alternative", ["two-sided", "greater", "less"])
def test_without_a_change_the_boundaries_are_the_original_design(alternative):
    plain = SequentialBoundary(0.05, "obrien-fleming", alternative)
    adaptive = AdaptiveBoundary(0.05, "obrien-fleming", alternative)
    for t in (0.22, 0.5, 0.81, 1.0):
        a, b = plain.add_look(t), adaptive.add_look(t)
        assert b.segment == 0 and b.cumulative_level == a.cumulative_alpha and b.final == a.final
        if alternative != "less":
            assert b.upper_z == a.z
        if alternative != "greater":
            assert b.lower_z == -a.z
        if alternative == "greater":
            assert b.lower_z == -math.inf
        if alternative == "less":
            assert b.upper_z == math.inf
    assert adaptive.complete


# --------------------------------------------------------------------------
# The conditional error principle
# --------------------------------------------------------------------------


def _later_rejection(boundary, anchor_t, anchor_z, fractions):
    """Take looks at ``fractions`` and return the chance under no difference that they reject,
    given the anchor, from the bounds on the z of all data that the looks report."""
    looks = [boundary.add_look(t) for t in fractions]
    up, low = conditional_crossing(anchor_t, [anchor_z * math.sqrt(anchor_t)], fractions,
                                   [b.upper_z for b in looks], [b.lower_z for b in looks])
    return float(up[0]), float(low[0]), looks


@pytest.mark.parametrize("end", [0.55, 1.0, 2.0, 3.5])
@pytest.mark.parametrize("z", [-1.1, 0.4, 1.9])
def test_the_new_remainder_spends_exactly_the_conditional_error(z, end):
    b = AdaptiveBoundary(0.05, "obrien-fleming", "two-sided")
    b.add_look(0.3)
    change = b.replan(z, end, reference=[2 / 3, 1.0])
    fractions = [0.3 + (end - 0.3) * u for u in (0.25, 0.6, 1.0)]
    up, low, looks = _later_rejection(b, 0.3, z, fractions)
    assert looks[-1].final and looks[-1].segment == 1
    # Each side spends its own conditional error; paths reaching both sides are negligible.
    assert up == pytest.approx(change.error_upper, rel=1e-5, abs=1e-10)
    assert low == pytest.approx(change.error_lower, rel=1e-5, abs=1e-10)


def test_conditional_error_averages_to_the_alpha_not_yet_spent():
    # Integrate A(s) over the density of S at the first look, restricted to the paths that
    # continue: plus what the first look spent, that is the design's alpha.
    t1 = 0.4
    b = AdaptiveBoundary(0.05, "obrien-fleming", "two-sided")
    first = b.add_look(t1)
    bound = first.upper_z * math.sqrt(t1)

    def a_of(s):
        probe = AdaptiveBoundary.resume(0.05, "obrien-fleming", "two-sided", [first.to_dict()])
        up, low = probe.conditional_error(s / math.sqrt(t1), reference=[0.7, 1.0])
        return (up + low) * stats.norm.pdf(s, scale=math.sqrt(t1))

    left, _ = integrate.quad(a_of, -bound, bound, epsabs=1e-10, limit=200)
    spent = 2 * stats.norm.sf(first.upper_z)
    assert spent + left == pytest.approx(0.05, abs=2e-8)


def _overall_rate(rule, alpha=0.05, spending="obrien-fleming", t1=0.35, nodes=96):
    """Overall false-alarm rate when the new end is chosen by ``rule(z)`` at the first look.

    The first look's crossing plus the integral over the continuing z of the chance that the
    replanned remainder (three looks) rejects, each computed from the bounds the looks report.
    Gauss–Legendre over the continuation region (the integrand is smooth between the rule's
    switching points, which are placed at nodes' panel ends)."""
    first = AdaptiveBoundary(alpha, spending, "two-sided").add_look(t1)
    c = first.upper_z
    total = 2 * stats.norm.sf(c)
    cuts = sorted({-c, c, *[x for x in rule.switches if -c < x < c]})
    xs, ws = np.polynomial.legendre.leggauss(nodes)
    for lo, hi in zip(cuts[:-1], cuts[1:]):
        for x, w in zip(xs, ws):
            z = lo + (hi - lo) * (x + 1) / 2
            b = AdaptiveBoundary(alpha, spending, "two-sided")
            b.add_look(t1)
            end = rule(z)
            b.replan(z, end, reference=[0.7, 1.0])
            fractions = [t1 + (end - t1) * u for u in (1 / 3, 2 / 3, 1.0)]
            up, low, _ = _later_rejection(b, t1, z, fractions)
            total += w * (hi - lo) / 2 * (up + low) * stats.norm.pdf(z)
    return total


class _Rule:
    def __init__(self, switches, ends):
        self.switches, self.ends = switches, ends

    def __call__(self, z):
        return self.ends[int(np.searchsorted(self.switches, z))]


@pytest.mark.parametrize("rule", [
    _Rule([0.6, 1.6], [1.0, 2.0, 0.5]),    # double when promising, halve when already strong
    _Rule([-0.5, 0.5], [0.5, 3.0, 0.5]),   # stretch only near zero
], ids=["promising-doubles", "near-zero-triples"])
def test_data_driven_changes_keep_the_overall_alpha(rule):
    assert _overall_rate(rule) == pytest.approx(0.05, abs=2e-6)


@pytest.mark.parametrize("spending, excess", [("obrien-fleming", 1e-4), ("pocock", 0.008)])
def test_restarting_with_a_fresh_alpha_would_not(spending, excess):
    # The contrast: re-test all data with a new design at alpha after a first look at alpha-spending.
    t1 = 0.35
    first = SequentialBoundary(0.05, spending, "two-sided").add_look(t1)
    fresh = SequentialBoundary(0.05, spending, "two-sided")
    fractions = [t1 / 2.0, 0.5, 0.75, 1.0]  # version 2 on the doubled plan, re-reading all data
    looks = [fresh.add_look(f) for f in fractions]
    # Version 2's first look re-tests the data version 1 just tested: one look, the lower bound wins.
    at_restart = min(first.z, looks[0].z)
    up, low = crossing_probabilities(
        [t1] + [f * 2.0 for f in fractions[1:]], [at_restart] + [x.z for x in looks[1:]],
        [-at_restart] + [-x.z for x in looks[1:]])
    assert up.sum() + low.sum() > 0.05 + excess


def test_one_sided_less_spends_on_the_tested_side_only():
    b = AdaptiveBoundary(0.025, "pocock", "less")
    b.add_look(0.5)
    change = b.replan(-1.0, 1.5)
    assert change.error_upper == 0.0 and change.error_lower > 0.0
    looks = [b.add_look(t) for t in (0.8, 1.1, 1.5)]
    assert all(x.upper_z == math.inf and math.isfinite(x.lower_z) for x in looks)
    up, low = conditional_crossing(0.5, [-1.0 * math.sqrt(0.5)], [0.8, 1.1, 1.5], [math.inf] * 3,
                                   [x.lower_z for x in looks])
    assert low[0] == pytest.approx(change.error_lower, rel=1e-6)
    assert looks[-1].decision(-5.0) == -1 and looks[-1].decision(5.0) == 0


def test_two_changes_each_spend_what_the_running_segment_left():
    b = AdaptiveBoundary(0.05, "hsd:-4", "two-sided")
    b.add_look(0.25)
    first = b.replan(0.8, 2.0)
    b.add_look(0.9)
    # The second change is anchored at fraction 0.9 with z 1.1 of all data.
    second = b.replan(1.1, 1.4)
    assert second.segment == 2 and second.anchor_fraction == 0.9
    up, low, looks = _later_rejection(b, 0.9, 1.1, [1.1, 1.25, 1.4])
    assert up == pytest.approx(second.error_upper, rel=1e-5)
    assert low == pytest.approx(second.error_lower, rel=1e-5)
    # And the second conditional error is that of segment 1's remainder at (0.9, 1.1).
    probe = AdaptiveBoundary.resume(0.05, "hsd:-4", "two-sided", [b.looks[0].to_dict(), b.looks[1].to_dict()],
                                    [first])
    assert probe.conditional_error(1.1) == pytest.approx((second.error_upper, second.error_lower), rel=1e-9)
    assert first.conditional_error > 0


# --------------------------------------------------------------------------
# Refusals
# --------------------------------------------------------------------------


def test_refused_after_the_final_look():
    b = AdaptiveBoundary(0.05, "pocock", "two-sided")
    b.add_look(0.5)
    b.add_look(1.0)
    with pytest.raises(ReplanRefusedError, match="final look"):
        b.replan(0.5, 2.0)


def test_refused_when_the_last_look_crossed():
    b = AdaptiveBoundary(0.05, "pocock", "two-sided")
    b.add_look(0.5)
    with pytest.raises(ReplanRefusedError, match="crossed"):
        b.replan(3.5, 2.0)


def test_refused_when_the_new_end_is_already_reached():
    b = AdaptiveBoundary(0.05, "pocock", "two-sided")
    b.add_look(0.6)
    with pytest.raises(ReplanRefusedError, match="nothing would be left"):
        b.replan(0.5, 0.6)


def test_refused_when_no_alpha_is_left():
    b = AdaptiveBoundary(0.025, "obrien-fleming", "greater")
    b.add_look(0.95)
    with pytest.raises(ReplanRefusedError, match="would need alpha"):
        b.replan(-9.0, 3.0)


def test_a_change_before_any_look_keeps_the_whole_alpha():
    b = AdaptiveBoundary(0.05, "obrien-fleming", "two-sided")
    change = b.replan(None, 2.0)
    assert (change.error_upper, change.error_lower, change.anchor_fraction) == (0.025, 0.025, 0.0)
    looks = [b.add_look(t) for t in (0.5, 1.0, 1.5, 2.0)]
    up, low = crossing_probabilities([0.5, 1.0, 1.5, 2.0], [x.upper_z for x in looks], [x.lower_z for x in looks])
    assert up.sum() + low.sum() == pytest.approx(0.05, abs=1e-6)


# --------------------------------------------------------------------------
# Replay from recorded values
# --------------------------------------------------------------------------


def test_resume_from_recorded_values_continues_exactly():
    futility = FutilitySpec("obrien-fleming", 0.2, 2.9)
    live = AdaptiveBoundary(0.05, "obrien-fleming", "two-sided", futility=futility)
    records, changes = [], []
    records.append(live.add_look(0.2).to_dict())
    records.append(live.add_look(0.45).to_dict())
    changes.append(live.replan(1.3, 1.8).to_dict())
    records.append(live.add_look(0.9).to_dict())
    changes.append(live.replan(1.5, 1.2, reference=[0.7, 1.0]).to_dict())
    again = AdaptiveBoundary.resume(0.05, "obrien-fleming", "two-sided", records, changes, futility=futility)
    assert [x.to_dict() for x in again.looks] == records
    nxt_live, nxt_again = live.add_look(1.05), again.add_look(1.05)
    assert nxt_again.upper_z == pytest.approx(nxt_live.upper_z, abs=1e-12)
    assert nxt_again.lower_z == pytest.approx(nxt_live.lower_z, abs=1e-12)
    assert live.conditional_power(1.4, 2.9).upper == pytest.approx(again.conditional_power(1.4, 2.9).upper, abs=1e-12)


def test_resume_uses_rounded_recorded_bounds_as_they_are():
    live = AdaptiveBoundary(0.025, "pocock", "less")
    a = live.add_look(0.3)
    r = live.replan(-0.7, 2.0)
    b = live.add_look(0.8)
    rounded = [dict(a.to_dict(), bound_lower=round(a.bound_lower, 3)),
               dict(b.to_dict(), bound_lower=round(b.bound_lower, 3))]
    again = AdaptiveBoundary.resume(0.025, "pocock", "less", rounded, [r.to_dict()])
    assert again.looks[1].bound_lower == round(b.bound_lower, 3)
    # The final look still spends exactly what the segment was given.
    rest = [again.add_look(t) for t in (1.4, 2.0)]
    up, low = conditional_crossing(0.3, [-0.7 * math.sqrt(0.3)], [0.8, 1.4, 2.0], [math.inf] * 3,
                                   [again.looks[1].lower_z] + [x.lower_z for x in rest])
    assert low[0] == pytest.approx(r.error_lower, rel=1e-6)


def test_replan_record_round_trips_and_names_the_method():
    b = AdaptiveBoundary(0.05, "pocock", "two-sided")
    b.add_look(0.4)
    r = b.replan(0.2, 1.3)
    assert Replan.from_dict(r.to_dict()) == r
    assert "Müller & Schäfer 2001" in r.method and r.method == METHOD
    with pytest.raises(InvalidArgumentError, match="malformed"):
        Replan.from_dict({"segment": 1})


# --------------------------------------------------------------------------
# Conditional power (Jennison & Turnbull 2000, ch. 10)
# --------------------------------------------------------------------------


@pytest.mark.parametrize("drift", [0.0, 2.8, -1.0])
def test_conditional_power_matches_multivariate_normal(drift):
    b = AdaptiveBoundary(0.05, "obrien-fleming", "two-sided")
    first = b.add_look(0.3)
    z = 1.2
    reference = [0.6, 0.8, 1.0]
    cp = b.conditional_power(z, drift, reference=reference)
    future = SequentialBoundary.resume(0.05, "obrien-fleming", "two-sided", [0.3], [first.upper_z])
    bounds = [future.add_look(t).z for t in reference]
    ref_up, ref_low = mvn_conditional_crossing(0.3, z * math.sqrt(0.3), reference, bounds, [-x for x in bounds], drift)
    assert cp.upper == pytest.approx(ref_up, abs=2e-6)
    assert cp.lower == pytest.approx(ref_low, abs=2e-6)


def test_conditional_power_with_one_look_left_by_quadrature():
    # Direct quadrature: integrate the normal density of S(1) beyond the final bound.
    b = AdaptiveBoundary(0.025, "obrien-fleming", "greater")
    b.add_look(0.5)
    cp = b.conditional_power(1.0, 2.5)
    final = SequentialBoundary.resume(0.025, "obrien-fleming", "greater", [0.5], [b.looks[0].upper_z]).add_look(1.0).z
    s0 = 1.0 * math.sqrt(0.5)
    value, _ = integrate.quad(lambda s: stats.norm.pdf(s, loc=s0 + 2.5 * 0.5, scale=math.sqrt(0.5)),
                              final, np.inf, epsabs=1e-12)
    assert cp.upper == pytest.approx(value, abs=1e-9)
    assert cp.in_direction == cp.upper


def test_conditional_power_after_a_change_of_plan():
    b = AdaptiveBoundary(0.05, "obrien-fleming", "two-sided")
    b.add_look(0.4)
    b.replan(1.0, 2.0)
    b.add_look(1.0)
    z = 1.5
    cp = b.conditional_power(z, 2.0)
    # Independent: the remaining bound on the increment, mapped to the z of all data at fraction 2.
    seg_final = b.looks[-1]
    probe = AdaptiveBoundary.resume(0.05, "obrien-fleming", "two-sided",
                                    [x.to_dict() for x in b.looks], [b.replans[0]])
    last = probe.add_look(2.0)
    ref_up, ref_low = mvn_conditional_crossing(1.0, z * 1.0, [2.0], [last.upper_z], [last.lower_z], 2.0)
    assert cp.upper == pytest.approx(ref_up, abs=1e-9)
    assert cp.lower == pytest.approx(ref_low, abs=1e-9)
    assert seg_final.segment == 1


def test_conditional_power_at_zero_drift_is_the_conditional_error():
    b = AdaptiveBoundary(0.05, "pocock", "two-sided")
    b.add_look(0.5)
    cp = b.conditional_power(0.7, 0.0)
    assert (cp.upper, cp.lower) == pytest.approx(b.conditional_error(0.7), abs=1e-15)


@settings(max_examples=25, deadline=None)
@given(z=st.floats(-2.0, 2.0), drift=st.floats(-4.0, 4.0))
def test_conditional_power_is_a_probability_and_rises_with_drift(z, drift):
    b = AdaptiveBoundary(0.05, "obrien-fleming", "two-sided")
    b.add_look(0.5)
    lo = b.conditional_power(z, drift)
    hi = b.conditional_power(z, drift + 0.5)
    assert 0.0 <= lo.upper <= 1.0 and 0.0 <= lo.lower <= 1.0 and lo.upper + lo.lower <= 1.0 + 1e-12
    assert hi.upper >= lo.upper - 1e-12 and hi.lower <= lo.lower + 1e-12


def test_remaining_planned_fractions():
    assert remaining_planned_fractions(0.0, 4) == [0.25, 0.5, 0.75, 1.0]
    assert remaining_planned_fractions(0.5, 4) == [0.75, 1.0]
    assert remaining_planned_fractions(1.0, 4) == [1.0000001]
    with pytest.raises(InvalidArgumentError):
        remaining_planned_fractions(0.5, 0)


def test_conditional_powers_at_once_equal_one_at_a_time():
    b = AdaptiveBoundary(0.05, "obrien-fleming", "two-sided")
    b.add_look(0.35)
    both = b.conditional_powers(0.9, [2.8, -1.0], reference=[0.6, 1.0])
    for cp, drift in zip(both, (2.8, -1.0)):
        one = b.conditional_power(0.9, drift, reference=[0.6, 1.0])
        assert (cp.upper, cp.lower, cp.drift) == (one.upper, one.lower, one.drift)
