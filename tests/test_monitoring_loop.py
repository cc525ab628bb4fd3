"""A monitor-like loop holds the false-alarm rate; naive repeated testing does not.

The loop imitates what a live comparison does: looks at random, irregular event
counts, the boundary computed one look at a time with
``SequentialBoundary.add_look``, the difference estimated from accumulating
normal data with unequal spreads and tested with Welch's t through the
nominal-level rule. Streams that share a look schedule are vectorised; the
schedules themselves are drawn at random.

References: Armitage, McPherson & Rowe (1969) for the inflation of naive
repeated testing (tests/reference_planning.py), recomputed here with scipy's
multivariate normal distribution and with the boundary engine.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from monitor.stats.boundaries import SequentialBoundary, crossing_probabilities, nominal_decision
from monitor.stats.planning import plan_mean
from tests.reference_planning import ARMITAGE_5_LOOKS

ALPHA = 0.05
SCHEDULES = 50
STREAMS_PER_SCHEDULE = 40  # 2,000 streams in all


def _welch(n, sum1, sum_sq1, sum2, sum_sq2):
    """Welch t and its one-sided p-values for equal group sizes ``n`` (arrays over streams)."""
    m1, m2 = sum1 / n, sum2 / n
    v1 = (sum_sq1 - n * m1**2) / (n - 1)
    v2 = (sum_sq2 - n * m2**2) / (n - 1)
    a, b = v1 / n, v2 / n
    t = (m1 - m2) / np.sqrt(a + b)
    df = (a + b) ** 2 / (a**2 / (n - 1) + b**2 / (n - 1))
    return t, stats.t.sf(t, df), stats.t.cdf(t, df)


def _run_loop(seed, difference=0.0):
    """False alarms of the sequential loop and of the naive loop over all streams."""
    rng = np.random.default_rng(seed)
    plan = plan_mean(0.5, 1.0, looks=5)  # 65 events per group at fraction 1
    planned = plan.max_per_group
    sequential = []
    naive = []
    looks_taken = []
    for _ in range(SCHEDULES):
        # A clock-driven monitor sees a random number of looks at uneven event counts;
        # the last look comes once the plan is reached (possibly overshooting it).
        looks = int(rng.integers(6, 16))
        counts = np.sort(rng.choice(np.arange(10, planned), size=looks - 1, replace=False))
        counts = np.append(counts, planned + int(rng.integers(0, 4)))
        looks_taken.append(looks)

        x1 = rng.normal(10.0 + difference, 1.0, size=(STREAMS_PER_SCHEDULE, counts[-1]))
        x2 = rng.normal(10.0, 2.0, size=(STREAMS_PER_SCHEDULE, counts[-1]))
        # Shift by a constant near the data before summing squares, as the summaries do.
        c1, c1sq = np.cumsum(x1 - 10.0, axis=1), np.cumsum((x1 - 10.0) ** 2, axis=1)
        c2, c2sq = np.cumsum(x2 - 10.0, axis=1), np.cumsum((x2 - 10.0) ** 2, axis=1)

        boundary = SequentialBoundary(ALPHA, "obrien-fleming", "two-sided")
        stopped = np.zeros(STREAMS_PER_SCHEDULE, dtype=bool)
        alarm = np.zeros(STREAMS_PER_SCHEDULE, dtype=bool)
        naive_alarm = np.zeros(STREAMS_PER_SCHEDULE, dtype=bool)
        for n in counts:
            look = boundary.add_look(n / planned)
            _, p_up, p_low = _welch(n, c1[:, n - 1], c1sq[:, n - 1], c2[:, n - 1], c2sq[:, n - 1])
            crossed = np.minimum(p_up, p_low) <= look.nominal_p
            alarm |= crossed & ~stopped
            stopped |= crossed
            naive_alarm |= 2 * np.minimum(p_up, p_low) <= ALPHA
            if look.final:
                break
        # The vectorised rule is the engine's nominal-level rule.
        assert nominal_decision(float(p_up[0]), float(p_low[0]), look, "two-sided") == bool(crossed[0])
        assert boundary.complete
        sequential.append(alarm)
        naive.append(naive_alarm)
    return np.concatenate(sequential), np.concatenate(naive), looks_taken


def test_sequential_loop_holds_alpha_and_naive_loop_does_not():
    sequential, naive, looks = _run_loop(seed=2024)
    streams = sequential.size
    se = math.sqrt(ALPHA * (1 - ALPHA) / streams)
    assert streams == 2000 and np.mean(looks) > 8
    assert abs(sequential.mean() - ALPHA) < 3 * se
    # With about ten looks the naive loop raises false alarms roughly four times as often.
    assert naive.mean() > ALPHA + 10 * se


def test_sequential_loop_finds_a_real_difference():
    # Welch's t on sd 1 against sd 2 loses information against the planned z with sd 1,
    # so only check that the loop has real power, far above alpha.
    sequential, naive, _ = _run_loop(seed=77, difference=0.8)
    assert sequential.mean() > 0.6
    assert naive.mean() >= sequential.mean()


def _naive_rate_by_multivariate_normal(looks):
    t = np.arange(1, looks + 1) / looks
    corr = np.sqrt(np.minimum.outer(t, t) / np.maximum.outer(t, t))
    q = stats.norm.isf(ALPHA / 2)
    inside = stats.multivariate_normal(mean=np.zeros(looks), cov=corr).cdf(
        np.full(looks, q), lower_limit=np.full(looks, -q), rng=np.random.default_rng(1)
    )
    return 1 - inside


def test_armitage_five_unadjusted_looks():
    q = stats.norm.isf(ALPHA / 2)
    up, low = crossing_probabilities([0.2, 0.4, 0.6, 0.8, 1.0], [q] * 5, [-q] * 5)
    by_integration = up.sum() + low.sum()
    by_mvn = _naive_rate_by_multivariate_normal(5)
    assert by_integration == pytest.approx(by_mvn, abs=1e-3)
    assert by_integration == pytest.approx(ARMITAGE_5_LOOKS, abs=1e-3)

    # And by simulating the naive z-test loop itself.
    rng = np.random.default_rng(5)
    streams = 100_000
    z = np.cumsum(rng.standard_normal((streams, 5)), axis=1) / np.sqrt(np.arange(1, 6))
    rate = np.mean(np.any(np.abs(z) >= q, axis=1))
    assert abs(rate - by_integration) < 4 * math.sqrt(by_integration * (1 - by_integration) / streams)
