"""Fixed-sample tests against scipy, statsmodels, worked examples and invariants."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from monitor.stats import fixed
from monitor.stats.proportions import score_test
from monitor.errors import InvalidArgumentError
from monitor.stats.summaries import MomentSummary

from reference_fixed import NEWCOMBE_EXAMPLES, QUANTILES, SLEEP_EXAMPLES, SLEEP_GROUP1, SLEEP_GROUP2

smprop = pytest.importorskip("statsmodels.stats.proportion")

ALTS = ["two-sided", "greater", "less"]
SCIPY_ALT = {"two-sided": "two-sided", "greater": "greater", "less": "less"}
SM_ALT = {"two-sided": "two-sided", "greater": "larger", "less": "smaller"}


def close(a, b, rel=1e-9, abs_=1e-12):
    return a == pytest.approx(b, rel=rel, abs=abs_)


def random_cases(seed, count):
    rng = np.random.default_rng(seed)
    for i in range(count):
        n1, n2 = rng.integers(2, 60, size=2)
        loc = rng.normal(0, 50)
        a = rng.normal(loc, rng.uniform(0.1, 20), size=n1)
        b = rng.normal(loc + rng.normal(0, 3), rng.uniform(0.1, 20), size=n2)
        delta0 = [0.0, float(rng.normal(0, 2))][i % 2]
        yield a, b, delta0, ALTS[i % 3], float(rng.choice([0.01, 0.05, 0.1, 0.2]))


# ---------------------------------------------------------------------------
# against scipy


@pytest.mark.parametrize("equal_var", [True, False], ids=["pooled", "welch"])
def test_two_sample_t_matches_scipy(equal_var):
    method = "pooled" if equal_var else "welch"
    for a, b, delta0, alt, alpha in random_cases(11 if equal_var else 12, 60):
        r = fixed.from_summaries(method, MomentSummary.from_values(a), MomentSummary.from_values(b),
                                 null_difference=delta0, alternative=alt, alpha=alpha)
        ref = stats.ttest_ind_from_stats(a.mean() - delta0, a.std(ddof=1), len(a), b.mean(), b.std(ddof=1),
                                         len(b), equal_var=equal_var, alternative=SCIPY_ALT[alt])
        assert close(r.statistic, ref.statistic, rel=1e-8)
        assert close(r.p_value, ref.pvalue, rel=1e-7, abs_=1e-14)
        # scipy's raw-data test supplies the interval (at delta0 = 0 it is for the difference).
        raw = stats.ttest_ind(a, b, equal_var=equal_var, alternative=SCIPY_ALT[alt])
        low, high = raw.confidence_interval(1 - alpha)
        exp_ci = (None if alt == "less" else low, None if alt == "greater" else high)
        for got, want in zip(r.ci, exp_ci):
            assert (got is None) == (want is None or math.isinf(want))
            if got is not None:
                assert close(got, want, rel=1e-8, abs_=1e-9)
        assert r.reject == (ref.pvalue <= alpha)
        assert close(r.df, raw.df, rel=1e-10)


def test_paired_matches_scipy_ttest_rel():
    rng = np.random.default_rng(5)
    for i in range(60):
        n = int(rng.integers(2, 50))
        base = rng.normal(100, 10, size=n)
        a = base + rng.normal(0.5, rng.uniform(0.1, 3), size=n)
        b = base + rng.normal(0, rng.uniform(0.1, 3), size=n)
        alt, alpha = ALTS[i % 3], [0.05, 0.1, 0.01][i % 3]
        delta0 = 0.0 if i % 2 else float(rng.normal(0, 1))
        diffs = MomentSummary.from_values(a - b)
        r = fixed.from_summaries("paired", diffs, None, null_difference=delta0, alternative=alt, alpha=alpha)
        ref = stats.ttest_rel(a - delta0, b, alternative=SCIPY_ALT[alt])
        assert close(r.statistic, ref.statistic, rel=1e-8)
        assert close(r.p_value, ref.pvalue, rel=1e-7, abs_=1e-14)
        assert r.df == n - 1
        low, high = stats.ttest_rel(a, b, alternative=SCIPY_ALT[alt]).confidence_interval(1 - alpha)
        if alt != "less":
            assert close(r.ci[0], low, rel=1e-8, abs_=1e-9)
        else:
            assert r.ci[0] is None
        if alt != "greater":
            assert close(r.ci[1], high, rel=1e-8, abs_=1e-9)
        else:
            assert r.ci[1] is None


def test_z_test_matches_normal_distribution():
    rng = np.random.default_rng(8)
    for i in range(60):
        n1, n2 = (int(v) for v in rng.integers(1, 200, size=2))
        s1, s2 = rng.uniform(0.5, 10, size=2)
        m1, m2 = rng.normal(0, 3, size=2)
        alt, delta0 = ALTS[i % 3], float(rng.normal(0, 1))
        r = fixed.z_test(n1, m1, s1, n2, m2, s2, null_difference=delta0, alternative=alt)
        se = math.sqrt(s1 ** 2 / n1 + s2 ** 2 / n2)
        z = (m1 - m2 - delta0) / se
        want = {"two-sided": 2 * stats.norm.sf(abs(z)), "greater": stats.norm.sf(z),
                "less": stats.norm.cdf(z)}[alt]
        assert r.df is None
        assert close(r.statistic, z) and close(r.p_value, want, abs_=1e-15)
        assert close(r.standard_error, se)


def test_z_test_p_value_by_monte_carlo():
    # Under the null the z statistic with the right sigmas is standard normal:
    # the two-sided rejection rate at 0.05 must sit at 0.05 within MC error.
    rng = np.random.default_rng(3)
    n1, n2, s1, s2 = 7, 11, 2.0, 5.0
    m1 = rng.normal(1.0, s1, size=(20000, n1)).mean(axis=1)
    m2 = rng.normal(1.0, s2, size=(20000, n2)).mean(axis=1)
    rejects = np.mean([fixed.z_test(n1, a, s1, n2, b, s2).reject for a, b in zip(m1[:4000], m2[:4000])])
    assert abs(rejects - 0.05) < 4 * math.sqrt(0.05 * 0.95 / 4000)


# ---------------------------------------------------------------------------
# against statsmodels


def random_rate_cases(seed, count):
    rng = np.random.default_rng(seed)
    for i in range(count):
        n1, n2 = (int(v) for v in rng.integers(5, 400, size=2))
        p1, p2 = rng.uniform(0.03, 0.97, size=2)
        yield n1, int(rng.binomial(n1, p1)), n2, int(rng.binomial(n2, p2)), ALTS[i % 3], \
            float(rng.choice([0.01, 0.05, 0.1]))


def test_two_proportions_pooled_matches_proportions_ztest():
    for n1, x1, n2, x2, alt, alpha in random_rate_cases(21, 80):
        if x1 + x2 in (0, n1 + n2):
            continue
        r = fixed.two_proportions(n1, x1, n2, x2, alternative=alt, alpha=alpha)
        z, p = smprop.proportions_ztest([x1, x2], [n1, n2], alternative=SM_ALT[alt])
        assert close(r.statistic, z, rel=1e-9) and close(r.p_value, p, rel=1e-8, abs_=1e-15)
        assert "pooled" in r.notes[0]


def test_two_proportions_nonzero_null_is_the_farrington_manning_score_test():
    # The score statistic itself is checked against the restricted likelihood and
    # statsmodels in test_proportions.py; here the fixed-sample test must use it.
    rng = np.random.default_rng(4)
    for n1, x1, n2, x2, alt, alpha in random_rate_cases(22, 80):
        if x1 in (0, n1) and x2 in (0, n2):
            continue
        delta0 = float(rng.uniform(-0.3, 0.3))
        r = fixed.two_proportions(n1, x1, n2, x2, null_difference=delta0, alternative=alt, alpha=alpha)
        ref = score_test(x1, n1, x2, n2, delta0, alternative=alt)
        assert close(r.statistic, ref.statistic, rel=1e-12)
        assert close(r.p_value, ref.p_value, rel=1e-12, abs_=1e-15)
        assert "Farrington–Manning" in r.notes[0]


@pytest.mark.parametrize("interval", ["newcombe", "wald"])
def test_two_proportions_interval_matches_statsmodels(interval):
    for n1, x1, n2, x2, alt, alpha in random_rate_cases(23, 80):
        r = fixed.two_proportions(n1, x1, n2, x2, alternative=alt, alpha=alpha, interval=interval)
        level_alpha = alpha if alt == "two-sided" else 2 * alpha
        low, high = smprop.confint_proportions_2indep(x1, n1, x2, n2, method=interval, compare="diff",
                                                      alpha=level_alpha)
        if alt != "less":
            assert close(r.ci[0], low, rel=1e-9, abs_=1e-12)
        if alt != "greater":
            assert close(r.ci[1], high, rel=1e-9, abs_=1e-12)
        assert (r.ci[0] is None) == (alt == "less") and (r.ci[1] is None) == (alt == "greater")


# ---------------------------------------------------------------------------
# worked examples and tables


@pytest.mark.parametrize("method,stat,df,p,low,high,source", SLEEP_EXAMPLES,
                         ids=[e[0] for e in SLEEP_EXAMPLES])
def test_sleep_data_worked_examples(method, stat, df, p, low, high, source):
    if method == "paired":
        r = fixed.from_summaries("paired", MomentSummary.from_values(
            np.subtract(SLEEP_GROUP1, SLEEP_GROUP2)), None)
    else:
        r = fixed.from_summaries(method, MomentSummary.from_values(SLEEP_GROUP1),
                                 MomentSummary.from_values(SLEEP_GROUP2))
    assert r.statistic == pytest.approx(stat, abs=1e-4)
    assert r.df == pytest.approx(df, abs=1e-3)
    assert r.p_value == pytest.approx(p, abs=1e-5)
    assert r.ci[0] == pytest.approx(low, abs=1e-6) and r.ci[1] == pytest.approx(high, abs=1e-6)
    assert r.estimate == pytest.approx(-1.58)


@pytest.mark.parametrize("x1,n1,x2,n2,low,high", NEWCOMBE_EXAMPLES)
def test_newcombe_worked_examples(x1, n1, x2, n2, low, high):
    r = fixed.two_proportions(n1, x1, n2, x2)
    assert r.ci[0] == pytest.approx(low, abs=5e-5) and r.ci[1] == pytest.approx(high, abs=5e-5)


@pytest.mark.parametrize("dist,df,prob,value", QUANTILES)
def test_table_critical_values(dist, df, prob, value):
    if dist == "normal":
        alt, alpha = ("greater", 1 - prob) if prob == 0.95 else ("two-sided", 2 * (1 - prob))
        r = fixed.z_test(10, 1.0, 1.0, 10, 0.0, 1.0, alternative=alt, alpha=alpha)
    else:
        # pooled t has n1 + n2 - 2 df; split df + 2 values over two groups.
        n1 = (df + 2) // 2
        alt, alpha = ("two-sided", 2 * (1 - prob)) if prob == 0.975 else ("greater", 1 - prob)
        r = fixed.pooled_t(n1, 1.0, 1.0, df + 2 - n1, 0.0, 1.0, alternative=alt, alpha=alpha)
        assert r.df == df
    assert r.critical_values[-1] == pytest.approx(value, abs=5e-4)
    if alt == "two-sided":
        assert r.critical_values[0] == -r.critical_values[1]


def test_less_critical_value_is_negative():
    r = fixed.z_test(10, 1.0, 1.0, 10, 0.0, 1.0, alternative="less")
    assert r.critical_values == (pytest.approx(-1.6448536),)


# ---------------------------------------------------------------------------
# effect sizes, variance ratio, intervals at other levels


def test_hedges_g_exact_factor():
    r = fixed.pooled_t(8, 12.0, 2.0, 10, 10.0, 2.5)
    sp = math.sqrt((7 * 4 + 9 * 6.25) / 16)
    d = 2.0 / sp
    # Hedges & Olkin (1985) approximation J ≈ 1 − 3/(4 df − 1) is within 1e-3 here.
    assert r.effect_size["cohen_d"] == pytest.approx(d)
    assert r.effect_size["hedges_g"] == pytest.approx(d * (1 - 3 / (4 * 16 - 1)), rel=1e-3)
    assert abs(r.effect_size["hedges_g"]) < abs(d)


def test_variance_ratio_f_test():
    rng = np.random.default_rng(2)
    a, b = rng.normal(0, 2, 15), rng.normal(0, 1, 21)
    r = fixed.from_summaries("welch", MomentSummary.from_values(a), MomentSummary.from_values(b))
    ratio = a.var(ddof=1) / b.var(ddof=1)
    f = stats.f(14, 20)
    assert r.variance_ratio == pytest.approx(ratio)
    assert r.variance_ratio_p == pytest.approx(2 * min(f.cdf(ratio), f.sf(ratio)))
    assert fixed.z_test(5, 1, 1, 5, 1, 1).variance_ratio is None


def test_rate_effect_sizes():
    r = fixed.two_proportions(100, 30, 200, 40)
    assert r.effect_size == {"risk_difference": pytest.approx(0.1), "risk_ratio": pytest.approx(1.5)}
    assert fixed.two_proportions(10, 3, 10, 0).effect_size["risk_ratio"] == math.inf


def test_paired_effect_size_is_on_differences():
    r = fixed.paired_t(12, 1.5, 2.0)
    assert r.effect_size["d_z"] == pytest.approx(0.75)
    assert r.effect_size["hedges_g_z"] < 0.75


@pytest.mark.parametrize("alt", ALTS)
def test_confidence_interval_at_other_levels(alt):
    r = fixed.welch_t(30, 10.0, 2.0, 25, 9.0, 3.0, alternative=alt, alpha=0.05)
    assert r.confidence_interval() == r.ci
    wide = r.confidence_interval(0.99)
    for w, n, side in zip(wide, r.ci, (-1, 1)):
        assert (w is None) == (n is None)
        if w is not None:
            assert side * (w - n) > 0
    q = r.confidence_interval(0.9)
    if alt == "two-sided":
        c = stats.t.ppf(0.95, r.df)
        assert q[0] == pytest.approx(r.estimate - c * r.standard_error)
    with pytest.raises(InvalidArgumentError, match="level"):
        r.confidence_interval(1.5)


def test_ci_and_test_agree_at_null():
    # δ0 lies outside the 1 − α interval exactly when the test rejects.
    rng = np.random.default_rng(9)
    for a, b, delta0, alt, alpha in random_cases(31, 40):
        r = fixed.from_summaries("welch", MomentSummary.from_values(a), MomentSummary.from_values(b),
                                 null_difference=delta0, alternative=alt, alpha=alpha)
        low = -math.inf if r.ci[0] is None else r.ci[0]
        high = math.inf if r.ci[1] is None else r.ci[1]
        assert r.reject == (not (low < delta0 < high))


def test_to_dict_is_plain():
    d = fixed.two_proportions(50, 20, 60, 18).to_dict()
    assert isinstance(d["critical_values"], list) and isinstance(d["ci"], list)
    assert "_interval" not in d
    assert set(d) >= {"method", "alternative", "alpha", "estimate", "statistic", "df", "p_value",
                      "critical_values", "ci", "reject", "standard_error", "effect_size", "notes"}


# ---------------------------------------------------------------------------
# degenerate data and validation


def test_zero_variance_both_groups_is_degenerate():
    r = fixed.welch_t(5, 3.0, 0.0, 6, 2.0, 0.0)
    assert r.statistic == math.inf and r.p_value == 0.0 and not r.reject
    assert fixed.DEGENERATE_NOTE in r.notes and r.degenerate
    r = fixed.pooled_t(5, 2.0, 0.0, 6, 3.0, 0.0, alternative="greater")
    assert r.statistic == -math.inf and r.p_value == 1.0 and not r.reject
    r = fixed.pooled_t(5, 2.0, 0.0, 6, 2.0, 0.0)
    assert math.isnan(r.statistic) and math.isnan(r.p_value) and r.degenerate
    r = fixed.paired_t(4, 0.5, 0.0)
    assert r.statistic == math.inf and r.degenerate
    r = fixed.two_proportions(10, 10, 12, 12)
    assert math.isnan(r.statistic) and r.degenerate
    r = fixed.from_summaries("welch", MomentSummary.from_values([1.0] * 4),
                             MomentSummary.from_values([2.0] * 3))
    assert r.statistic == -math.inf and r.degenerate


def test_zero_variance_one_group_is_fine():
    r = fixed.welch_t(5, 3.0, 0.0, 6, 2.0, 1.0)
    assert not r.degenerate and r.df == pytest.approx(5.0)


@pytest.mark.parametrize("call,argument", [
    (lambda: fixed.welch_t(1, 1, 1, 5, 1, 1), "n1"),
    (lambda: fixed.pooled_t(5, 1, 1, 1, 1, 1), "n2"),
    (lambda: fixed.welch_t(5, 1, -1, 5, 1, 1), "sd1"),
    (lambda: fixed.z_test(5, 1, 1, 5, 1, -2), "sigma2"),
    (lambda: fixed.paired_t(1, 1, 1), "n"),
    (lambda: fixed.paired_t(5, 1, -0.1), "sd_difference"),
    (lambda: fixed.two_proportions(10, 11, 10, 2), "successes1"),
    (lambda: fixed.two_proportions(10, 1, 10, -1), "successes2"),
    (lambda: fixed.welch_t(5, 1, 1, 5, 1, 1, alpha=0), "alpha"),
    (lambda: fixed.welch_t(5, 1, 1, 5, 1, 1, alpha=1.2), "alpha"),
    (lambda: fixed.welch_t(5, 1, 1, 5, 1, 1, alternative="bigger"), "alternative"),
    (lambda: fixed.welch_t(5, 1, 1, 5, float("nan"), 1), "mean2"),
    (lambda: fixed.two_proportions(10, 1, 10, 1, interval="exact"), "interval"),
    (lambda: fixed.two_proportions(10, 1, 10, 1, null_difference=1.5), "null_difference"),
    (lambda: fixed.from_summaries("anova", MomentSummary(), MomentSummary()), "method"),
    (lambda: fixed.from_summaries("welch", MomentSummary.from_values([1.0]),
                                  MomentSummary.from_values([1.0, 2.0])), "s1.n"),
    (lambda: fixed.from_summaries("z", MomentSummary.from_values([1.0]),
                                  MomentSummary.from_values([1.0])), "sigmas"),
    (lambda: fixed.from_summaries("paired", MomentSummary.from_values([1.0, 2.0]),
                                  MomentSummary.from_values([1.0, 2.0])), "s2"),
    (lambda: fixed.from_summaries("proportions", MomentSummary.from_values([0.5, 1.0]),
                                  MomentSummary.from_values([1.0, 0.0])), "s1"),
])
def test_bad_arguments_raise_naming_argument(call, argument):
    with pytest.raises(InvalidArgumentError, match=argument.replace(".", r"\.")):
        call()


def test_bad_values_are_echoed():
    with pytest.raises(InvalidArgumentError, match="bigger"):
        fixed.welch_t(5, 1, 1, 5, 1, 1, alternative="bigger")
    with pytest.raises(InvalidArgumentError, match="-3"):
        fixed.welch_t(5, 1, -3, 5, 1, 1)


def test_from_summaries_proportions_and_z():
    a = MomentSummary.from_values([1, 0, 1, 1, 0, 1, 1, 1])
    b = MomentSummary.from_values([0, 0, 1, 0, 1, 0, 0])
    r = fixed.from_summaries("proportions", a, b, interval="wald")
    assert r.statistic == pytest.approx(fixed.two_proportions(8, 6, 7, 2).statistic)
    z = fixed.from_summaries("z", a, b, sigmas=(0.5, 0.5))
    assert z.standard_error == pytest.approx(math.sqrt(0.25 / 8 + 0.25 / 7))


# ---------------------------------------------------------------------------
# invariants

group = st.tuples(st.integers(2, 500), st.floats(-1e3, 1e3), st.floats(0.01, 100))


@settings(max_examples=150, deadline=None)
@given(g1=group, g2=group, method=st.sampled_from(["pooled", "welch", "z"]),
       alt=st.sampled_from(ALTS), delta0=st.floats(-50, 50))
def test_properties_of_mean_tests(g1, g2, method, alt, delta0):
    test = {"pooled": fixed.pooled_t, "welch": fixed.welch_t, "z": fixed.z_test}[method]
    r = test(*g1, *g2, null_difference=delta0, alternative=alt)
    assert 0.0 <= r.p_value <= 1.0
    # Swapping the groups (and the sign of δ0) flips statistic and estimate.
    flip = {"two-sided": "two-sided", "greater": "less", "less": "greater"}[alt]
    s = test(*g2, *g1, null_difference=-delta0, alternative=flip)
    assert s.statistic == pytest.approx(-r.statistic, rel=1e-9, abs=1e-9)
    assert s.estimate == pytest.approx(-r.estimate, rel=1e-12, abs=1e-9)
    assert s.p_value == pytest.approx(r.p_value, rel=1e-9, abs=1e-12)


@settings(max_examples=150, deadline=None)
@given(g1=group, g2=group, method=st.sampled_from(["pooled", "welch", "z"]))
def test_one_sided_is_half_two_sided_in_direction_of_estimate(g1, g2, method):
    test = {"pooled": fixed.pooled_t, "welch": fixed.welch_t, "z": fixed.z_test}[method]
    two = test(*g1, *g2)
    side = "greater" if two.estimate > 0 else "less"
    one = test(*g1, *g2, alternative=side)
    if two.p_value < 1.0:
        assert one.p_value == pytest.approx(two.p_value / 2, rel=1e-9, abs=1e-300)
    other = test(*g1, *g2, alternative="less" if side == "greater" else "greater")
    assert one.p_value + other.p_value == pytest.approx(1.0)


@settings(max_examples=150, deadline=None)
@given(n1=st.integers(1, 300), n2=st.integers(1, 300), f1=st.floats(0, 1), f2=st.floats(0, 1),
       alt=st.sampled_from(ALTS), interval=st.sampled_from(["newcombe", "wald"]))
def test_properties_of_two_proportions(n1, n2, f1, f2, alt, interval):
    x1, x2 = round(f1 * n1), round(f2 * n2)
    r = fixed.two_proportions(n1, x1, n2, x2, alternative=alt, interval=interval)
    assert math.isnan(r.p_value) or 0.0 <= r.p_value <= 1.0
    flip = {"two-sided": "two-sided", "greater": "less", "less": "greater"}[alt]
    s = fixed.two_proportions(n2, x2, n1, x1, alternative=flip, interval=interval)
    assert s.estimate == pytest.approx(-r.estimate, abs=1e-15)
    if not r.degenerate:
        assert s.statistic == pytest.approx(-r.statistic)
    if alt == "two-sided":
        assert s.ci[0] == pytest.approx(-r.ci[1]) and s.ci[1] == pytest.approx(-r.ci[0])
        if interval == "newcombe":
            assert -1.0 <= r.ci[0] <= r.estimate <= r.ci[1] <= 1.0
