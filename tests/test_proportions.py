"""Score test and score intervals for a rate difference with a margin.

References: Farrington & Manning (1990), Statistics in Medicine 9:1447–1454;
Miettinen & Nurminen (1985), Statistics in Medicine 4:213–226 (from memory).
statsmodels' ``test_proportions_2indep`` / ``confint_proportions_2indep`` with
``method="score"`` are the outside figures: equal at δ0 = 0; for δ0 ≠ 0
statsmodels 0.15 solves a cubic with one wrong coefficient (statsmodels issue
10269), so there the restricted likelihood decides which figure is right.
"""

import math

import numpy as np
import pytest
from scipy import optimize, stats

from monitor.errors import InvalidArgumentError
from monitor.stats import fixed
from monitor.stats.proportions import restricted_rates, score_interval, score_statistic, score_test

smprop = pytest.importorskip("statsmodels.stats.proportion")

SM_ALT = {"two-sided": "two-sided", "greater": "larger", "less": "smaller"}


def cases(seed, count):
    rng = np.random.default_rng(seed)
    for _ in range(count):
        n1, n2 = (int(v) for v in rng.integers(5, 400, 2))
        p1, p2 = rng.uniform(0.0, 1.0, 2) ** rng.choice([1.0, 3.0])
        x1, x2 = int(rng.binomial(n1, p1)), int(rng.binomial(n2, p2))
        yield x1, n1, x2, n2, rng


def restricted_loglik(q1, x1, n1, x2, n2, delta):
    q2 = q1 - delta
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = [x1 * np.log(q1), (n1 - x1) * np.log1p(-q1), x2 * np.log(q2), (n2 - x2) * np.log1p(-q2)]
    return sum(np.nan_to_num(t, nan=0.0) if c == 0 else t
               for t, c in zip(terms, (x1, n1 - x1, x2, n2 - x2)))


def test_restricted_rates_maximise_the_restricted_likelihood():
    for x1, n1, x2, n2, rng in cases(1, 150):
        delta = float(rng.uniform(-0.6, 0.6))
        q1, q2 = restricted_rates(x1, n1, x2, n2, delta)
        assert q1 - q2 == pytest.approx(delta, abs=1e-12)
        lo, hi = max(0.0, delta) + 1e-12, min(1.0, 1.0 + delta) - 1e-12
        best = optimize.minimize_scalar(lambda q: -restricted_loglik(q, x1, n1, x2, n2, delta),
                                        bounds=(lo, hi), method="bounded", options={"xatol": 1e-13})
        assert restricted_loglik(q1, x1, n1, x2, n2, delta) >= -best.fun - 1e-7


@pytest.mark.parametrize("correction", [False, True], ids=["farrington-manning", "miettinen-nurminen"])
@pytest.mark.parametrize("alternative", ["two-sided", "greater", "less"])
def test_score_test_at_zero_difference_equals_statsmodels(correction, alternative):
    for x1, n1, x2, n2, _ in cases(2, 60):
        if x1 + x2 in (0, n1 + n2):
            continue
        r = score_test(x1, n1, x2, n2, 0.0, alternative=alternative, correction=correction)
        ref = smprop.test_proportions_2indep(x1, n1, x2, n2, value=0.0, method="score", compare="diff",
                                             alternative=SM_ALT[alternative], correction=correction)
        assert r.statistic == pytest.approx(ref.statistic, rel=1e-10)
        assert r.p_value == pytest.approx(ref.pvalue, rel=1e-9, abs=1e-15)


@pytest.mark.parametrize("correction", [False, True], ids=["farrington-manning", "miettinen-nurminen"])
def test_score_test_with_a_margin_uses_rates_at_least_as_likely_as_statsmodels(correction):
    for x1, n1, x2, n2, rng in cases(3, 80):
        delta = float(rng.uniform(-0.3, 0.3))
        if x1 + x2 in (0, n1 + n2):
            continue
        z, _ = score_statistic(x1, n1, x2, n2, delta, correction=correction)
        ref = smprop.test_proportions_2indep(x1, n1, x2, n2, value=delta, method="score", compare="diff",
                                             correction=correction)
        if not (math.isfinite(z) and np.isfinite(ref.statistic)):
            continue
        ours = restricted_loglik(restricted_rates(x1, n1, x2, n2, delta)[0], x1, n1, x2, n2, delta)
        theirs = restricted_loglik(ref.prop1_null, x1, n1, x2, n2, delta)
        # (statsmodels' cubic can also miss the admissible range and return nan.)
        assert not np.isfinite(theirs) or ours >= theirs - 1e-9
        # With statsmodels' own variance formula at our restricted rates the statistics agree.
        q1, q2 = restricted_rates(x1, n1, x2, n2, delta)
        var = q1 * (1 - q1) / n1 + q2 * (1 - q2) / n2
        if correction:
            var *= (n1 + n2) / (n1 + n2 - 1)
        if var > 0:
            assert z == pytest.approx((x1 / n1 - x2 / n2 - delta) / math.sqrt(var), rel=1e-10)


