"""Group-sequential boundaries against published tables, multivariate normal integration and Monte Carlo."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import optimize, stats

from monitor.stats.boundaries import (
    FutilitySpec,
    LookBoundary,
    SequentialBoundary,
    crossing_probabilities,
    efficacy_boundaries,
    futility_decision,
    nominal_decision,
)
from monitor.errors import InvalidArgumentError, UnknownSpendingError
from monitor.stats.spending import parse_spending
from tests import reference_boundaries as ref

# --------------------------------------------------------------------------
# Independent helpers
# --------------------------------------------------------------------------


def brownian_correlation(fractions):
    t = np.asarray(fractions, dtype=float)
    return np.sqrt(np.minimum.outer(t, t) / np.maximum.outer(t, t))


def mvn_continue_probability(fractions, upper, lower, drift=0.0, abseps=1e-7):
    """P(lower_j < Z_j < upper_j for every j) by scipy's multivariate normal integration."""
    t = np.asarray(fractions, dtype=float)
    mean = drift * np.sqrt(t)
    upper = np.asarray(upper, dtype=float)
    lower = np.asarray(lower, dtype=float)
    if t.size == 1:
        return float(stats.norm.cdf(upper[0] - mean[0]) - stats.norm.cdf(lower[0] - mean[0]))
    return float(
        stats.multivariate_normal.cdf(
            upper, mean, brownian_correlation(t), lower_limit=lower,
            abseps=abseps, releps=0.0, maxpts=4_000_000, rng=np.random.default_rng(20260101),
        )
    )


def classical_constant(looks, kind, alpha=0.05):
    """Solve for the Pocock or O'Brien–Fleming constant with our crossing probabilities.

    Pocock: |Z_k| >= C at every look; O'Brien–Fleming: |Z_k| >= C sqrt(K/k).
    Both on K equally spaced looks, two-sided level ``alpha``.
    """
    t = np.arange(1, looks + 1) / looks
    shape = np.ones(looks) if kind == "pocock" else np.sqrt(looks / np.arange(1, looks + 1))

    def excess(c):
        up, low = crossing_probabilities(t, c * shape, -c * shape)
        return up.sum() + low.sum() - alpha

    return optimize.brentq(excess, 1.0, 6.0, xtol=1e-10)


# --------------------------------------------------------------------------
# Published tables
# --------------------------------------------------------------------------


@pytest.mark.parametrize("looks", sorted(ref.POCOCK_CONSTANTS_TWO_SIDED_05), ids=lambda k: f"K={k}")
def test_pocock_constants_match_jennison_turnbull_table(looks):
    # Source: ref.POCOCK_SOURCE (3 decimals printed).
    expected = ref.POCOCK_CONSTANTS_TWO_SIDED_05[looks]
    assert classical_constant(looks, "pocock") == pytest.approx(expected, abs=6e-4)


@pytest.mark.parametrize("looks", sorted(ref.OBRIEN_FLEMING_CONSTANTS_TWO_SIDED_05), ids=lambda k: f"K={k}")
def test_obrien_fleming_constants_match_jennison_turnbull_table(looks):
    # Source: ref.OBRIEN_FLEMING_SOURCE (3 decimals printed).
    expected = ref.OBRIEN_FLEMING_CONSTANTS_TWO_SIDED_05[looks]
    assert classical_constant(looks, "obrien-fleming") == pytest.approx(expected, abs=6e-4)


def test_pocock_constant_three_looks_by_multivariate_normal():
    # The constant our engine solves for also gives alpha under scipy's integration.
    c = classical_constant(3, "pocock")
    t = [1 / 3, 2 / 3, 1.0]
    assert 1.0 - mvn_continue_probability(t, [c] * 3, [-c] * 3, abseps=1e-8) == pytest.approx(0.05, abs=1e-6)


