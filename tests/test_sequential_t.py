"""Exact sequential t boundaries (Jennison & Turnbull 1991) checked where the nominal-level rule breaks."""

import math

import numpy as np
import pytest
from scipy import stats

from monitor.errors import InvalidArgumentError
from monitor.stats.boundaries import SequentialBoundary, nominal_decision
from monitor.stats.sequential_t import (SequentialTBoundary, t_critical, t_crossing_probabilities,
                                        z_equivalent)


@pytest.mark.parametrize("df", [2, 3, 5, 14, 60])
def test_one_look_is_the_student_t_quantile(df):
    b = SequentialTBoundary(0.05, "pocock", "two-sided")
    look = b.add_look(1.0, df)
    assert b.t_boundaries[0] == pytest.approx(stats.t.isf(0.025, df), rel=2e-4)
    # The recorded boundary is the calibrated nominal level and its z equivalent.
    assert look.nominal_p == pytest.approx(0.025, rel=2e-3)
    assert look.z == pytest.approx(stats.norm.isf(look.nominal_p), rel=1e-9)
    assert b.alpha_used == pytest.approx(0.05, abs=1e-9)


def test_very_large_df_gives_the_z_boundaries():
    t_engine = SequentialTBoundary(0.05, "obrien-fleming", "two-sided")
    z_engine = SequentialBoundary(0.05, "obrien-fleming", "two-sided")
    for k in range(1, 6):
        lt = t_engine.add_look(k / 5, 1e7)
        lz = z_engine.add_look(k / 5)
        assert lt.z == pytest.approx(lz.z, abs=2e-3)
    assert t_engine.alpha_used == pytest.approx(0.05, abs=1e-9)


def test_resume_from_recorded_looks_gives_the_same_next_boundary():
    live = SequentialTBoundary(0.05, "pocock", "two-sided")
    recorded = [(3 / 12, 2.0), (5 / 12, 4.0), (6 / 12, 5.7)]
    zs = [live.add_look(t, df).z for t, df in recorded]
    again = SequentialTBoundary.resume(0.05, "pocock", "two-sided", [t for t, _ in recorded],
                                       [df for _, df in recorded], zs)
    assert again.add_look(9 / 12, 8.0).z == live.add_look(9 / 12, 8.0).z
    assert again.dfs == live.dfs
    with pytest.raises(InvalidArgumentError, match="one value per look"):
        SequentialTBoundary.resume(0.05, "pocock", "two-sided", [0.5], [3, 4], [2.0])
    with pytest.raises(InvalidArgumentError, match="df must be at least 1"):
        SequentialTBoundary(0.05, "pocock", "two-sided").add_look(0.5, 0.5)


def test_crossing_probabilities_agree_with_simulated_t_statistics():
    # Paired looks after 3, 4, 6 and 10 pairs; MC s.e. about 1e-4 at 400,000 streams.
    rng = np.random.default_rng(20)
    pairs = [3, 4, 6, 10]
    x = rng.standard_normal((400_000, 10))
    total, squares = np.cumsum(x, axis=1), np.cumsum(x * x, axis=1)
    t_stats = []
    for n in pairs:
        mean = total[:, n - 1] / n
        t_stats.append(mean / np.sqrt((squares[:, n - 1] - n * mean * mean) / (n - 1) / n))
    bounds = [2.5, 3.0, 2.8, 2.5]
    alive = np.ones(x.shape[0], bool)
    simulated = []
    for k, b in enumerate(bounds):
        simulated.append(np.mean(alive & (t_stats[k] >= b)))
        alive &= np.abs(t_stats[k]) < b
    up, low = t_crossing_probabilities([n / 10 for n in pairs], [n - 1 for n in pairs], bounds,
                                       [-b for b in bounds])
    assert up == pytest.approx(low, rel=1e-9)
    for k in range(4):
        se = math.sqrt(simulated[k] / x.shape[0])
        assert abs(up[k] - simulated[k]) < 4 * se + 2e-3 * simulated[k]


@pytest.mark.parametrize("spending", ["pocock", "obrien-fleming"])
def test_paired_three_to_fifteen_pairs_holds_alpha_where_the_nominal_level_does_not(spending):
    rng = np.random.default_rng(7 if spending == "pocock" else 8)
    streams = 400_000
    x = rng.standard_normal((streams, 15))
    total, squares = np.cumsum(x, axis=1), np.cumsum(x * x, axis=1)
    exact = SequentialTBoundary(0.05, spending, "two-sided")
    nominal = SequentialBoundary(0.05, spending, "two-sided")
    exact_alarm = np.zeros(streams, bool)
    nominal_alarm = np.zeros(streams, bool)
    for n in range(3, 16):
        mean = total[:, n - 1] / n
        t = mean / np.sqrt((squares[:, n - 1] - n * mean * mean) / (n - 1) / n)
        exact.add_look(n / 15, n - 1)
        exact_alarm |= np.abs(t) >= exact.t_boundaries[-1]
        nominal_alarm |= np.abs(t) >= stats.t.isf(nominal.add_look(n / 15).nominal_p, n - 1)
    se = math.sqrt(0.05 * 0.95 / streams)
    assert abs(exact_alarm.mean() - 0.05) < 3 * se
    # The old rule is measurably above alpha on the same streams (so this check can fail).
    assert nominal_alarm.mean() > 0.05 + 5 * se


def test_the_decision_rule_is_the_look_p_value_against_the_calibrated_level():
    b = SequentialTBoundary(0.05, "obrien-fleming", "two-sided")
    for n in (4, 6, 8):
        look = b.add_look(n / 8, n - 1)
    c = b.t_boundaries[-1]
    for t in (c - 1e-6, c + 1e-6):
        p_upper = stats.t.sf(t, 7)
        assert nominal_decision(p_upper, 1 - p_upper, look, "two-sided") == (t >= c)


def test_t_and_z_conversions():
    assert t_critical(0.025, 4) == pytest.approx(stats.t.isf(0.025, 4), rel=1e-12)
    assert t_critical(0.0, 4) == math.inf
    assert t_critical(0.025, math.inf) == pytest.approx(1.959964, rel=1e-6)
    assert z_equivalent(t_critical(0.01, 6), 6) == pytest.approx(stats.norm.isf(0.01), rel=1e-9)
    assert z_equivalent(math.inf, 3) == math.inf
    with pytest.raises(InvalidArgumentError):
        t_critical(1.5, 3)
