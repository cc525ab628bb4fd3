"""Score methods for a difference of two rates, with or without a margin.

A rate difference ``p1 − p2`` tested against a hypothesised difference ``δ0``
(a margin, as in "the new supplier's defect rate is at most 3 points worse")
needs a standard error that respects the hypothesis. The Wald standard error
``√(p̂1(1−p̂1)/n1 + p̂2(1−p̂2)/n2)`` does not, and at low rates it rejects far too
often (at rates 0.02 vs 0.05, margin −0.03, 100 per group: one-sided size about
0.05 against 0.025). The score statistic evaluates the variance at the
maximum-likelihood rates restricted to ``p1 − p2 = δ0``:

    Z(δ0) = (p̂1 − p̂2 − δ0) / √( p̃1(1−p̃1)/n1 + p̃2(1−p̃2)/n2 )

with the restricted rates from the closed-form root of a cubic (Farrington &
Manning 1990, "Test statistics and sample size formulae for comparative binomial
trials with null hypothesis of non-zero risk difference or non-unity relative
risk", Statistics in Medicine 9:1447–1454). Miettinen & Nurminen (1985,
"Comparative analysis of two rates", Statistics in Medicine 4:213–226)
multiply the variance by ``N/(N−1)`` (``correction=True``). At ``δ0 = 0`` the
Farrington–Manning statistic is the pooled two-proportion z.

Inverting the score statistic gives an interval for the difference: the set of
``δ`` with ``|Z(δ)| < c``. With ``c`` the fixed-sample quantile it is the score
interval; with a group-sequential boundary in place of ``c`` it is a repeated
confidence interval that keeps its coverage near rates of 0 or 1 and with
unequal group sizes, where an interval from an SE pooled under "no difference"
does not.

statsmodels 0.15 (``test_proportions_2indep(method="score", compare="diff")``)
has ``count0`` where the Miettinen–Nurminen cubic has ``nobs0`` in its linear
coefficient, so for ``δ0 ≠ 0`` its restricted rates do not maximise the
restricted likelihood (statsmodels issue 10269); the figures here differ from
it in the third decimal there and agree exactly at ``δ0 = 0``.

Pure module: numpy and scipy only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize, special

from ..errors import InvalidArgumentError
from ._checks import check_alternative, finite

__all__ = [
    "ScoreTest",
    "restricted_rates",
    "score_statistic",
    "score_test",
    "score_interval",
    "score_statistics",
]


def _counts(x1, n1, x2, n2):
    out = []
    for name, value in (("successes1", x1), ("n1", n1), ("successes2", x2), ("n2", n2)):
        if isinstance(value, bool) or not float(value).is_integer():
            raise InvalidArgumentError(f"{name} must be a whole number; got {value!r}")
        out.append(int(value))
    x1, n1, x2, n2 = out
    if n1 < 1 or n2 < 1:
        raise InvalidArgumentError(f"n1 and n2 must be at least 1; got {n1!r} and {n2!r}")
    if not (0 <= x1 <= n1):
        raise InvalidArgumentError(f"successes1 must be between 0 and n1 ({n1}); got {x1!r}")
    if not (0 <= x2 <= n2):
        raise InvalidArgumentError(f"successes2 must be between 0 and n2 ({n2}); got {x2!r}")
    return x1, n1, x2, n2


def _margin(delta):
    d = finite(delta, "null_difference")
    if not -1.0 < d < 1.0:
        raise InvalidArgumentError(f"null_difference must be in (-1, 1) for rates; got {delta!r}")
    return d


def restricted_rates(x1, n1, x2, n2, null_difference):
    """Maximum-likelihood rates under ``p1 − p2 = δ0`` (Farrington & Manning 1990, closed form).

    Examples
    --------
    >>> p1, p2 = restricted_rates(30, 100, 20, 100, 0.0)   # δ0 = 0: the pooled rate
    >>> round(p1, 6), round(p2, 6)
    (0.25, 0.25)
    """
    x1, n1, x2, n2 = _counts(x1, n1, x2, n2)
    return _restricted(x1, n1, x2, n2, _margin(null_difference))


def _restricted(x1, n1, x2, n2, delta):
    p1, p2 = x1 / n1, x2 / n2
    if delta == 0.0:
        pooled = (x1 + x2) / (n1 + n2)
        return pooled, pooled
    theta = n2 / n1
    a = 1.0 + theta
    b = -(1.0 + theta + p1 + theta * p2 + delta * (theta + 2.0))
    c = delta * delta + delta * (2.0 * p1 + theta + 1.0) + p1 + theta * p2
    d = -p1 * delta * (1.0 + delta)
    v = b ** 3 / (27.0 * a ** 3) - b * c / (6.0 * a * a) + d / (2.0 * a)
    inner = b * b / (9.0 * a * a) - c / (3.0 * a)
    u = math.copysign(math.sqrt(max(inner, 0.0)), v) if v != 0 else math.sqrt(max(inner, 0.0))
    if u == 0.0:
        r1 = -b / (3.0 * a)
    else:
        ratio = max(-1.0, min(1.0, v / u ** 3))
        w = (math.pi + math.acos(ratio)) / 3.0
        r1 = 2.0 * u * math.cos(w) - b / (3.0 * a)
    r1 = min(max(r1, max(0.0, delta)), min(1.0, 1.0 + delta))
    return r1, r1 - delta


def score_statistic(x1, n1, x2, n2, null_difference=0.0, *, correction=False):
    """Score z for ``p1 − p2 = δ0`` and its standard error under that hypothesis.

    Returns
    -------
    (float, float)
        ``(z, se)``; ``z`` is ``±inf`` when the restricted variance is zero and
        the estimate differs from ``δ0``, nan when it equals ``δ0``.

    Examples
    --------
    >>> z, se = score_statistic(12, 100, 20, 110, -0.03)
    >>> round(z, 4)
    -0.6461
    """
    x1, n1, x2, n2 = _counts(x1, n1, x2, n2)
    return _statistic(x1, n1, x2, n2, _margin(null_difference), correction)


def _statistic(x1, n1, x2, n2, delta, correction):
    q1, q2 = _restricted(x1, n1, x2, n2, delta)
    var = q1 * (1.0 - q1) / n1 + q2 * (1.0 - q2) / n2
    if correction:
        total = n1 + n2
        var *= total / (total - 1.0) if total > 1 else math.nan
    excess = x1 / n1 - x2 / n2 - delta
    if not var > 0:
        return (math.copysign(math.inf, excess) if excess != 0 else math.nan), 0.0
    se = math.sqrt(var)
    return excess / se, se


@dataclass(frozen=True)
class ScoreTest:
    """Score test of ``p1 − p2 = δ0``.

    Attributes
    ----------
    estimate : float
        ``p̂1 − p̂2``.
    null_difference : float
    statistic : float
        Score z.
    standard_error : float
        Standard error under the hypothesis (restricted rates).
    p_value : float
    alternative : str
    correction : bool
        Miettinen–Nurminen ``N/(N−1)`` factor applied.
    """

    estimate: float
    null_difference: float
    statistic: float
    standard_error: float
    p_value: float
    alternative: str
    correction: bool


def score_test(x1, n1, x2, n2, null_difference=0.0, *, alternative="two-sided", correction=False):
    """Score test (Farrington–Manning; Miettinen–Nurminen with ``correction``) of a rate difference.

    Examples
    --------
    Is the new supplier's defect rate (6 in 200) at most 3 points worse than the
    old one's (14 in 200)? With rates "group 1 − group 2", the margin is −0.03:

    >>> r = score_test(6, 200, 14, 200, -0.03, alternative="greater")
    >>> round(r.statistic, 4), round(r.p_value, 4)
    (-0.4665, 0.6796)
    """
    x1, n1, x2, n2 = _counts(x1, n1, x2, n2)
    delta = _margin(null_difference)
    check_alternative(alternative)
    z, se = _statistic(x1, n1, x2, n2, delta, correction)
    if math.isnan(z):
        p = math.nan
    elif alternative == "greater":
        p = float(special.ndtr(-z))
    elif alternative == "less":
        p = float(special.ndtr(z))
    else:
        p = float(min(1.0, 2.0 * special.ndtr(-abs(z))))
    return ScoreTest(x1 / n1 - x2 / n2, delta, float(z), float(se), p, alternative, bool(correction))


def score_interval(x1, n1, x2, n2, critical, alternative="two-sided", *, correction=False):
    """Differences ``δ`` the score test does not reject at critical value ``critical``.

    ``critical`` is the fixed-sample normal quantile for a score interval, or
    a look's group-sequential boundary for a repeated confidence interval.

    Returns
    -------
    tuple
        ``(low, high)``; ``None`` for the open end of a one-sided bound.

    Examples
    --------
    >>> low, high = score_interval(12, 100, 20, 110, 1.959964)
    >>> round(low, 4), round(high, 4)
    (-0.1599, 0.037)
    """
    x1, n1, x2, n2 = _counts(x1, n1, x2, n2)
    check_alternative(alternative)
    c = finite(critical, "critical")
    if c <= 0:
        raise InvalidArgumentError(f"critical must be positive; got {critical!r}")
    estimate = x1 / n1 - x2 / n2
    eps = 1e-12

    def z_at(delta):
        return _statistic(x1, n1, x2, n2, delta, correction)[0]

    def limit(target, lo, hi):
        # z falls as δ rises; find where it crosses target within (lo, hi).
        f_lo, f_hi = z_at(lo) - target, z_at(hi) - target
        if f_lo <= 0:
            return lo
        if f_hi >= 0:
            return hi
        return float(optimize.brentq(lambda d: z_at(d) - target, lo, hi, xtol=1e-12, rtol=1e-12))

    low = limit(c, -1.0 + eps, min(estimate, 1.0 - eps)) if alternative != "less" else None
    high = limit(-c, max(estimate, -1.0 + eps), 1.0 - eps) if alternative != "greater" else None
    return (low, high)


def score_statistics(x1, n1, x2, n2, null_difference):
    """:func:`score_statistic` (Farrington–Manning, no correction) over arrays of counts.

    For simulations: the same restricted rates and statistic, element by
    element; nan where the restricted variance is zero and the estimate equals δ0.

    Examples
    --------
    >>> import numpy as np
    >>> z = score_statistics(np.array([12, 30]), 100, np.array([20, 20]), np.array([110, 100]), -0.03)
    >>> [round(float(v), 4) for v in z]
    [-0.6461, 2.117]
    """
    x1, n1, x2, n2 = (np.asarray(a, dtype=float) for a in (x1, n1, x2, n2))
    delta = float(null_difference)
    p1, p2 = x1 / n1, x2 / n2
    if delta == 0.0:
        q1 = q2 = (x1 + x2) / (n1 + n2)
    else:
        theta = n2 / n1
        a = 1.0 + theta
        b = -(1.0 + theta + p1 + theta * p2 + delta * (theta + 2.0))
        c = delta * delta + delta * (2.0 * p1 + theta + 1.0) + p1 + theta * p2
        d = -p1 * delta * (1.0 + delta)
        v = b ** 3 / (27.0 * a ** 3) - b * c / (6.0 * a * a) + d / (2.0 * a)
        inner = np.maximum(b * b / (9.0 * a * a) - c / (3.0 * a), 0.0)
        u = np.where(v < 0, -1.0, 1.0) * np.sqrt(inner)
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.clip(np.where(u != 0, v / np.where(u != 0, u, 1.0) ** 3, 0.0), -1.0, 1.0)
        w = (np.pi + np.arccos(ratio)) / 3.0
        q1 = np.where(u == 0, -b / (3.0 * a), 2.0 * u * np.cos(w) - b / (3.0 * a))
        q1 = np.clip(q1, max(0.0, delta), min(1.0, 1.0 + delta))
        q2 = q1 - delta
    var = q1 * (1.0 - q1) / n1 + q2 * (1.0 - q2) / n2
    excess = p1 - p2 - delta
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(var > 0, excess / np.sqrt(np.where(var > 0, var, 1.0)),
                     np.where(excess > 0, np.inf, np.where(excess < 0, -np.inf, np.nan)))
    return z