@pytest.mark.parametrize("spending", sorted(ref.LAN_DEMETS_FIVE_LOOKS))
def test_lan_demets_five_looks_match_published_values(spending):
    # Source: ref.LAN_DEMETS_SOURCE (3 decimals printed).
    got = [b.z for b in efficacy_boundaries([0.2, 0.4, 0.6, 0.8, 1.0], 0.05, spending, "two-sided")]
    np.testing.assert_allclose(got, ref.LAN_DEMETS_FIVE_LOOKS[spending], atol=6e-4)


def test_hwang_shih_decani_three_looks_match_published_values():
    # Source: ref.HWANG_SHIH_DECANI_SOURCE (4 decimals printed).
    got = [b.z for b in efficacy_boundaries([1 / 3, 2 / 3, 1.0], 0.025, "hsd:-4", "greater")]
    np.testing.assert_allclose(got, ref.HWANG_SHIH_DECANI_MINUS4_THREE_LOOKS, atol=1e-4)


def test_obrien_fleming_five_looks_spend_exactly_by_multivariate_normal():
    # Cumulative crossing probability at our boundaries, integrated independently,
    # equals the spending function at each look (1e-6 probability ~ 1e-5 in z).
    t = [0.2, 0.4, 0.6, 0.8, 1.0]
    looks = efficacy_boundaries(t, 0.05, "obrien-fleming", "two-sided")
    z = np.array([b.z for b in looks])
    for k in (2, 3, 5):
        crossed = 1.0 - mvn_continue_probability(t[:k], z[:k], -z[:k], abseps=1e-7 if k < 5 else 5e-7)
        assert crossed == pytest.approx(looks[k - 1].cumulative_alpha, abs=2e-6)


def test_single_final_look_is_the_fixed_sample_test():
    (b,) = efficacy_boundaries([1.0], 0.05, "obrien-fleming", "two-sided")
    assert b.z == pytest.approx(ref.FIXED_SAMPLE_TWO_SIDED_05, abs=1e-6)
    assert b.final and b.cumulative_alpha == 0.05 and b.nominal_p == pytest.approx(0.025)


# --------------------------------------------------------------------------
# Exact crossing probabilities: irregular looks
# --------------------------------------------------------------------------

IRREGULAR_DESIGNS = [
    ([0.13, 0.31, 0.72], "pocock", "two-sided", 0.05),
    ([0.07, 0.5, 1.04], "obrien-fleming", "two-sided", 0.05),
    ([0.25, 0.26, 0.9], "hsd:-2", "greater", 0.025),
    ([0.4, 0.61, 1.0], "power:2.5", "less", 0.1),
]


@pytest.mark.parametrize("fractions, spending, alternative, alpha", IRREGULAR_DESIGNS,
                         ids=[d[1] + "-" + d[2] for d in IRREGULAR_DESIGNS])
def test_crossing_probability_equals_alpha_spent_by_multivariate_normal(fractions, spending, alternative, alpha):
    looks = efficacy_boundaries(fractions, alpha, spending, alternative)
    z = np.array([b.z for b in looks])
    lower = -z if alternative == "two-sided" else np.full(z.size, -np.inf)
    for k in range(1, len(fractions) + 1):
        crossed = 1.0 - mvn_continue_probability(fractions[:k], z[:k], lower[:k])
        assert crossed == pytest.approx(looks[k - 1].cumulative_alpha, abs=1e-6)


@pytest.mark.parametrize("drift", [0.0, 1.7, -2.4])
def test_crossing_probabilities_match_multivariate_normal_with_both_bounds(drift):
    t = [0.15, 0.42, 0.8]
    upper = [np.inf, 2.6, 2.1]
    lower = [-1.5, -np.inf, 0.3]
    up, low = crossing_probabilities(t, upper, lower, drift=drift)
    survive = [1.0] + [mvn_continue_probability(t[:k], upper[:k], lower[:k], drift) for k in (1, 2, 3)]
    stop = -np.diff(survive)
    np.testing.assert_allclose(up + low, stop, atol=1e-6)
    # Upper crossing alone: replace the look's lower bound by -inf.
    for k in (2, 3):
        before = mvn_continue_probability(t[:k - 1], upper[:k - 1], lower[:k - 1], drift)
        lower_k = list(lower[:k - 1]) + [-np.inf]
        below_upper = mvn_continue_probability(t[:k], upper[:k], lower_k, drift)
        assert up[k - 1] == pytest.approx(before - below_upper, abs=1e-6)


