"""Ratio-of-sums comparisons checked against statsmodels and an explicit delta-method computation."""

import math

import numpy as np
import pytest
import statsmodels.api as sm

from monitor.errors import InvalidArgumentError
from monitor.stats.ratio import RatioCells, ratio_difference, ratio_planning_sd


def _rows(rng, n, rate, mean_units=800.0, spread=0.6):
    units = rng.gamma(1 / spread ** 2, mean_units * spread ** 2, size=n).round() + 1
    defects = rng.poisson(rate * units).astype(float)
    return defects, units


def _cells(groups, keys, y, x, shift_num=0.0, shift_den=0.0):
    """Per-(group, key) cells of shifted sums, as the source would aggregate them."""
    out = {f: [] for f in ("group", "key", "n", "num", "den", "num2", "den2", "cross")}
    for g in (0, 1):
        for k in dict.fromkeys(keys[groups == g]):
            sel = (groups == g) & (keys == k)
            yy, xx = y[sel] - shift_num, x[sel] - shift_den
            for name, value in (("group", g), ("key", k), ("n", int(sel.sum())), ("num", yy.sum()),
                                ("den", xx.sum()), ("num2", (yy ** 2).sum()), ("den2", (xx ** 2).sum()),
                                ("cross", (yy * xx).sum())):
                out[name].append(value)
    return RatioCells(**{k: tuple(v) for k, v in out.items()}, shift_num=shift_num, shift_den=shift_den)


def _explicit_delta(y, x):
    """Cochran (1977) §6.3 ratio-estimator variance, written out from the raw rows."""
    r = y.sum() / x.sum()
    e = y - r * x
    n = y.size
    return r, (e ** 2).sum() / (n - 1) / (n * x.mean() ** 2)


@pytest.mark.parametrize("n1,n2,seed", [(40, 40, 1), (12, 90, 2), (3, 5, 3), (200, 35, 4)],
                         ids=["equal", "unequal", "tiny", "large-small"])
def test_independent_rows_match_explicit_delta_method_and_weighted_least_squares(n1, n2, seed):
    rng = np.random.default_rng(seed)
    y1, x1 = _rows(rng, n1, 0.004)
    y2, x2 = _rows(rng, n2, 0.003)
    y, x = np.concatenate([y1, y2]), np.concatenate([x1, x2])
    groups = np.r_[np.zeros(n1, int), np.ones(n2, int)]
    cells = _cells(groups, np.zeros(n1 + n2, int), y, x, shift_num=2.0, shift_den=750.0)
    res = ratio_difference(cells)
    r1, v1 = _explicit_delta(y1, x1)
    r2, v2 = _explicit_delta(y2, x2)
    assert res.estimate == pytest.approx(r1 - r2, rel=1e-12)
    assert res.standard_error == pytest.approx(math.sqrt(v1 + v2), rel=1e-9)
    # statsmodels: WLS of y/x on a constant with weights x is the ratio of sums; its HC0
    # variance times n/(n−1) is the delta-method variance above.
    for yy, xx, v in ((y1, x1, v1), (y2, x2, v2)):
        fit = sm.WLS(yy / xx, np.ones_like(xx), weights=xx).fit(cov_type="HC0")
        n = yy.size
        assert fit.params[0] == pytest.approx(yy.sum() / xx.sum(), rel=1e-12)
        assert fit.bse[0] ** 2 * n / (n - 1) == pytest.approx(v, rel=1e-6)
    df = (v1 + v2) ** 2 / (v1 ** 2 / (n1 - 1) + v2 ** 2 / (n2 - 1))
    assert res.df == pytest.approx(df, rel=1e-9)


