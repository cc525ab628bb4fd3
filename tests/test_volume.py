"""The volume check: anytime-valid evidence, checked by simulation and by numerical integration."""

import math

import numpy as np
import pytest
from scipy import integrate, stats

from monitor.errors import InvalidArgumentError
from monitor.stats.volume import (DROP_MULTIPLIERS, check_own_volume, check_share, drop_log_evidence, drop_log_evidence_many,
                                  share_log_evidence, usual_volume)


@pytest.mark.parametrize("n,lam", [(0, 5.0), (3, 10.0), (40, 50.0), (500, 480.0)])
def test_drop_evidence_is_the_average_of_poisson_likelihood_ratios(n, lam):
    # Each term written out as a ratio of scipy's Poisson probabilities at rate u·L and L.
    ratios = [stats.poisson.pmf(n, u * lam) / stats.poisson.pmf(n, lam) for u in DROP_MULTIPLIERS]
    assert drop_log_evidence(n, lam) == pytest.approx(math.log(np.mean(ratios)), rel=1e-6, abs=1e-9)
    assert float(drop_log_evidence_many([n], [lam])[0]) == pytest.approx(drop_log_evidence(n, lam), rel=1e-12)


@pytest.mark.parametrize("x,n,low,high", [(10, 100, 0.4, 0.6), (48, 100, 0.4, 0.6), (3, 7, 0.3, 0.5)])
def test_share_evidence_equals_the_mixture_integral(x, n, low, high):
    def ratio(p, ref):
        return (p / ref) ** x * ((1 - p) / (1 - ref)) ** (n - x)
    below, _ = integrate.quad(lambda p: ratio(p, low) / low, 0, low, limit=200)
    above, _ = integrate.quad(lambda p: ratio(p, high) / (1 - high), high, 1, limit=200)
    got = share_log_evidence(x, n, low, high)
    assert got[0] == pytest.approx(math.log(below), rel=1e-6)
    assert got[1] == pytest.approx(math.log(above), rel=1e-6)


def test_ville_bound_holds_under_repeated_looks():
    # Poisson arrivals exactly at the null rate, 96 looks a day: the share of days on which the
    # evidence ever reaches 1/level stays at most level (Ville); 40,000 days, level 0.01.
    rng = np.random.default_rng(5)
    days, looks, rate, level = 40_000, 96, 3.0, 0.01
    counts = rng.poisson(rate, size=(days, looks)).cumsum(axis=1)
    expected = rate * np.arange(1, looks + 1)
    hit = np.zeros(days, dtype=bool)
    threshold = math.log(1 / level)
    for j in range(0, looks, 3):
        ev = drop_log_evidence_many(counts[:, j], expected[j])
        hit |= ev >= threshold
    rate_hat = hit.mean()
    se = math.sqrt(level * (1 - level) / days)
    assert rate_hat <= level + 3 * se, (rate_hat, se)


def test_a_halved_group_is_found_and_a_normal_day_is_not():
    rng = np.random.default_rng(9)
    shape = np.r_[np.zeros(24), np.full(40, 12.0), np.zeros(32)]  # 96 quarter hours, busy 06:00–16:00
    history = [rng.poisson(shape * math.exp(rng.normal(0, 0.12))) for _ in range(4)]
    usual = usual_volume(history)
    normal_day = rng.poisson(shape * 0.9)[:60]
    assert not check_own_volume(normal_day, usual).warn
    broken = rng.poisson(shape * np.r_[np.ones(40), np.full(56, 0.5)])[:60]  # half from 10:00
    verdict = check_own_volume(broken, usual)
    assert verdict.warn and verdict.since_slot >= 36 and verdict.share_of_usual < 0.6


def test_without_history_nothing_is_claimed():
    verdict = check_own_volume([5, 0, 0], usual_volume(np.zeros((0, 96))))
    assert not verdict.warn and not verdict.measurable


def test_share_check_and_its_argument_checks():
    assert check_share(50, 50, 0.5).warn is False
    assert check_share(5, 95, 0.5).warn is True
    with pytest.raises(InvalidArgumentError, match="expected_share"):
        check_share(1, 1, 1.5)
    with pytest.raises(InvalidArgumentError, match="dispersion"):
        drop_log_evidence(1, 1, dispersion=0.5)


def test_usual_volume_sees_bursty_counts():
    rng = np.random.default_rng(2)
    mean = np.full(40, 10.0)
    # negative binomial with variance 3× the mean
    bursty = [stats.nbinom.rvs(5, 5 / (5 + mean), random_state=rng) for _ in range(6)]
    assert usual_volume(bursty).dispersion > 2.0
    assert usual_volume([rng.poisson(mean) for _ in range(6)]).dispersion < 1.5