def test_crossing_probabilities_by_monte_carlo_irregular_looks():
    rng = np.random.default_rng(7)
    t = np.array([0.03, 0.11, 0.12, 0.4, 0.55, 0.93, 1.2])
    upper = np.array([np.inf, 3.2, 3.0, 2.5, 2.4, 2.1, 2.0])
    lower = np.array([-np.inf, -1.0, -0.8, 0.0, 0.2, 1.0, 2.0])
    drift = 2.2
    paths = 400_000
    increments = rng.standard_normal((paths, t.size)) * np.sqrt(np.diff(t, prepend=0.0)) + drift * np.diff(t, prepend=0.0)
    z = np.cumsum(increments, axis=1) / np.sqrt(t)
    alive = np.ones(paths, dtype=bool)
    mc_up, mc_low = [], []
    for k in range(t.size):
        hit_up = alive & (z[:, k] >= upper[k])
        hit_low = alive & (z[:, k] <= lower[k]) & ~hit_up
        mc_up.append(hit_up.mean())
        mc_low.append(hit_low.mean())
        alive &= ~(hit_up | hit_low)
    up, low = crossing_probabilities(t, upper, lower, drift=drift)
    for exact, sim in zip(np.r_[up, low], np.r_[mc_up, mc_low]):
        se = math.sqrt(max(exact * (1 - exact), 1e-12) / paths)
        assert abs(exact - sim) < 4.5 * se + 1e-6


def test_monte_carlo_false_alarm_rate_of_irregular_boundaries():
    rng = np.random.default_rng(11)
    t = np.array([0.09, 0.2, 0.47, 0.51, 0.77, 1.0])
    looks = efficacy_boundaries(t, 0.05, "pocock", "two-sided")
    z_bound = np.array([b.z for b in looks])
    paths = 400_000
    z = np.cumsum(rng.standard_normal((paths, t.size)) * np.sqrt(np.diff(t, prepend=0.0)), axis=1) / np.sqrt(t)
    crossed_by = np.maximum.accumulate(np.abs(z) >= z_bound, axis=1).mean(axis=0)
    cumulative = np.array([b.cumulative_alpha for b in looks])
    se = np.sqrt(cumulative * (1 - cumulative) / paths)
    assert np.all(np.abs(crossed_by - cumulative) < 4.5 * se)


def test_crossing_probabilities_refine_stably():
    # The grid is adaptive; a design with very uneven increments must agree
    # with the multivariate normal integral as well as a regular one does.
    t = [0.001, 0.0015, 0.6, 0.6004]
    upper = [3.5, 3.4, 2.4, 2.3]
    lower = [-3.5, -3.4, -2.4, -2.3]
    up, low = crossing_probabilities(t, upper, lower)
    survive = mvn_continue_probability(t, upper, lower, abseps=1e-7)
    assert 1.0 - up.sum() - low.sum() == pytest.approx(survive, abs=2e-6)


def test_crossing_probabilities_equal_bounds_stop_everything():
    up, low = crossing_probabilities([0.5, 1.0], [2.5, 1.9], [-np.inf, 1.9], drift=1.0)
    assert up.sum() + low.sum() == pytest.approx(1.0, abs=1e-9)


@pytest.mark.parametrize(
    "kwargs, fragment",
    [
        (dict(fractions=[0.5, 0.4], upper_z=[2, 2]), "strictly increase"),
        (dict(fractions=[0.0, 0.4], upper_z=[2, 2]), "> 0"),
        (dict(fractions=[0.5], upper_z=[2, 2]), "one value per fraction"),
        (dict(fractions=[0.5], upper_z=[2], lower_z=[3]), "must not exceed"),
        (dict(fractions=[0.5], upper_z=[float("nan")]), "nan"),
        (dict(fractions=[0.5], upper_z=[2], drift=float("inf")), "drift"),
    ],
)
def test_crossing_probabilities_validation(kwargs, fragment):
    with pytest.raises(InvalidArgumentError, match=fragment):
        crossing_probabilities(**kwargs)