@pytest.mark.parametrize("shared", [True, False], ids=["shared-days", "own-crews"])
@pytest.mark.parametrize("clusters1,clusters2", [(12, 12), (3, 7), (2, 2)])
def test_clustered_matches_statsmodels_cluster_robust_wls(shared, clusters1, clusters2):
    rng = np.random.default_rng(clusters1 * 10 + clusters2 + shared)
    parts = []
    for g, count, rate in ((0, clusters1, 0.004), (1, clusters2, 0.0035)):
        for c in range(count):
            shock = rng.normal(0, 0.3)
            y, x = _rows(rng, int(rng.integers(3, 15)), rate * math.exp(shock))
            key = c if shared else 1000 * g + c
            parts.append((np.full(y.size, g), np.full(y.size, key), y, x))
    groups, keys, y, x = (np.concatenate([p[i] for p in parts]) for i in range(4))
    res = ratio_difference(_cells(groups, keys, y, x, 3.0, 700.0), clustered=True)
    design = np.column_stack([groups == 0, groups == 1]).astype(float)
    contrast = np.array([1.0, -1.0])
    assert res.clusters == len(set(keys.tolist()))
    if shared:
        # Calendar clusters both groups share: CR1, as statsmodels' clustered WLS.
        fit = sm.WLS(y / x, design, weights=x).fit(cov_type="cluster", cov_kwds={"groups": keys})
        assert res.estimate == pytest.approx(contrast @ fit.params, rel=1e-9)
        se = math.sqrt(contrast @ fit.cov_params() @ contrast)
        assert res.standard_error == pytest.approx(se, rel=1e-6)
        assert res.df == res.clusters - 1
    else:
        # Crews of one group: CR2 with Bell–McCaffrey df, written out with matrices.
        se, df = _explicit_cr2(y / x, design, x, keys, contrast)
        assert res.standard_error == pytest.approx(se, rel=1e-6)
        assert res.df == pytest.approx(df, rel=1e-6)
        assert "CR2" in " ".join(res.notes)


def _explicit_cr2(v, design, w, keys, contrast):
    """CR2 standard error and Bell–McCaffrey df of ``contrast · b`` in WLS, by matrices.

    Bell & McCaffrey (2002); the df as written by Imbens & Kolesár (2016), eq. for
    ``(Σλ)²/Σλ²`` with ``G = [(I − H)_c' A_c X_c (X'X)^{-1} ℓ]`` under Ω = I. The weighted
    fit is the OLS of ``√w·v`` on ``√w·X``.
    """
    root = np.sqrt(w)
    xs, vs = design * root[:, None], v * root
    bread = np.linalg.inv(xs.T @ xs)
    b = bread @ xs.T @ vs
    e = vs - xs @ b
    hat = xs @ bread @ xs.T
    resid_maker = np.eye(len(v)) - hat
    meat = np.zeros((2, 2))
    columns = []
    for k in dict.fromkeys(keys.tolist()):
        sel = np.flatnonzero(keys == k)
        vals, vecs = np.linalg.eigh(np.eye(sel.size) - hat[np.ix_(sel, sel)])
        adjust = vecs @ np.diag(vals ** -0.5) @ vecs.T
        score = xs[sel].T @ adjust @ e[sel]
        meat += np.outer(score, score)
        columns.append(resid_maker[sel].T @ adjust @ xs[sel] @ bread @ contrast)
    variance = contrast @ bread @ meat @ bread @ contrast
    g = np.column_stack(columns)
    gg = g.T @ g
    return math.sqrt(variance), np.trace(gg) ** 2 / np.trace(gg @ gg)


def test_few_crews_of_one_group_hold_alpha_with_cr2():
    """Three crews a side, crew shocks, no difference: a single test at 0.05 (Monte Carlo).

    CR1 with t on clusters − 1 rejected 0.090 of these draws; CR2 with Bell–McCaffrey df
    0.0475 (bound: alpha + 3 MC SE at 4,000 draws, SE ≈ 0.0034).
    """
    rng = np.random.default_rng(20261203)
    draws, rejected = 4000, 0
    for _ in range(draws):
        parts = []
        for g in (0, 1):
            for c in range(3):
                y, x = _rows(rng, int(rng.integers(4, 12)), 0.004 * math.exp(rng.normal(0, 0.4)))
                parts.append((np.full(y.size, g), np.full(y.size, 100 * g + c), y, x))
        groups, keys, y, x = (np.concatenate([p[i] for p in parts]) for i in range(4))
        res = ratio_difference(_cells(groups, keys, y, x, 3.0, 700.0), clustered=True)
        rejected += bool(res.reject)
    rate = rejected / draws
    assert rate <= 0.05 + 3 * math.sqrt(0.05 * 0.95 / draws), rate


