"""Difference in differences from cells, against statsmodels OLS with day-clustered errors."""

import doctest
import math

import numpy as np
import pytest
from scipy import stats

from monitor.errors import InvalidArgumentError
from monitor.stats import before_after as ba
from monitor.stats.planning import sequential_drift

sm = pytest.importorskip("statsmodels.api")


def random_rows(rng, *, rates=False, shared=True, straddle=False, gap=3.0, change=-2.0):
    """Rows of two sites over baseline and after days, with a persistent gap and day shocks.

    ``shared``: a calendar day is one key for both sites; otherwise each site's
    days are its own keys. ``straddle``: the start falls inside a day, whose
    key then holds baseline and after events.
    """
    base_days = int(rng.integers(2, 15))
    after_days = int(rng.integers(2, 15))
    loc = 0.0 if rates else float(rng.choice([0.0, 80.0, 1e6]))
    g_, p_, k_, v_ = [], [], [], []
    for d in range(base_days + after_days):
        period = int(d >= base_days)
        for g in (0, 1):
            if rng.random() < 0.1 and d not in (0, base_days):
                continue            # a day without events at this site
            m = int(rng.integers(1, 30))
            shock = rng.normal(0, 1.0)
            key = f"day{d}" if shared else f"site{g}-day{d}"
            periods = np.full(m, period)
            if straddle and d == base_days and m > 1:
                periods[: m // 2] = 0    # the change went live part way through this day
            level = (gap if g == 0 else 0.0) + (change if g == 0 else 0.0) * periods
            if rates:
                prob = 1.0 / (1.0 + np.exp(-(0.2 * level + 0.5 * shock)))
                values = (rng.random(m) < prob).astype(float)
            else:
                values = loc + level + shock + rng.normal(0, rng.uniform(0.5, 3.0), m)
            g_ += [g] * m
            p_ += list(periods)
            k_ += [key] * m
            v_ += list(values)
    return np.array(g_), np.array(p_), np.array(k_), np.array(v_, float), loc


def cells(g, p, k, v, shift=0.0, per_cell_shift=False, split=False):
    """Per-(group, period, key) cells as the source would aggregate them."""
    out = {"groups": [], "periods": [], "keys": [], "n": [], "sum_dev": [], "sum_dev2": [], "shift": []}
    for gi in (0, 1):
        for pi in (0, 1):
            for key in np.unique(k[(g == gi) & (p == pi)]):
                x = v[(g == gi) & (p == pi) & (k == key)]
                for piece in (np.array_split(x, 2) if split and x.size > 1 else [x]):
                    c = float(piece[0]) if per_cell_shift else shift
                    out["groups"].append(gi)
                    out["periods"].append(pi)
                    out["keys"].append(str(key))
                    out["n"].append(piece.size)
                    out["sum_dev"].append(float(np.sum(piece - c)))
                    out["sum_dev2"].append(float(np.sum((piece - c) ** 2)))
                    out["shift"].append(c)
    if not per_cell_shift:
        out["shift"] = shift
    return out


def call(c, **kw):
    return ba.difference_in_differences(c["groups"], c["periods"], c["keys"], c["n"], c["sum_dev"],
                                        c["shift"], sum_dev2=c["sum_dev2"], **kw)


def statsmodels_fit(g, p, k, v):
    g1 = (g == 0).astype(float)
    x = np.column_stack([np.ones_like(v), g1, p.astype(float), g1 * p])
    codes = np.unique(k, return_inverse=True)[1]
    return sm.OLS(v, x).fit(cov_type="cluster", cov_kwds={"groups": codes}, use_t=True)


def two_group_fit(g, k, v):
    x = sm.add_constant((g == 0).astype(float))
    codes = np.unique(k, return_inverse=True)[1]
    return sm.OLS(v, x).fit(cov_type="cluster", cov_kwds={"groups": codes}, use_t=True)


@pytest.mark.parametrize("rates", [False, True], ids=["means", "rates"])
@pytest.mark.parametrize("shared", [True, False], ids=["shared-days", "site-days"])
def test_matches_statsmodels_interaction(rates, shared):
    rng = np.random.default_rng(300 + 2 * rates + shared)
    checked = 0
    for i in range(40):
        g, p, k, v, loc = random_rows(rng, rates=rates, shared=shared, straddle=(i % 3 == 2))
        c = cells(g, p, k, v, shift=loc, per_cell_shift=(i % 4 == 1), split=(i % 5 == 3))
        alt = ["two-sided", "greater", "less"][i % 3]
        delta0 = 0.0 if i % 2 else float(rng.normal(0, 0.5))
        r = call(c, alternative=alt, null_difference=delta0, relative=True, variance="cr1")
        fit = statsmodels_fit(g, p, k, v)
        assert call(c).cr1_standard_error == pytest.approx(fit.bse[3], rel=1e-6)
        assert r.estimate == pytest.approx(fit.params[3], rel=1e-6, abs=1e-9)
        assert r.standard_error == pytest.approx(fit.bse[3], rel=1e-6)
        assert r.clusters == len(np.unique(k))
        assert r.df == fit.df_resid_inference == r.clusters - 1
        expected_t = (fit.params[3] - delta0) / fit.bse[3]
        assert r.statistic == pytest.approx(expected_t, rel=1e-6, abs=1e-9)
        want_p = {"two-sided": 2 * stats.t.sf(abs(expected_t), r.df), "greater": stats.t.sf(expected_t, r.df),
                  "less": stats.t.cdf(expected_t, r.df)}[alt]
        assert r.p_value == pytest.approx(want_p, rel=1e-6, abs=1e-12)
        if alt == "two-sided":
            low, high = fit.conf_int(0.05)[3]
            assert r.ci[0] == pytest.approx(low, rel=1e-6, abs=1e-9)
            assert r.ci[1] == pytest.approx(high, rel=1e-6, abs=1e-9)
            if delta0 == 0.0:
                assert r.p_value == pytest.approx(float(fit.pvalues[3]), rel=1e-6)
        # The baseline gap is the group coefficient of the same fit ...
        assert r.baseline_gap.estimate == pytest.approx(fit.params[1], rel=1e-6, abs=1e-9)
        # ... and its interval that of the baseline rows alone.
        base = p == 0
        bfit = two_group_fit(g[base], k[base], v[base])
        assert r.baseline_gap.standard_error == pytest.approx(bfit.bse[1], rel=1e-6)
        afit = two_group_fit(g[~base], k[~base], v[~base])
        assert r.after_gap.estimate == pytest.approx(afit.params[1], rel=1e-6, abs=1e-9)
        assert r.after_gap.standard_error == pytest.approx(afit.bse[1], rel=1e-6)
        # Relative effect: b3 / (b0 + b1 + b2), delta method on the fit's covariance.
        b = fit.params
        counterfactual = b[0] + b[1] + b[2]
        if abs(counterfactual) > 1e-6:
            grad = np.array([-b[3], -b[3], -b[3], counterfactual]) / counterfactual ** 2
            se = math.sqrt(grad @ fit.cov_params() @ grad)
            assert r.relative["percent"] == pytest.approx(100 * b[3] / counterfactual, rel=1e-6, abs=1e-9)
            assert r.relative["standard_error"] == pytest.approx(100 * se, rel=1e-6)
            assert r.relative["name"] == "relative effect, delta method"
        checked += 1
    assert checked == 40


def cr2_by_matrices(g, p, k, v, contrast):
    """CR2 variance and Bell–McCaffrey df of ``contrast · β`` from event rows, by the textbook matrices.

    Bell & McCaffrey (2002): V = (X'X)⁻¹ Σ_c X_c' A_c e_c e_c' A_c X_c (X'X)⁻¹ with
    A_c = (I − H_cc)^(-1/2); Imbens & Kolesár (2016): df = (tr G'G)² / tr((G'G)²) with
    g_c = (I − H)[:, c] A_c X_c (X'X)⁻¹ ℓ (working model: independent events, equal variance).
    Formulas from memory; computed here with dense matrices, independently of the cell algebra.
    """
    g1 = (g == 0).astype(float)
    x = np.column_stack([np.ones_like(v), g1, p.astype(float), g1 * p])
    bread = np.linalg.inv(x.T @ x)
    hat = x @ bread @ x.T
    e = v - hat @ v
    meat = np.zeros((4, 4))
    columns = []
    identity_minus_hat = np.eye(len(v)) - hat
    for key in np.unique(k):
        idx = np.flatnonzero(k == key)
        w, q = np.linalg.eigh(np.eye(idx.size) - hat[np.ix_(idx, idx)])
        a = q @ np.diag(1 / np.sqrt(w)) @ q.T
        score = x[idx].T @ a @ e[idx]
        meat += np.outer(score, score)
        columns.append(identity_minus_hat[:, idx] @ a @ x[idx] @ bread @ contrast)
    cov = bread @ meat @ bread
    gmat = np.column_stack(columns)
    m = gmat.T @ gmat
    return float(contrast @ cov @ contrast), float(np.trace(m) ** 2 / np.sum(m * m))


@pytest.mark.parametrize("rates", [False, True], ids=["means", "rates"])
@pytest.mark.parametrize("shared", [True, False], ids=["shared-days", "site-days"])
def test_cr2_and_bell_mccaffrey_match_the_matrix_formulas(rates, shared):
    rng = np.random.default_rng(700 + 2 * rates + shared)
    checked = 0
    for i in range(12):
        g, p, k, v, loc = random_rows(rng, rates=rates, shared=shared, straddle=(i % 3 == 2))
        c = cells(g, p, k, v, shift=loc, per_cell_shift=(i % 4 == 1), split=(i % 5 == 3))
        r = call(c, relative=True)
        if min(len(np.unique(k[(g == gi) & (p == pi)])) for gi in (0, 1) for pi in (0, 1)) < 2:
            assert math.isnan(r.standard_error) and ba.ONE_CLUSTER_CELL_NOTE in r.notes
            continue
        checked += 1
        want_var, want_df = cr2_by_matrices(g, p, k, v - loc, np.array([0.0, 0.0, 0.0, 1.0]))
        assert r.variance == "cr2"
        assert r.standard_error == pytest.approx(math.sqrt(want_var), rel=1e-6)
        assert r.df == pytest.approx(want_df, rel=1e-6)
        want_p = 2 * stats.t.sf(abs(r.estimate / math.sqrt(want_var)), want_df)
        assert r.p_value == pytest.approx(want_p, rel=1e-6, abs=1e-12)
        # The relative effect's contrast is its gradient at the estimates.
        fit = statsmodels_fit(g, p, k, v)
        b = fit.params
        cf = b[0] + b[1] + b[2]
        grad = np.array([-b[3], -b[3], -b[3], cf]) / cf ** 2
        rel_var, rel_df = cr2_by_matrices(g, p, k, v - loc, grad)
        assert r.relative["standard_error"] == pytest.approx(100 * math.sqrt(rel_var), rel=1e-6)
        assert r.relative["df"] == pytest.approx(rel_df, rel=1e-6)
    assert checked >= 8


def test_cr2_needs_two_clusters_in_every_cell():
    # Group 2's after events all on one day: CR2 cannot adjust that cell.
    r = ba.difference_in_differences([0, 1, 0, 1, 0, 0, 1], [0, 0, 0, 0, 1, 1, 1],
                                     ["a", "a", "b", "b", "c", "d", "d"], [3] * 7,
                                     [3.0, 1.0, 2.0, 0.0, 1.0, 0.5, 0.2], 0.0)
    assert math.isnan(r.standard_error) and r.degenerate and not r.reject
    assert ba.ONE_CLUSTER_CELL_NOTE in r.notes
    assert math.isfinite(r.cr1_standard_error)


def test_same_figure_whatever_the_cell_order_and_splitting():
    rng = np.random.default_rng(5)
    g, p, k, v, _ = random_rows(rng)
    a = call(cells(g, p, k, v))
    c = cells(g, p, k, v, split=True)
    order = rng.permutation(len(c["n"]))
    shuffled = {key: [val[i] for i in order] for key, val in c.items() if key != "shift"}
    b = call({**shuffled, "shift": 0.0})
    assert b.estimate == pytest.approx(a.estimate, rel=1e-12)
    assert b.standard_error == pytest.approx(a.standard_error, rel=1e-12)


def test_large_shift_keeps_precision():
    rng = np.random.default_rng(9)
    g, p, k, v, _ = random_rows(rng)
    r = call(cells(g, p, k, v + 1.7e9, shift=1.7e9))
    assert r.cr1_standard_error == pytest.approx(statsmodels_fit(g, p, k, v).bse[3], rel=1e-6)
    assert r.standard_error == pytest.approx(call(cells(g, p, k, v)).standard_error, rel=1e-6)


def test_a_persistent_gap_is_not_the_change():
    # Group 1 runs 10 above group 2 every day, before and after; nothing changes.
    days, rows = 20, []
    rng = np.random.default_rng(1)
    g, p, k, v = [], [], [], []
    for d in range(days):
        for gi in (0, 1):
            x = 100 + (10.0 if gi == 0 else 0.0) + rng.normal(0, 1.0) + rng.normal(0, 5, 50)
            g += [gi] * 50
            p += [int(d >= 10)] * 50
            k += [f"d{d}"] * 50
            v += list(x)
    g, p, k, v = map(np.array, (g, p, k, v))
    r = call(cells(g, p, k, v))
    assert r.after_gap.estimate == pytest.approx(10, abs=1.5)
    assert r.after_gap.p_value < 1e-6       # the after-only comparison alarms on the old gap
    assert abs(r.estimate) < 1.5
    assert r.p_value > 0.01


def test_swapping_groups_flips_the_sign():
    rng = np.random.default_rng(11)
    g, p, k, v, _ = random_rows(rng)
    a = call(cells(g, p, k, v))
    b = call(cells(1 - g, p, k, v))
    assert b.estimate == pytest.approx(-a.estimate, rel=1e-9, abs=1e-12)
    assert b.standard_error == pytest.approx(a.standard_error, rel=1e-9)


def test_few_clusters_and_degenerate_cases():
    # One day only, split by the start: one cluster, no standard error.
    r = ba.difference_in_differences([0, 1, 0, 1], [0, 0, 1, 1], ["d"] * 4, [3, 3, 3, 3],
                                     [3.0, 0.0, 1.0, 1.0], 0.0)
    assert r.clusters == 1 and math.isnan(r.standard_error) and not r.reject and r.degenerate
    assert r.estimate == pytest.approx(-1.0)
    # Every value equal within its cell on every day: zero residuals.
    r = ba.difference_in_differences([0, 1, 0, 1, 0, 1, 0, 1], [0, 0, 0, 0, 1, 1, 1, 1],
                                     ["a", "a", "b", "b", "c", "c", "d", "d"], [2] * 8,
                                     [2.0, 0, 2.0, 0, 0, 0, 0, 0], 0.0)
    assert r.standard_error == 0.0 and r.degenerate and not r.reject
    assert math.isinf(r.statistic) and r.statistic < 0


@pytest.mark.parametrize("bad, message", [
    (dict(groups=[0, 2, 0, 1]), "groups must be 0"),
    (dict(periods=[0, 0, 1, 3]), "periods must be 0"),
    (dict(n=[1, -1, 1, 1]), "n must be whole"),
    (dict(n=[1, 1.5, 1, 1]), "n must be whole"),
    (dict(n=[1, 1, 0, 1]), "group1 after has no events"),
    (dict(sum_dev=[1.0, math.nan, 0, 0]), "sum_dev must be finite"),
    (dict(keys=["a", "b"]), "keys must have one entry per cell"),
    (dict(variance="cr3"), "variance must be one of cr2, cr1"),
])
def test_bad_input_names_the_argument(bad, message):
    args = dict(groups=[0, 1, 0, 1], periods=[0, 0, 1, 1], keys=["a", "a", "b", "b"], n=[1, 1, 1, 1],
                sum_dev=[1.0, 0.0, 0.0, 0.0])
    args.update(bad)
    with pytest.raises(InvalidArgumentError, match=message):
        ba.difference_in_differences(args["groups"], args["periods"], args["keys"], args["n"],
                                     args["sum_dev"], 0.0, variance=args.get("variance", "cr2"))


# ----------------------------------------------------------------------------- planning


def test_information_and_fraction():
    assert ba.information(10, 10, 2.0) == pytest.approx(2.5)
    assert ba.information_fraction(20, 20, 28) == pytest.approx(1.0)
    assert ba.information_fraction(0, 20, 28) == 0.0
    f = ba.information_fraction(np.arange(1, 21), 20, 28)
    assert np.all(np.diff(f) > 0)
    # A very long baseline: the event fraction of a comparison without one.
    assert ba.information_fraction(5, 20, 1e15) == pytest.approx(0.25)


def test_plan_single_analysis_by_hand():
    # Var(DiD) = v (1/A + 1/B); a single two-sided analysis at 0.05 with power 0.8
    # needs Var = (δ / (z_.975 + z_.8))².
    delta, sd, day_sd, m, b = -6.0, 40.0, 4.0, 300, 21
    plan = ba.plan_before_after(delta, sd, day_sd=day_sd, events_per_day=m, baseline_days=b, looks=1,
                                t_reference=False)
    v = 2 * (day_sd ** 2 + sd ** 2 / m)
    target = (delta / (stats.norm.isf(0.025) + stats.norm.isf(0.2))) ** 2
    a = 1 / (target / v - 1 / b)
    assert plan.after_days_exact == pytest.approx(a, rel=1e-9)
    assert plan.fixed_after_days == pytest.approx(a, rel=1e-9)
    assert plan.inflation == pytest.approx(1.0)
    assert plan.planned_per_group == math.ceil(a * m)
    # With the t reference: the information widened at the planned days' degrees of freedom.
    plan_t = ba.plan_before_after(delta, sd, day_sd=day_sd, events_per_day=m, baseline_days=b, looks=1)
    a_t = plan_t.after_days_exact
    nu = (1 / a_t + 1 / b) ** 2 / (1 / (a_t ** 2 * (a_t - 1)) + 1 / (b ** 2 * (b - 1)))
    widen = ((stats.t.isf(0.025, nu) + stats.t.isf(0.2, nu)) / (stats.norm.isf(0.025) + stats.norm.isf(0.2))) ** 2
    assert plan_t.planned_df == pytest.approx(nu, rel=1e-6)
    assert plan_t.t_inflation == pytest.approx(widen, rel=1e-6)
    assert a_t == pytest.approx(1 / (target / widen / v - 1 / b), rel=1e-6)
    assert a_t > a


def test_planned_df_is_bell_mccaffrey_with_equal_days():
    for b, a in [(28, 10), (14, 14), (100, 5)]:
        events = np.zeros((b + a, 4))
        events[:b, :2] = 50
        events[b:, 2:] = 50
        want = ba._bell_mccaffrey(events, events.sum(axis=0), np.array([-1.0, 1.0, 1.0, -1.0]))
        assert ba.planned_degrees_of_freedom(a, b) == pytest.approx(want, rel=1e-9)


def test_plan_inflation_matches_the_sequential_drift():
    plan = ba.plan_before_after(5.0, 30.0, day_sd=3.0, events_per_day=200, baseline_days=28, looks=4,
                                spending="pocock")
    drift = sequential_drift([0.25, 0.5, 0.75, 1.0], 0.05, "pocock", "two-sided", 0.8)
    assert plan.max_information == pytest.approx((drift / 5.0) ** 2 * plan.t_inflation, rel=1e-9)
    assert plan.inflation == pytest.approx((drift / plan.fixed_drift) ** 2 * plan.t_inflation, rel=1e-9)
    assert plan.inflation > 1
    assert ba.information(plan.after_days_exact, 28, plan.day_variance) == pytest.approx(
        plan.max_information, rel=1e-9)


def test_daily_plan_is_self_consistent():
    plan = ba.plan_before_after(-6.0, 50.0, day_sd=4.0, events_per_day=400, baseline_days=28,
                                first_look_day=5)
    assert plan.looks is None and plan.fractions[-1] >= 1.0 > plan.fractions[-2]
    assert len(plan.fractions) == plan.after_days - 5 + 1
    days = np.arange(5, plan.after_days + 1)
    want = ba.information_fraction(days, plan.after_days_exact, 28)
    assert np.allclose(plan.fractions, want)
    drift = sequential_drift(list(plan.fractions), 0.05, "obrien-fleming", "two-sided", 0.8)
    assert plan.drift == pytest.approx(drift, rel=1e-5)
    assert plan.expected_days_null > plan.expected_days_alternative
    assert plan.expected_days_null <= plan.after_days + 1e-9


def test_plan_with_rates_uses_the_binomial_spread():
    plan = ba.plan_before_after(0.05, rate=0.7, events_per_day=150, baseline_days=14, looks=1)
    assert plan.sd == pytest.approx(math.sqrt(0.21)) and plan.metric == "proportion"


def test_plan_refuses_a_baseline_too_short():
    with pytest.raises(InvalidArgumentError, match="baseline_days 2 is too short"):
        ba.plan_before_after(1.0, 10.0, day_sd=5.0, events_per_day=100, baseline_days=2)


@pytest.mark.parametrize("kwargs, message", [
    (dict(difference=0.0, sd=1.0), "difference must not be zero"),
    (dict(difference=1.0, sd=1.0, alternative="less"), "must be negative"),
    (dict(difference=1.0), "give sd"),
    (dict(difference=1.0, sd=1.0, rate=0.5), "give sd"),
    (dict(difference=1.0, sd=1.0, day_sd=-1.0), "day_sd must not be negative"),
    (dict(difference=1.0, sd=1.0, events_per_day=0), "events_per_day must be positive"),
])
def test_plan_bad_input(kwargs, message):
    args = dict(events_per_day=100, baseline_days=28)
    args.update(kwargs)
    difference = args.pop("difference")
    with pytest.raises(InvalidArgumentError, match=message):
        ba.plan_before_after(difference, **args)


def test_docstring_examples_run():
    result = doctest.testmod(ba)
    assert result.attempted >= 10 and result.failed == 0


# ----------------------------------------------------------------------------- simulation


def library_on_stream(data, i, days):
    """The library's DiD on one simulated stream's first ``days`` days after the start."""
    groups, periods, keys, n, dev, dev2 = library_cells(data, i, days, with_squares=True)
    return ba.difference_in_differences(groups, periods, keys, n, dev, 0.0, sum_dev2=dev2)


def library_cells(data, i, days, with_squares=False):
    b = data.baseline_days
    cols = range(b + days)
    groups, periods, keys, n, dev, dev2 = [], [], [], [], [], []
    for g in (0, 1):
        for d in cols:
            count, total = data.n[i, g, d], data.sums[i, g, d]
            groups.append(g)
            periods.append(int(d >= b))
            keys.append(d)
            n.append(count)
            dev.append(total)
            dev2.append(data.within_ss[i, g, d] + total * total / count)
    if with_squares:
        return groups, periods, keys, n, dev, dev2
    return groups, periods, keys, n, dev


@pytest.mark.parametrize("rates", [False, True], ids=["means", "rates"])
def test_vectorised_monitor_matches_the_library(rates):
    from monitor.stats.site_pairs import draw_site_pairs, monitor_site_pairs

    rng = np.random.default_rng(21 + rates)
    kw = dict(rate=0.6) if rates else dict(sd=30.0, level=90.0)
    data = draw_site_pairs(5, baseline_days=9, after_days=7, events_per_day=40, gap=0.1 if rates else 6.0,
                           change=0.0, day_sd=0.03 if rates else 2.0, rng=rng, **kw)
    out = monitor_site_pairs(data, planned_after_days=7, first_look_day=7)
    for i in range(5):
        lib = library_on_stream(data, i, 7)
        assert out.did_estimate[i] == pytest.approx(lib.estimate, rel=1e-9, abs=1e-12)
        assert out.did_final_estimate[i] == pytest.approx(lib.estimate, rel=1e-9, abs=1e-12)
        assert out.did_standard_error[i] == pytest.approx(lib.standard_error, rel=1e-9)
        assert out.did_df[i] == pytest.approx(lib.df, rel=1e-9)
        cr1 = ba.difference_in_differences(*library_cells(data, i, 7), 0.0, variance="cr1")
        assert out.did_cr1_fixed[i] == (cr1.p_value <= 0.05)
        assert out.baseline_gap[i] == pytest.approx(lib.baseline_gap.estimate, rel=1e-9, abs=1e-12)
        assert out.after_only_estimate[i] == pytest.approx(lib.after_gap.estimate, rel=1e-9, abs=1e-12)
        t_after = lib.after_gap.estimate / lib.after_gap.standard_error
        assert out.after_only_fixed[i] == (abs(t_after) >= stats.t.isf(0.025, 6))
        assert out.did_fixed[i] == (lib.p_value <= 0.05)


def test_simulated_gap_and_change_come_out_on_average():
    from monitor.stats.site_pairs import draw_site_pairs, monitor_site_pairs

    data = draw_site_pairs(400, baseline_days=14, after_days=10, events_per_day=60, gap=8.0, change=-3.0,
                           sd=20.0, day_sd=1.5, shared_day_sd=4.0, rng=np.random.default_rng(4))
    out = monitor_site_pairs(data, planned_after_days=10, first_look_day=10)
    assert np.mean(out.baseline_gap) == pytest.approx(8.0, abs=0.3)
    assert np.mean(out.did_final_estimate) == pytest.approx(-3.0, abs=0.3)


# ----------------------------------------------------------------------------- after a stop


# The look reports adjusted inference for a before/after stop as for every t-based look
# (stats.inference.adjusted_inference with the looks' Bell–McCaffrey df); these pin the
# properties the DiD relies on.


def test_adjusted_inference_at_a_single_look_is_the_t_interval():
    from monitor.stats.inference import adjusted_inference

    r = adjusted_inference([1.0], [1.959964], 1, -4.0, 1.5, dfs=[20.0])
    c = stats.t.isf(0.025, 20)  # scipy reference
    assert r.estimate == pytest.approx(-4.0, rel=1e-6)
    assert r.ci[0] == pytest.approx(-4.0 - c * 1.5, rel=1e-4)
    assert r.ci[1] == pytest.approx(-4.0 + c * 1.5, rel=1e-4)
    # A non-zero null difference: the same interval, the estimate is not moved.
    r = adjusted_inference([1.0], [1.959964], 1, -4.0, 1.5, null_difference=-1.0, dfs=[20.0])
    assert r.estimate == pytest.approx(-4.0, rel=1e-6)
    assert r.ci[0] == pytest.approx(-4.0 - c * 1.5, rel=1e-4)


def test_adjusted_inference_with_many_degrees_of_freedom_is_the_z_estimate():
    from monitor.stats.inference import adjusted_inference

    fractions, upper = [0.4, 0.7, 1.0], [3.2, 2.6, 2.0]
    t_based = adjusted_inference(fractions, upper, 2, 3.3, 1.1, dfs=[1e7, 1e7, 1e7])
    z_based = adjusted_inference(fractions, upper, 2, 3.3, 1.1)
    # The sequential t law meets the normal one at large df within its grid's accuracy: a
    # hundredth of a standard error for the estimate and the lower end; the upper end, where
    # the pivot is read far in a tail, agrees to 0.07 (about 0.06 standard errors).
    for got, want in ((t_based.estimate, z_based.estimate), (t_based.ci[0], z_based.ci[0])):
        assert got == pytest.approx(want, abs=0.011)
    assert t_based.ci[1] == pytest.approx(z_based.ci[1], abs=0.08)
    assert t_based.p_value == pytest.approx(z_based.p_value, abs=1e-3)
    # An early stop pulls the estimate back towards no change.
    assert 0 < t_based.estimate < 3.3


def test_adjusted_inference_bad_input():
    from monitor.stats.inference import adjusted_inference

    with pytest.raises(InvalidArgumentError, match="standard_error must be positive"):
        adjusted_inference([1.0], [1.96], 1, 1.0, 0.0, dfs=[10.0])