# --------------------------------------------------------------------------
# Properties
# --------------------------------------------------------------------------

spending_specs = st.sampled_from(["obrien-fleming", "pocock", "hsd:-4", "hsd:0", "hsd:2", "power:1", "power:3"])
alternatives = st.sampled_from(["two-sided", "greater", "less"])


@st.composite
def fraction_sequences(draw):
    gaps = draw(st.lists(st.floats(0.01, 0.5), min_size=1, max_size=7))
    t = np.cumsum(gaps)
    if draw(st.booleans()):
        t = t / t[-1]
        t[-1] *= draw(st.floats(1.0, 1.3))
    else:
        # An unfinished design: every look short of the plan.
        t = t / max(t[-1], 1.0) * 0.999
    return [float(x) for x in t]


@settings(max_examples=40, deadline=None)
@given(fraction_sequences(), spending_specs, alternatives, st.floats(0.001, 0.3))
def test_boundaries_are_coherent(fractions, spending, alternative, alpha):
    boundary = SequentialBoundary(alpha, spending, alternative)
    previous = 0.0
    for t in fractions:
        b = boundary.add_look(t)
        assert not math.isnan(b.z)
        assert b.cumulative_alpha >= previous - 1e-15
        assert b.alpha_spent == pytest.approx(b.cumulative_alpha - previous, abs=1e-15)
        previous = b.cumulative_alpha
        # Boundaries are finite whenever the look may spend a reasonable amount.
        if b.alpha_spent > 1e-9:
            assert math.isfinite(b.z)
        assert b.nominal_p == pytest.approx(stats.norm.sf(b.z), abs=1e-15)
        # What was really spent tracks what was allowed.
        assert boundary.alpha_used == pytest.approx(b.cumulative_alpha, abs=1e-9)
    if fractions[-1] >= 1.0:
        assert boundary.complete and boundary.looks[-1].cumulative_alpha == alpha


@settings(max_examples=25, deadline=None)
@given(st.floats(0.001, 0.5), alternatives, spending_specs)
def test_one_final_look_is_fixed_sample(alpha, alternative, spending):
    (b,) = efficacy_boundaries([1.0], alpha, spending, alternative)
    per_side = alpha / 2 if alternative == "two-sided" else alpha
    assert b.z == pytest.approx(stats.norm.isf(per_side), abs=1e-8)


def test_two_sided_005_single_look():
    assert SequentialBoundary(0.05, "pocock", "two-sided").add_look(1.0).z == pytest.approx(1.959964, abs=1e-6)


def test_less_and_greater_share_magnitudes():
    t = [0.3, 0.55, 1.0]
    greater = efficacy_boundaries(t, 0.025, "hsd:-3", "greater")
    less = efficacy_boundaries(t, 0.025, "hsd:-3", "less")
    assert [b.z for b in greater] == pytest.approx([b.z for b in less], abs=1e-12)


def test_boundary_depends_only_on_looks_so_far():
    a = efficacy_boundaries([0.2, 0.45, 0.6, 1.0], 0.05, "pocock", "two-sided")
    b = efficacy_boundaries([0.2, 0.45, 0.9], 0.05, "pocock", "two-sided")
    assert a[:2] == b[:2]


def test_tiny_first_fraction_with_obrien_fleming_is_infinite_not_nan():
    boundary = SequentialBoundary(0.05, "obrien-fleming", "two-sided")
    first = boundary.add_look(0.01)
    assert first.z == math.inf and first.nominal_p == 0.0
    rest = [boundary.add_look(t) for t in (0.5, 1.0)]
    assert all(math.isfinite(b.z) for b in rest)
    assert boundary.alpha_used == pytest.approx(0.05, abs=1e-10)