def test_relative_change_standard_error_by_delta_method():
    rng = np.random.default_rng(7)
    y1, x1 = _rows(rng, 60, 0.005)
    y2, x2 = _rows(rng, 50, 0.004)
    groups = np.r_[np.zeros(60, int), np.ones(50, int)]
    res = ratio_difference(_cells(groups, np.zeros(110, int), np.r_[y1, y2], np.r_[x1, x2]))
    r1, v1 = _explicit_delta(y1, x1)
    r2, v2 = _explicit_delta(y2, x2)
    assert res.relative_change == pytest.approx(r1 / r2 - 1, rel=1e-12)
    # d(R1/R2) = dR1/R2 − R1 dR2/R2² (independent groups).
    assert res.relative_standard_error == pytest.approx(math.sqrt(v1 / r2 ** 2 + v2 * r1 ** 2 / r2 ** 4), rel=1e-9)


def test_shifts_change_nothing_but_keep_digits():
    rng = np.random.default_rng(3)
    y, x = _rows(rng, 30, 0.004)
    y, x = y + 1e7, x + 1e9  # large offsets: unshifted sums of squares lose every digit
    groups = np.r_[np.zeros(15, int), np.ones(15, int)]
    keys = np.zeros(30, int)
    exact = ratio_difference(_cells(groups, keys, y, x, shift_num=1e7, shift_den=1e9))
    r1, v1 = _explicit_delta(y[:15], x[:15])
    r2, v2 = _explicit_delta(y[15:], x[15:])
    assert exact.standard_error == pytest.approx(math.sqrt(v1 + v2), rel=1e-6)


def test_degenerate_cases_are_reported_not_raised():
    one_row = RatioCells(group=(0, 1), key=(None, None), n=(1, 3), num=(2.0, 6.0), den=(100.0, 300.0),
                         num2=(4.0, 14.0), den2=(10000.0, 30200.0), cross=(200.0, 620.0))
    res = ratio_difference(one_row)
    assert res.degenerate and math.isnan(res.standard_error) and not res.reject
    zero_den = RatioCells(group=(0, 1), key=(None, None), n=(2, 2), num=(1.0, 1.0), den=(0.0, 5.0),
                          num2=(1.0, 1.0), den2=(0.0, 13.0), cross=(0.0, 3.0))
    assert ratio_difference(zero_den).degenerate


def test_caller_mistakes_raise_naming_the_argument():
    bad = RatioCells(group=(0, 2), key=(None, None), n=(1, 1), num=(1.0, 1.0), den=(1.0, 1.0),
                     num2=(1.0, 1.0), den2=(1.0, 1.0), cross=(1.0, 1.0))
    with pytest.raises(InvalidArgumentError, match="group must be 0"):
        ratio_difference(bad)
    with pytest.raises(InvalidArgumentError, match="residual_sd must be positive"):
        ratio_planning_sd(0.0, 100.0)


def test_planning_sd_reproduces_the_ratio_variance():
    # σ_e / μ_x per row: n rows give Var(R) = (σ_e/μ_x)² / n, the delta-method variance.
    rng = np.random.default_rng(11)
    y, x = _rows(rng, 20000, 0.004)
    r, v = _explicit_delta(y, x)
    sd = ratio_planning_sd(np.std(y - r * x, ddof=1), x.mean())
    assert sd ** 2 / y.size == pytest.approx(v, rel=1e-9)
