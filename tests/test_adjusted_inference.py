"""Adjusted inference after a stop, on the difference's own scale, for z, t and rate statistics."""

import math

import numpy as np
import pytest
from scipy import stats

from monitor.errors import InvalidArgumentError
from monitor.stats.boundaries import SequentialBoundary
from monitor.stats.inference import StagewisePivot, adjusted_inference, median_unbiased_estimate
from monitor.stats.proportions import score_interval, score_statistic
from monitor.stats.sequential_t import SequentialTBoundary


@pytest.mark.parametrize("df", [None, 4, 12])
def test_one_look_gives_the_fixed_sample_estimate_and_interval(df):
    # Five pairs, estimate 1.0: the interval is the t interval, which holds the estimate.
    se = 0.1873
    r = adjusted_inference([1.0], [stats.norm.isf(0.025)], 1, 1.0, se, dfs=None if df is None else [df])
    q = stats.norm.isf(0.025) if df is None else stats.t.isf(0.025, df)
    # Figures are solved to 1e-4 standard errors; the t law's pivot uses the lighter grid.
    assert r.estimate == pytest.approx(1.0, abs=1e-4 * se)
    assert r.ci[0] == pytest.approx(1.0 - q * se, abs=2e-3 * se)
    assert r.ci[1] == pytest.approx(1.0 + q * se, abs=2e-3 * se)
    p = 2 * (stats.norm.sf(1.0 / se) if df is None else stats.t.sf(1.0 / se, df))
    assert r.p_value == pytest.approx(p, rel=2e-2, abs=1e-12)


def test_z_statistics_agree_with_the_drift_scale_estimate_plus_the_null_difference():
    fractions = [0.3, 0.6, 1.0]
    seq = SequentialBoundary(0.05, "obrien-fleming", "two-sided")
    upper = [seq.add_look(t).z for t in fractions]
    se, delta0 = 0.8, 5.0
    for estimate in (7.5, 8.3, 2.0):
        z = (estimate - delta0) / se
        for stop in (2, 3):
            if stop == 2 and abs(z) < upper[1]:
                continue
            new = adjusted_inference(fractions, upper, stop, estimate, se, null_difference=delta0)
            old = median_unbiased_estimate(fractions, upper, stop, z, 1.0 / (se ** 2 * fractions[stop - 1]))
            # The old figure is on the scale of estimate − δ0; the new one is the difference itself.
            assert new.estimate == pytest.approx(delta0 + old.estimate, abs=2e-4 * se)
            assert new.ci[0] == pytest.approx(delta0 + old.ci[0], abs=2e-4 * se)
            assert new.ci[1] == pytest.approx(delta0 + old.ci[1], abs=2e-4 * se)
            assert new.p_value == pytest.approx(old.p_value, rel=1e-6)


def test_null_difference_moves_only_the_p_value():
    fractions, upper = [0.5, 1.0], [2.797, 1.977]
    a = adjusted_inference(fractions, upper, 1, 7.63, 2.5, null_difference=0.0)
    b = adjusted_inference(fractions, upper, 1, 7.63, 2.5, null_difference=5.0)
    # Same data, same boundaries on the statistic: a different δ0 changes what was tested, and the
    # estimate stays on the difference's own scale (near 7.6, not 2.6).
    assert b.estimate > 5.0 and a.estimate > 5.0
    assert b.p_value > a.p_value


def test_less_is_the_mirror_of_greater():
    fractions = [0.4, 1.0]
    seq = SequentialBoundary(0.025, "pocock", "greater")
    upper = [seq.add_look(t).z for t in fractions]
    g = adjusted_inference(fractions, upper, 1, 3.1, 1.0, null_difference=0.5, alternative="greater",
                           alpha=0.025)
    s = adjusted_inference(fractions, upper, 1, -3.1, 1.0, null_difference=-0.5, alternative="less",
                           alpha=0.025)
    assert s.estimate == pytest.approx(-g.estimate, rel=1e-9)
    assert s.ci[0] is None and g.ci[1] is None
    assert s.ci[1] == pytest.approx(-g.ci[0], rel=1e-9)
    assert s.p_value == pytest.approx(g.p_value, rel=1e-9)


def test_rates_with_the_score_statistic_give_the_score_interval_at_one_look():
    x1, n1, x2, n2, delta0 = 30, 120, 18, 140, -0.05
    est = x1 / n1 - x2 / n2
    se = math.sqrt((x1 / n1) * (1 - x1 / n1) / n1 + (x2 / n2) * (1 - x2 / n2) / n2)
    c = stats.norm.isf(0.025)
    r = adjusted_inference([1.0], [c], 1, est, se, null_difference=delta0,
                           statistic_at=lambda d: score_statistic(x1, n1, x2, n2, d)[0])
    low, high = score_interval(x1, n1, x2, n2, c)
    assert r.ci[0] == pytest.approx(low, abs=2e-4 * se) and r.ci[1] == pytest.approx(high, abs=2e-4 * se)
    assert r.estimate == pytest.approx(est, abs=2e-4 * se)


def test_paired_t_after_a_stop_is_median_unbiased_and_covers():
    # Paired looks after 4, 6, 8 and 10 pairs, O'Brien–Fleming, true difference 1 sd. The pivot at
    # the truth decides both checks: the estimate is at or below the truth exactly when G(truth)
    # >= 1/2, and the interval covers exactly when alpha/2 <= G(truth) <= 1 - alpha/2. 300 streams
    # keep this quick; the benchmark runs many more, and one stream is solved in full below.
    rng = np.random.default_rng(12)
    pairs = [4, 6, 8, 10]
    fractions = [n / 10 for n in pairs]
    seq = SequentialTBoundary(0.05, "obrien-fleming", "two-sided")
    zs = [seq.add_look(t, n - 1).z for t, n in zip(fractions, pairs)]
    truth = 1.0
    at_truth = []
    for i in range(300):
        x = truth + rng.standard_normal(10)
        for k, n in enumerate(pairs):
            mean, se = x[:n].mean(), x[:n].std(ddof=1) / math.sqrt(n)
            if abs(mean / se) >= seq.t_boundaries[k] or k == len(pairs) - 1:
                pivot = StagewisePivot(fractions, zs, k + 1, lambda d: (mean - d) / se, se, 0.0, True,
                                       [n - 1 for n in pairs])
                at_truth.append(pivot(truth))
                if i == 0:
                    full = adjusted_inference(fractions, zs, k + 1, mean, se, dfs=[n - 1 for n in pairs])
                    assert (full.estimate <= truth) == (at_truth[-1] >= 0.5)
                    assert (full.ci[0] <= truth <= full.ci[1]) == (0.025 <= at_truth[-1] <= 0.975)
                break
    g = np.array(at_truth)
    n = g.size
    assert abs(np.mean(g >= 0.5) - 0.5) < 3 * math.sqrt(0.25 / n)
    assert np.mean((g >= 0.025) & (g <= 0.975)) >= 0.95 - 3 * math.sqrt(0.05 * 0.95 / n)


def test_bad_input():
    with pytest.raises(InvalidArgumentError, match="standard_error"):
        adjusted_inference([1.0], [1.96], 1, 1.0, 0.0)
    with pytest.raises(InvalidArgumentError, match="dfs"):
        adjusted_inference([0.5, 1.0], [2.8, 1.98], 2, 1.0, 0.5, dfs=[3])