def test_final_look_spends_the_rest_even_past_plan():
    boundary = SequentialBoundary(0.05, "obrien-fleming", "two-sided")
    boundary.add_look(0.5)
    last = boundary.add_look(1.25)
    assert last.final and last.cumulative_alpha == 0.05
    assert boundary.alpha_used == pytest.approx(0.05, abs=1e-10)
    with pytest.raises(InvalidArgumentError, match="final look"):
        boundary.add_look(1.5)


# --------------------------------------------------------------------------
# Resume
# --------------------------------------------------------------------------


@pytest.mark.parametrize("alternative", ["two-sided", "greater"])
def test_resume_reproduces_add_look(alternative):
    t = [0.11, 0.3, 0.32, 0.58, 0.8, 1.0]
    spec = FutilitySpec("hsd:-2", 0.15, -2.9 if alternative == "two-sided" else 2.9)
    live = SequentialBoundary(0.05, "hsd:-4", alternative, futility=spec)
    recorded = [live.add_look(x) for x in t[:3]]
    resumed = SequentialBoundary.resume(
        0.05, "hsd:-4", alternative, [b.fraction for b in recorded], [b.z for b in recorded],
        futility_z=[b.futility_z for b in recorded], futility=spec,
    )
    assert resumed.looks == tuple(recorded)
    for x in t[3:]:
        a, b = live.add_look(x), resumed.add_look(x)
        assert b.z == pytest.approx(a.z, abs=1e-10)
        assert b.futility_z == pytest.approx(a.futility_z, abs=1e-10)
        assert b.cumulative_alpha == a.cumulative_alpha


def test_resume_uses_recorded_values_and_still_ends_at_alpha():
    t = [0.2, 0.4, 0.6, 0.8]
    rounded = [round(b.z, 2) for b in efficacy_boundaries(t, 0.05, "obrien-fleming", "two-sided")]
    resumed = SequentialBoundary.resume(0.05, "obrien-fleming", "two-sided", t, rounded)
    assert [b.z for b in resumed.looks] == rounded
    resumed.add_look(1.0)
    # The final look makes up for what the rounded boundaries over- or under-spent.
    assert resumed.alpha_used == pytest.approx(0.05, abs=1e-9)
    up, low = crossing_probabilities(resumed.fractions, [b.z for b in resumed.looks], [-b.z for b in resumed.looks])
    assert up.sum() + low.sum() == pytest.approx(0.05, abs=1e-9)


def test_resume_accepts_infinite_recorded_boundary():
    boundary = SequentialBoundary.resume(0.05, "obrien-fleming", "two-sided", [0.01, 0.5], [math.inf, 2.96])
    assert boundary.looks[0].z == math.inf
    assert math.isfinite(boundary.add_look(1.0).z)


@pytest.mark.parametrize(
    "kwargs, fragment",
    [
        (dict(fractions=[0.2, 0.4], upper_z=[3.0]), "upper_z"),
        (dict(fractions=[0.4, 0.2], upper_z=[3.0, 2.5]), "strictly increase"),
        (dict(fractions=[0.2], upper_z=[-1.0]), "magnitude"),
        (dict(fractions=[0.2], upper_z=[float("nan")]), "upper_z"),
        (dict(fractions=[0.2], upper_z=[3.0], futility_z=[0.1]), "futility_z"),
        (dict(fractions=[0.2], upper_z=[3.0], futility=FutilitySpec("pocock", 0.2, 2.5)), "futility_z"),
    ],
)
def test_resume_validation(kwargs, fragment):
    with pytest.raises(InvalidArgumentError, match=fragment):
        SequentialBoundary.resume(0.05, "pocock", "two-sided", **kwargs)


# --------------------------------------------------------------------------
# Validation at the public edge
# --------------------------------------------------------------------------


@pytest.mark.parametrize("bad", [0.5, 0.4, float("nan"), -0.1, "abc"])
def test_fractions_must_strictly_increase(bad):
    boundary = SequentialBoundary(0.05, "pocock", "two-sided")
    boundary.add_look(0.5)
    with pytest.raises(InvalidArgumentError, match="fraction") as info:
        boundary.add_look(bad)
    assert repr(bad) in str(info.value)