def test_score_interval_at_zero_spread_equals_statsmodels_score_interval_near_zero():
    # Where the interval's ends are near 0 the statsmodels cubic is nearly right: close agreement.
    r = score_interval(30, 200, 33, 200, stats.norm.isf(0.025), correction=False)
    ref = smprop.confint_proportions_2indep(30, 200, 33, 200, method="score", compare="diff",
                                            correction=False)
    assert r[0] == pytest.approx(ref[0], abs=2e-3) and r[1] == pytest.approx(ref[1], abs=2e-3)


def test_score_interval_is_the_set_the_score_test_does_not_reject():
    for x1, n1, x2, n2, rng in cases(4, 40):
        c = float(rng.uniform(1.5, 3.5))
        low, high = score_interval(x1, n1, x2, n2, c)
        for end, sign in ((low, 1.0), (high, -1.0)):
            if -0.999 < end < 0.999:
                assert score_statistic(x1, n1, x2, n2, end)[0] == pytest.approx(sign * c, abs=1e-6)
        low1, none = score_interval(x1, n1, x2, n2, c, "greater")
        assert none is None and low1 == pytest.approx(low, abs=1e-12)
        none, high1 = score_interval(x1, n1, x2, n2, c, "less")
        assert none is None and high1 == pytest.approx(high, abs=1e-12)
        # The fixed-sample test offers the same interval.
        r = fixed.two_proportions(n1, x1, n2, x2, alpha=2 * stats.norm.sf(c), interval="score")
        assert r.ci[0] == pytest.approx(low, abs=1e-9) and r.ci[1] == pytest.approx(high, abs=1e-9)


def exact_size(test, n1, n2, p1, p2, level):
    """Exact rejection probability of ``test(x1, x2) -> p`` by enumerating both binomials."""
    f1 = stats.binom.pmf(np.arange(n1 + 1), n1, p1)
    f2 = stats.binom.pmf(np.arange(n2 + 1), n2, p2)
    size = 0.0
    for x1 in range(n1 + 1):
        for x2 in range(n2 + 1):
            if f1[x1] * f2[x2] > 1e-14 and test(x1, x2) <= level:
                size += f1[x1] * f2[x2]
    return size


def test_margin_score_test_keeps_its_level_at_low_rates_where_wald_does_not():
    # Non-inferiority at rates 0.02 vs 0.05, margin −0.03, 100 per group (the null is true:
    # p1 − p2 = −0.03): the exact one-sided size at 0.025.
    def score_p(x1, x2):
        return score_test(x1, 100, x2, 100, -0.03, alternative="greater").p_value

    def wald_p(x1, x2):
        ref = smprop.test_proportions_2indep(x1, 100, x2, 100, value=-0.03, method="wald", compare="diff",
                                             alternative="larger")
        return ref.pvalue

    score = exact_size(score_p, 100, 100, 0.02, 0.05, 0.025)
    wald = exact_size(wald_p, 100, 100, 0.02, 0.05, 0.025)
    assert score < 0.03
    assert wald > 0.04


def test_bad_input_names_the_argument():
    with pytest.raises(InvalidArgumentError, match="successes1"):
        score_test(11, 10, 3, 10)
    with pytest.raises(InvalidArgumentError, match="null_difference"):
        score_test(1, 10, 3, 10, 1.5)
    with pytest.raises(InvalidArgumentError, match="critical"):
        score_interval(1, 10, 3, 10, -1.0)


def test_vectorised_score_statistics_equal_the_scalar_ones():
    from monitor.stats.proportions import score_statistics

    rng = np.random.default_rng(6)
    x1, x2 = rng.integers(0, 41, 300), rng.integers(0, 121, 300)
    for delta in (0.0, -0.05, 0.2):
        vector = score_statistics(x1, 40, x2, 120, delta)
        scalar = np.array([score_statistic(int(a), 40, int(b), 120, delta)[0] for a, b in zip(x1, x2)])
        finite = np.isfinite(scalar)
        assert np.array_equal(finite, np.isfinite(vector))
        assert np.allclose(vector[finite], scalar[finite], rtol=1e-12, atol=1e-12)