def test_looks_closer_than_the_minimum_increment_are_refused():
    boundary = SequentialBoundary(0.05, "pocock", "two-sided")
    boundary.add_look(0.5)
    with pytest.raises(InvalidArgumentError, match="0.50000004"):
        boundary.add_look(0.50000004)
    with pytest.raises(InvalidArgumentError, match="too little new information"):
        crossing_probabilities([0.5, 0.50000004], [2.0, 2.0])


def test_smallest_allowed_increment_is_accurate_and_harmless():
    # A look a hair after another spends next to nothing, so later boundaries
    # barely move compared with the design that skips it.
    with_tiny = efficacy_boundaries([0.3, 0.3 + 1.5e-7, 0.6, 1.0], 0.05, "pocock", "two-sided")
    without = efficacy_boundaries([0.3, 0.6, 1.0], 0.05, "pocock", "two-sided")
    assert math.isfinite(with_tiny[1].z)
    assert with_tiny[2].z == pytest.approx(without[1].z, abs=1e-4)
    assert with_tiny[3].z == pytest.approx(without[2].z, abs=1e-4)
    z = [b.z for b in with_tiny]
    up, low = crossing_probabilities([0.3, 0.3 + 1.5e-7, 0.6, 1.0], z, [-x for x in z])
    assert up.sum() + low.sum() == pytest.approx(0.05, abs=1e-8)


@pytest.mark.parametrize("alpha", [0.0, 1.0, -0.1, 1.5, "x"])
def test_alpha_must_be_in_open_unit_interval(alpha):
    with pytest.raises(InvalidArgumentError, match="alpha"):
        SequentialBoundary(alpha, "pocock", "two-sided")


def test_unknown_alternative_and_spending():
    with pytest.raises(InvalidArgumentError, match="alternative"):
        SequentialBoundary(0.05, "pocock", "both")
    with pytest.raises(UnknownSpendingError, match="haybittle"):
        SequentialBoundary(0.05, "haybittle", "two-sided")


@pytest.mark.parametrize(
    "kwargs, fragment",
    [(dict(beta=0.0), "beta"), (dict(beta=1.2), "beta"), (dict(drift=0.0), "drift"), (dict(drift=float("nan")), "drift")],
)
def test_futility_spec_validation(kwargs, fragment):
    args = dict(spending="pocock", beta=0.2, drift=2.8) | kwargs
    with pytest.raises(InvalidArgumentError, match=fragment):
        FutilitySpec(**args)


# --------------------------------------------------------------------------
# Futility by beta-spending
# --------------------------------------------------------------------------


def test_futility_is_non_binding_and_spends_beta_under_the_alternative():
    t = [0.25, 0.5, 0.75, 1.0]
    drift = 2.9
    spec = FutilitySpec("hsd:-2", 0.1, drift)
    boundary = SequentialBoundary(0.025, "hsd:-4", "greater", futility=spec)
    looks = [boundary.add_look(x) for x in t]
    plain = efficacy_boundaries(t, 0.025, "hsd:-4", "greater")
    assert [b.z for b in looks] == [b.z for b in plain]
    assert looks[-1].futility_z == looks[-1].z
    assert all(b.futility_z <= b.z for b in looks)
    upper = [b.z for b in looks]
    lower = [b.futility_z for b in looks]
    _, below = crossing_probabilities(t, upper, lower, drift=drift)
    beta_allowed = parse_spending("hsd:-2").cumulative(np.array(t[:-1]), 0.1)
    np.testing.assert_allclose(np.cumsum(below[:-1]), beta_allowed, atol=1e-9)
    # Independent check of the first three looks by multivariate normal integration.
    for k in (1, 2, 3):
        before = mvn_continue_probability(t[:k - 1], upper[:k - 1], lower[:k - 1], drift) if k > 1 else 1.0
        above = mvn_continue_probability(t[:k], upper[:k - 1] + [np.inf], lower[:k], drift)
        assert before - above == pytest.approx(below[k - 1], abs=1e-6)


def test_two_sided_futility_follows_the_planned_direction():
    t = [0.3, 0.6, 1.0]
    down = SequentialBoundary(0.05, "obrien-fleming", "two-sided", futility=FutilitySpec("pocock", 0.2, -2.8))
    up = SequentialBoundary(0.05, "obrien-fleming", "two-sided", futility=FutilitySpec("pocock", 0.2, 2.8))
    assert down.futility_direction == -1 and up.futility_direction == 1
    for x in t:
        a, b = down.add_look(x), up.add_look(x)
        # Symmetric efficacy, so the planned-direction futility bounds agree.
        assert a.futility_z == pytest.approx(b.futility_z, abs=1e-12)
    assert a.futility_z == a.z


def test_futility_capped_at_efficacy_and_absent_without_spec():
    # A huge beta would push the bound above the efficacy bound: it is capped.
    boundary = SequentialBoundary(0.025, "pocock", "greater", futility=FutilitySpec("power:0.05", 0.9, 0.5))
    b = boundary.add_look(0.5)
    assert b.futility_z <= b.z
    assert SequentialBoundary(0.025, "pocock", "greater").add_look(0.5).futility_z is None


def test_less_futility_is_on_the_planned_direction_scale():
    # For "less" the planned direction is -Z: bounds equal those of "greater".
    spec = FutilitySpec("hsd:-2", 0.1, -2.9)
    less = SequentialBoundary(0.025, "hsd:-4", "less", futility=spec)
    greater = SequentialBoundary(0.025, "hsd:-4", "greater", futility=FutilitySpec("hsd:-2", 0.1, 2.9))
    assert less.futility_direction == -1
    for t in (0.3, 0.6, 1.0):
        assert less.add_look(t).futility_z == pytest.approx(greater.add_look(t).futility_z, abs=1e-12)


def test_futility_before_any_beta_is_minus_infinity():
    boundary = SequentialBoundary(0.025, "obrien-fleming", "greater", futility=FutilitySpec("obrien-fleming", 0.1, 2.9))
    assert boundary.add_look(0.01).futility_z == -math.inf


# --------------------------------------------------------------------------
# Decisions for p-value based tests
# --------------------------------------------------------------------------


@settings(max_examples=50, deadline=None)
@given(st.floats(-5, 5), alternatives)
def test_nominal_decision_agrees_with_z_comparison(z_observed, alternative):
    b = efficacy_boundaries([0.4, 1.0], 0.05, "pocock", alternative)[0]
    p_upper, p_lower = stats.norm.sf(z_observed), stats.norm.cdf(z_observed)
    by_z = {"greater": z_observed >= b.z, "less": z_observed <= -b.z, "two-sided": abs(z_observed) >= b.z}[alternative]
    if abs(abs(z_observed) - b.z) > 1e-9:
        assert nominal_decision(p_upper, p_lower, b, alternative) == by_z


def test_futility_decision_uses_the_planned_direction():
    spec = FutilitySpec("pocock", 0.2, -2.8)
    boundary = SequentialBoundary(0.05, "obrien-fleming", "two-sided", futility=spec)
    b = boundary.add_look(0.5)
    d = boundary.futility_direction
    for z in (-3.0, -1.0, b.futility_z * d - 0.01, b.futility_z * d + 0.01, 1.0):
        expected = d * z < b.futility_z
        assert futility_decision(stats.norm.sf(z), stats.norm.cdf(z), b, d) == expected
    plain = SequentialBoundary(0.05, "pocock", "two-sided").add_look(0.5)
    assert futility_decision(0.9, 0.1, plain, 1) is False


def test_look_boundary_is_frozen():
    b = efficacy_boundaries([1.0], 0.05, "pocock", "two-sided")[0]
    assert isinstance(b, LookBoundary)
    with pytest.raises(AttributeError):
        b.z = 1.0  # type: ignore[misc]
    assert b.to_dict()["z"] == b.z
