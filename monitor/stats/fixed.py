"""Fixed-sample two-group tests computed from sufficient statistics.

Every test here compares group 1 with group 2 through the difference
``group 1 − group 2`` against a hypothesised difference ``δ0``
(``null_difference``) and returns a frozen :class:`FixedSampleResult`.

Tests
-----
``z_test``
    Two-sample z with known population standard deviations.
``pooled_t``
    Student's t with a pooled variance, ``n1 + n2 − 2`` degrees of freedom.
``welch_t``
    Welch's t with Welch–Satterthwaite degrees of freedom.
``paired_t``
    One-sample t on per-pair differences, ``n − 1`` degrees of freedom.
``two_proportions``
    Two-proportion z. The standard error is pooled when ``δ0 = 0`` (under
    that null both groups share one rate) and unpooled otherwise (a pooled rate
    contradicts a non-zero null difference). The interval is Newcombe's hybrid
    score interval by default, or the Wald interval.

Alternatives: ``"two-sided"``, ``"greater"`` (group 1 − group 2 > δ0) and
``"less"`` (group 1 − group 2 < δ0). One-sided alternatives give a one-sided
confidence bound whose open end is ``None``.

Degenerate data (both groups with zero variance, so a zero standard error) does
not raise: the statistic is ``+inf``/``-inf`` when the estimate lies above/below
``δ0`` and ``nan`` when it equals ``δ0``; the p-value is the matching limit
(0 or 1, nan for nan), ``reject`` is always ``False`` and the notes carry
``"degenerate: both groups have zero variance"``. A test on such data cannot be
trusted, so the caller decides what to do (the look records a data problem).

Pure module: numpy and scipy only.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass, field, fields

from scipy import special

from ._checks import ALTERNATIVES, INTERVALS
# Under the names monitor.stats.clustered imports from here.
from ._checks import check_alternative as _check_alternative
from ._checks import finite as _check_finite
from ._checks import open_unit as _check_probability
from ..errors import InvalidArgumentError
from .proportions import score_interval as _score_interval
from .proportions import score_statistic as _score_statistic
from .summaries import MomentSummary

__all__ = [
    "FixedSampleResult",
    "z_test",
    "pooled_t",
    "welch_t",
    "paired_t",
    "two_proportions",
    "from_summaries",
    "METHODS",
    "ALTERNATIVES",
    "INTERVALS",
    "DEGENERATE_NOTE",
]

METHODS = ("z", "pooled", "welch", "paired", "proportions")
# The intervals a caller of two_proportions may ask for: the configurable ones and the
# inverted score test (used by the look's repeated intervals for rates).
_ACCEPTED_INTERVALS = INTERVALS + ("score",)
DEGENERATE_NOTE = "degenerate: both groups have zero variance"


class IntervalRecord:
    """What every two-group result record shares: its degenerate flag, its interval at any level
    (rebuilt from the record's ``_interval`` recipe) and its plain-dict form.

    A record with no recipe (the data could not support a test) has no interval: ``(nan, nan)``,
    or, when ``_open_when_empty``, NaN with the open end of a one-sided bound marked ``None``.
    """

    _open_when_empty = False

    @property
    def degenerate(self) -> bool:
        """Whether the data could not support a test."""
        return any(note.startswith("degenerate:") for note in self.notes)

    def confidence_interval(self, level: float = None) -> tuple:
        """Confidence interval (or one-sided bound) for the difference at ``level`` (default ``1 − alpha``).

        Returns ``(low, high)``; ``None`` marks the open end of a one-sided bound.
        """
        level = 1.0 - self.alpha if level is None else _check_probability(level, "level")
        if not self._interval:
            if self._open_when_empty:
                return {"two-sided": (math.nan, math.nan), "greater": (math.nan, None),
                        "less": (None, math.nan)}[self.alternative]
            return (math.nan, math.nan)
        return _interval(self._interval, self.estimate, self.alternative, 1.0 - level)

    def to_dict(self) -> dict:
        """Plain-dict form (JSON-friendly: tuples become lists, nested records their own dicts)."""
        out = {}
        for f in fields(self):
            if f.name.startswith("_"):
                continue
            value = getattr(self, f.name)
            if isinstance(value, IntervalRecord):
                value = value.to_dict()
            elif isinstance(value, tuple):
                value = list(value)
            elif isinstance(value, dict):
                value = dict(value)
            out[f.name] = value
        return out


@dataclass(frozen=True)
class FixedSampleResult(IntervalRecord):
    """Outcome of one fixed-sample two-group test.

    Attributes
    ----------
    method : str
        One of ``"z"``, ``"pooled"``, ``"welch"``, ``"paired"``, ``"proportions"``.
    alternative : str
        ``"two-sided"``, ``"greater"`` or ``"less"``.
    alpha : float
        Significance level the critical values, interval and ``reject`` use.
    null_difference : float
        Hypothesised difference ``δ0`` (group 1 − group 2).
    estimate : float
        Observed difference (group 1 − group 2; the mean difference for paired).
    standard_error : float
        Standard error of the estimate used by the statistic.
    statistic : float
        ``(estimate − δ0) / standard_error``.
    df : float or None
        Degrees of freedom of the t reference distribution; ``None`` for z tests.
    p_value : float
        p-value for the alternative.
    critical_values : tuple of float
        ``(-c, c)`` for two-sided, ``(c,)`` for greater, ``(-c,)`` for less,
        on the scale of ``statistic``.
    reject : bool
        ``p_value <= alpha`` (always ``False`` for a degenerate result).
    ci : tuple
        ``(low, high)`` at level ``1 − alpha`` matching the alternative;
        ``None`` marks the open end of a one-sided bound.
    effect_size : dict
        Means: ``cohen_d`` and ``hedges_g`` (paired: ``d_z`` and ``hedges_g_z``
        on the differences; z test: ``standardized_difference`` over the known
        sigmas). Rates: ``risk_difference`` and ``risk_ratio``.
    variance_ratio : float or None
        ``s1² / s2²`` for ``pooled`` and ``welch``; ``None`` otherwise.
    variance_ratio_p : float or None
        Two-sided F-test p-value for equal variances; ``None`` otherwise.
    notes : tuple of str
        Plain-language remarks (pooled or unpooled SE, degenerate data, ...).

    Examples
    --------
    >>> r = welch_t(30, 10.0, 2.0, 25, 9.0, 3.0)
    >>> low, high = r.confidence_interval(0.99)
    >>> low < r.ci[0] and high > r.ci[1]
    True
    """

    method: str
    alternative: str
    alpha: float
    null_difference: float
    estimate: float
    standard_error: float
    statistic: float
    df: float | None
    p_value: float
    critical_values: tuple
    reject: bool
    ci: tuple
    effect_size: dict
    variance_ratio: float | None
    variance_ratio_p: float | None
    notes: tuple
    # How to rebuild the interval at another level; not part of the public record.
    _interval: tuple = field(default=(), repr=False, compare=False)

    @property
    def degenerate(self) -> bool:
        """Whether the data had zero variance in both groups."""
        return DEGENERATE_NOTE in self.notes


# ----------------------------------------------------------------------------
# validation


def _check_count(value, name, minimum):
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise InvalidArgumentError(f"{name} must be a whole number; got {value!r}")
    if isinstance(value, numbers.Real) and not isinstance(value, numbers.Integral):
        if not math.isfinite(value) or value != math.floor(value):
            raise InvalidArgumentError(f"{name} must be a whole number; got {value!r}")
    v = int(value)
    if v < minimum:
        why = " (a variance needs at least two values)" if minimum == 2 else ""
        raise InvalidArgumentError(f"{name} must be at least {minimum}{why}; got {value!r}")
    return v


def _check_sd(value, name):
    v = _check_finite(value, name)
    if v < 0:
        raise InvalidArgumentError(f"{name} must not be negative; got {value!r}")
    return v


# ----------------------------------------------------------------------------
# shared machinery


# The look calls these on every look: scipy.special's ufuncs cost microseconds where
# building frozen scipy.stats distributions costs milliseconds.


def _quantile(df, q):
    if df is None or math.isinf(df):
        return float(special.ndtri(q))
    return float(special.stdtrit(df, q))


def _cdf(x, df):
    if df is None or math.isinf(df):
        return float(special.ndtr(x))
    return float(special.stdtr(df, x))


def _p_value(statistic, df, alternative):
    if math.isnan(statistic):
        return math.nan
    if alternative == "greater":
        return _cdf(-statistic, df)
    if alternative == "less":
        return _cdf(statistic, df)
    return float(min(1.0, 2.0 * _cdf(-abs(statistic), df)))


def _critical_values(df, alternative, alpha):
    if alternative == "two-sided":
        c = _quantile(df, 1.0 - alpha / 2.0)
        return (-c, c)
    c = _quantile(df, 1.0 - alpha)
    return (c,) if alternative == "greater" else (-c,)


def _interval(spec, estimate, alternative, alpha):
    """Interval from its recipe: ("se", se, df) or ("newcombe"|"wald", x1, n1, x2, n2)."""
    kind = spec[0]
    if kind == "se":
        _, se, df = spec
        if se == 0.0:
            # No spread at all: every bound collapses onto the estimate.
            return {"two-sided": (estimate, estimate), "greater": (estimate, None),
                    "less": (None, estimate)}[alternative]
        if df is not None and math.isnan(df):
            return (math.nan, math.nan) if alternative == "two-sided" else (
                (math.nan, None) if alternative == "greater" else (None, math.nan))
        if alternative == "two-sided":
            c = _quantile(df, 1.0 - alpha / 2.0)
            return (estimate - c * se, estimate + c * se)
        c = _quantile(df, 1.0 - alpha)
        return (estimate - c * se, None) if alternative == "greater" else (None, estimate + c * se)
    _, x1, n1, x2, n2 = spec
    z = float(special.ndtri(1.0 - (alpha / 2.0 if alternative == "two-sided" else alpha)))
    if kind == "wald":
        low, high = _wald_difference(x1, n1, x2, n2, z)
    elif kind == "score":
        return _score_interval(x1, n1, x2, n2, z, alternative)
    else:
        low, high = _newcombe_difference(x1, n1, x2, n2, z)
    if alternative == "greater":
        return (low, None)
    if alternative == "less":
        return (None, high)
    return (low, high)


def _finish(method, alternative, alpha, null_difference, estimate, se, df,
            effect_size, notes, interval_spec, variance_ratio=None, variance_ratio_p=None):
    notes = list(notes)
    degenerate = se == 0.0 or (df is not None and math.isnan(df))
    if degenerate:
        excess = estimate - null_difference
        statistic = math.copysign(math.inf, excess) if excess != 0 else math.nan
        notes.append(DEGENERATE_NOTE)
    else:
        statistic = (estimate - null_difference) / se
    if degenerate and math.isinf(statistic):
        # Limit of the p-value as the standard error shrinks to zero.
        if alternative == "two-sided":
            p = 0.0
        elif alternative == "greater":
            p = 0.0 if statistic > 0 else 1.0
        else:
            p = 0.0 if statistic < 0 else 1.0
    else:
        p = _p_value(statistic, df, alternative)
    if df is not None and math.isnan(df):
        # Welch df is 0/0 when both variances vanish: no t distribution to quote.
        crit = (math.nan, math.nan) if alternative == "two-sided" else (math.nan,)
    else:
        crit = _critical_values(df, alternative, alpha)
    reject = bool((not degenerate) and p <= alpha)
    result_df = None if df is None else float(df)
    return FixedSampleResult(
        method=method,
        alternative=alternative,
        alpha=alpha,
        null_difference=null_difference,
        estimate=float(estimate),
        standard_error=float(se),
        statistic=float(statistic),
        df=result_df,
        p_value=float(p),
        critical_values=tuple(float(c) for c in crit),
        reject=reject,
        ci=_interval(interval_spec, float(estimate), alternative, alpha),
        effect_size=effect_size,
        variance_ratio=variance_ratio,
        variance_ratio_p=variance_ratio_p,
        notes=tuple(notes),
        _interval=interval_spec,
    )


def _hedges_correction(df):
    """Exact small-sample factor J(df) = Γ(df/2) / (√(df/2) Γ((df−1)/2))."""
    if df <= 1:
        return math.nan
    return float(math.exp(special.gammaln(df / 2.0) - special.gammaln((df - 1.0) / 2.0))
                 / math.sqrt(df / 2.0))


def _standardise(difference, sd):
    if sd > 0:
        return difference / sd
    if difference == 0:
        return math.nan
    return math.copysign(math.inf, difference)


def _mean_effect(difference, pooled_sd, df):
    d = _standardise(difference, pooled_sd)
    return {"cohen_d": float(d), "hedges_g": float(d * _hedges_correction(df))}


def _variance_ratio(sd1, n1, sd2, n2):
    v1, v2 = sd1 * sd1, sd2 * sd2
    if v2 == 0:
        if v1 == 0:
            return math.nan, math.nan
        return math.inf, 0.0
    ratio = v1 / v2
    lower = float(special.fdtr(n1 - 1, n2 - 1, ratio))
    upper = float(special.fdtrc(n1 - 1, n2 - 1, ratio))
    p = min(1.0, 2.0 * min(lower, upper))
    return float(ratio), float(p)


def _common(null_difference, alternative, alpha):
    return (_check_finite(null_difference, "null_difference"),
            _check_alternative(alternative),
            _check_probability(alpha, "alpha"))


# ----------------------------------------------------------------------------
# mean tests


def z_test(n1, mean1, sigma1, n2, mean2, sigma2, *, null_difference=0.0,
           alternative="two-sided", alpha=0.05) -> FixedSampleResult:
    """Two-sample z test with known population standard deviations.

    Parameters
    ----------
    n1, n2 : int
        Group sizes (at least 1 each).
    mean1, mean2 : float
        Group means.
    sigma1, sigma2 : float
        Known population standard deviations (not estimated from the data).
    null_difference : float, default 0
        Hypothesised difference ``δ0`` of group 1 − group 2.
    alternative : {"two-sided", "greater", "less"}
        ``"greater"`` tests group 1 − group 2 > δ0.
    alpha : float, default 0.05
        Significance level.

    Returns
    -------
    FixedSampleResult
        ``df`` is ``None``; ``effect_size["standardized_difference"]`` is the
        difference over the root mean square of the two sigmas.

    Examples
    --------
    >>> r = z_test(50, 105.0, 15.0, 50, 100.0, 15.0)
    >>> round(r.statistic, 4), round(r.p_value, 4)
    (1.6667, 0.0956)
    """
    null_difference, alternative, alpha = _common(null_difference, alternative, alpha)
    n1 = _check_count(n1, "n1", 1)
    n2 = _check_count(n2, "n2", 1)
    mean1 = _check_finite(mean1, "mean1")
    mean2 = _check_finite(mean2, "mean2")
    sigma1 = _check_sd(sigma1, "sigma1")
    sigma2 = _check_sd(sigma2, "sigma2")
    se = math.sqrt(sigma1 ** 2 / n1 + sigma2 ** 2 / n2)
    estimate = mean1 - mean2
    rms = math.sqrt((sigma1 ** 2 + sigma2 ** 2) / 2.0)
    effect = {"standardized_difference": float(_standardise(estimate, rms))}
    notes = ["known population standard deviations; normal reference distribution"]
    return _finish("z", alternative, alpha, null_difference, estimate, se, None,
                   effect, notes, ("se", se, None))


def _two_sample_inputs(n1, mean1, sd1, n2, mean2, sd2):
    return (_check_count(n1, "n1", 2), _check_finite(mean1, "mean1"), _check_sd(sd1, "sd1"),
            _check_count(n2, "n2", 2), _check_finite(mean2, "mean2"), _check_sd(sd2, "sd2"))


def _pooled_variance(n1, sd1, n2, sd2):
    """Pooled variance of two groups and its degrees of freedom, ``n1 + n2 − 2``."""
    df = n1 + n2 - 2
    return ((n1 - 1) * sd1 ** 2 + (n2 - 1) * sd2 ** 2) / df, df


def pooled_t(n1, mean1, sd1, n2, mean2, sd2, *, null_difference=0.0,
             alternative="two-sided", alpha=0.05) -> FixedSampleResult:
    """Two-sample Student t test with a pooled variance (df = n1 + n2 − 2).

    Parameters
    ----------
    n1, n2 : int
        Group sizes (at least 2 each).
    mean1, mean2 : float
        Group means.
    sd1, sd2 : float
        Sample standard deviations (``n − 1`` denominator).
    null_difference : float, default 0
        Hypothesised difference ``δ0`` of group 1 − group 2.
    alternative : {"two-sided", "greater", "less"}
        ``"greater"`` tests group 1 − group 2 > δ0.
    alpha : float, default 0.05
        Significance level.

    Returns
    -------
    FixedSampleResult
        With Hedges' g (pooled SD, exact small-sample factor) and the variance
        ratio ``s1²/s2²`` with its two-sided F-test p-value, since this test
        assumes equal variances.

    Examples
    --------
    >>> r = pooled_t(10, 5.2, 1.1, 12, 4.3, 1.3)
    >>> r.df
    20.0
    >>> round(r.statistic, 3)
    1.731
    """
    null_difference, alternative, alpha = _common(null_difference, alternative, alpha)
    n1, mean1, sd1, n2, mean2, sd2 = _two_sample_inputs(n1, mean1, sd1, n2, mean2, sd2)
    pooled_var, df = _pooled_variance(n1, sd1, n2, sd2)
    se = math.sqrt(pooled_var * (1.0 / n1 + 1.0 / n2))
    estimate = mean1 - mean2
    ratio, ratio_p = _variance_ratio(sd1, n1, sd2, n2)
    notes = ["pooled variance: assumes both groups share one variance"]
    if not math.isnan(ratio_p) and ratio_p < 0.05:
        notes.append("the variances look unequal (F-test p < 0.05); Welch's t may suit better")
    return _finish("pooled", alternative, alpha, null_difference, estimate, se, df,
                   _mean_effect(estimate, math.sqrt(pooled_var), df), notes,
                   ("se", se, df), ratio, ratio_p)


def welch_t(n1, mean1, sd1, n2, mean2, sd2, *, null_difference=0.0,
            alternative="two-sided", alpha=0.05) -> FixedSampleResult:
    """Welch's two-sample t test with Welch–Satterthwaite degrees of freedom.

    Parameters
    ----------
    n1, n2 : int
        Group sizes (at least 2 each).
    mean1, mean2 : float
        Group means.
    sd1, sd2 : float
        Sample standard deviations (``n − 1`` denominator).
    null_difference : float, default 0
        Hypothesised difference ``δ0`` of group 1 − group 2.
    alternative : {"two-sided", "greater", "less"}
        ``"greater"`` tests group 1 − group 2 > δ0.
    alpha : float, default 0.05
        Significance level.

    Returns
    -------
    FixedSampleResult
        ``df`` is the (non-integer) Welch–Satterthwaite value; the effect size
        is Hedges' g on the pooled SD; the variance ratio is reported too.

    Examples
    --------
    >>> r = welch_t(30, 10.0, 2.0, 25, 9.0, 3.0)
    >>> round(r.statistic, 3), round(r.df, 2)
    (1.424, 40.48)
    """
    null_difference, alternative, alpha = _common(null_difference, alternative, alpha)
    n1, mean1, sd1, n2, mean2, sd2 = _two_sample_inputs(n1, mean1, sd1, n2, mean2, sd2)
    a, b = sd1 ** 2 / n1, sd2 ** 2 / n2
    se = math.sqrt(a + b)
    if a + b > 0:
        df = (a + b) ** 2 / (a * a / (n1 - 1) + b * b / (n2 - 1))
    else:
        df = math.nan
    estimate = mean1 - mean2
    pooled_var, pooled_df = _pooled_variance(n1, sd1, n2, sd2)
    ratio, ratio_p = _variance_ratio(sd1, n1, sd2, n2)
    notes = ["unequal variances allowed (Welch–Satterthwaite degrees of freedom)"]
    return _finish("welch", alternative, alpha, null_difference, estimate, se, df,
                   _mean_effect(estimate, math.sqrt(pooled_var), pooled_df), notes,
                   ("se", se, df), ratio, ratio_p)


def paired_t(n, mean_difference, sd_difference, *, null_difference=0.0,
             alternative="two-sided", alpha=0.05) -> FixedSampleResult:
    """Paired t test on per-pair differences (df = n − 1).

    Parameters
    ----------
    n : int
        Number of pairs (at least 2).
    mean_difference : float
        Mean of the per-pair differences (group 1 − group 2).
    sd_difference : float
        Sample standard deviation of the differences.
    null_difference : float, default 0
        Hypothesised mean difference ``δ0``.
    alternative : {"two-sided", "greater", "less"}
        ``"greater"`` tests a mean difference above δ0.
    alpha : float, default 0.05
        Significance level.

    Returns
    -------
    FixedSampleResult
        The effect size is standardised on the differences: ``d_z`` = mean
        difference / SD of differences, and ``hedges_g_z`` = ``d_z`` times the
        exact small-sample factor on ``n − 1`` df. (It is not comparable with a
        two-sample g, which standardises on the SD of the values themselves.)

    Examples
    --------
    >>> r = paired_t(12, 1.5, 2.0)
    >>> round(r.statistic, 3), r.df
    (2.598, 11.0)
    """
    null_difference, alternative, alpha = _common(null_difference, alternative, alpha)
    n = _check_count(n, "n", 2)
    mean_difference = _check_finite(mean_difference, "mean_difference")
    sd_difference = _check_sd(sd_difference, "sd_difference")
    se = sd_difference / math.sqrt(n)
    df = n - 1
    dz = _standardise(mean_difference, sd_difference)
    effect = {"d_z": float(dz), "hedges_g_z": float(dz * _hedges_correction(df))}
    notes = ["paired: one-sample t on per-pair differences (group 1 − group 2)"]
    if sd_difference == 0:
        notes.append("the per-pair differences are all equal")
    return _finish("paired", alternative, alpha, null_difference, mean_difference, se, df,
                   effect, notes, ("se", se, df))


# ----------------------------------------------------------------------------
# proportions


def _wilson(x, n, z):
    p = x / n
    denom = 1.0 + z * z / n
    centre = (p + z * z / (2.0 * n)) / denom
    half = z * math.sqrt(p * (1.0 - p) / n + z * z / (4.0 * n * n)) / denom
    return max(0.0, centre - half), min(1.0, centre + half)


def _newcombe_difference(x1, n1, x2, n2, z):
    """Newcombe (1998) method 10: hybrid of the two Wilson score intervals."""
    p1, p2 = x1 / n1, x2 / n2
    l1, u1 = _wilson(x1, n1, z)
    l2, u2 = _wilson(x2, n2, z)
    d = p1 - p2
    low = d - math.sqrt((p1 - l1) ** 2 + (u2 - p2) ** 2)
    high = d + math.sqrt((u1 - p1) ** 2 + (p2 - l2) ** 2)
    # The bounds lie in [-1, 1] exactly; rounding can put an end a hair outside (0 vs 1 successes).
    return max(-1.0, low), min(1.0, high)


def _wald_difference(x1, n1, x2, n2, z):
    p1, p2 = x1 / n1, x2 / n2
    se = math.sqrt(p1 * (1 - p1) / n1 + p2 * (1 - p2) / n2)
    d = p1 - p2
    return d - z * se, d + z * se


def two_proportions(n1, successes1, n2, successes2, *, null_difference=0.0,
                    alternative="two-sided", alpha=0.05, interval="newcombe") -> FixedSampleResult:
    """Two-proportion z test for a difference in rates.

    The statistic is the score statistic of Farrington & Manning (1990): the
    standard error is evaluated at the maximum-likelihood rates restricted to
    ``p1 − p2 = δ0`` (:mod:`monitor.stats.proportions`). When
    ``null_difference`` is 0 that is the pooled rate, the classic pooled z; for a
    margin it keeps the error rate where an unpooled Wald test does not (at
    rates 0.02 vs 0.05, margin −0.03, 100 per group the Wald test's one-sided
    size is about twice its level).

    Parameters
    ----------
    n1, n2 : int
        Group sizes (at least 1 each).
    successes1, successes2 : int
        Number of successes (0 ≤ successes ≤ n).
    null_difference : float, default 0
        Hypothesised rate difference ``δ0`` (group 1 − group 2), in (−1, 1).
    alternative : {"two-sided", "greater", "less"}
        ``"greater"`` tests rate 1 − rate 2 > δ0.
    alpha : float, default 0.05
        Significance level.
    interval : {"newcombe", "wald", "score"}
        Confidence interval for the difference: Newcombe's hybrid score
        interval (method 10 of Newcombe 1998, no continuity correction), the
        Wald interval, or the inverted Farrington–Manning score test.

    Returns
    -------
    FixedSampleResult
        ``df`` is ``None``; effect sizes are ``risk_difference`` and
        ``risk_ratio`` (rate 1 / rate 2; ``inf`` when only rate 2 is zero,
        ``nan`` when both are).

    Examples
    --------
    >>> r = two_proportions(200, 130, 180, 99)
    >>> round(r.estimate, 3), round(r.statistic, 3)
    (0.1, 1.989)
    """
    null_difference, alternative, alpha = _common(null_difference, alternative, alpha)
    if not (-1.0 < null_difference < 1.0):
        raise InvalidArgumentError(
            f"null_difference must be in (-1, 1) for rates; got {null_difference!r}")
    if interval not in _ACCEPTED_INTERVALS:
        raise InvalidArgumentError(
            f"interval must be one of {', '.join(_ACCEPTED_INTERVALS)}; got {interval!r}")
    n1 = _check_count(n1, "n1", 1)
    n2 = _check_count(n2, "n2", 1)
    x1 = _check_count(successes1, "successes1", 0)
    x2 = _check_count(successes2, "successes2", 0)
    if x1 > n1:
        raise InvalidArgumentError(f"successes1 must not exceed n1 ({n1}); got {successes1!r}")
    if x2 > n2:
        raise InvalidArgumentError(f"successes2 must not exceed n2 ({n2}); got {successes2!r}")
    p1, p2 = x1 / n1, x2 / n2
    estimate = p1 - p2
    if null_difference == 0.0:
        pooled = (x1 + x2) / (n1 + n2)
        se = math.sqrt(pooled * (1.0 - pooled) * (1.0 / n1 + 1.0 / n2))
        notes = ["pooled standard error (null difference 0: one shared rate under the null)"]
    else:
        # Farrington–Manning score: the variance at the rates restricted to the margin.
        _, se = _score_statistic(x1, n1, x2, n2, null_difference)
        notes = ["score standard error at the rates restricted to the null difference "
                 "(Farrington–Manning)"]
    notes.append(f"{interval} interval for the difference in rates")
    if p2 > 0:
        ratio = p1 / p2
    else:
        ratio = math.inf if p1 > 0 else math.nan
    effect = {"risk_difference": float(estimate), "risk_ratio": float(ratio)}
    return _finish("proportions", alternative, alpha, null_difference, estimate, se, None,
                   effect, notes, (interval, x1, n1, x2, n2))


# ----------------------------------------------------------------------------
# from running summaries


def _successes(summary, name):
    total = summary.total
    k = round(total)
    if not math.isfinite(total) or abs(total - k) > 1e-6 * max(1.0, abs(total)):
        raise InvalidArgumentError(f"{name} must summarise 0/1 values; its total is {total!r}")
    return int(k)


def from_summaries(method, s1, s2, *, sigmas=None, null_difference=0.0,
                   alternative="two-sided", alpha=0.05, interval="newcombe") -> FixedSampleResult:
    """Run one of the tests on running :class:`~monitor.stats.summaries.MomentSummary` objects.

    Parameters
    ----------
    method : {"z", "pooled", "welch", "paired", "proportions"}
        Which test.
    s1 : MomentSummary
        Group 1 (for ``"paired"``: the per-pair differences group 1 − group 2;
        for ``"proportions"``: a summary of 0/1 values).
    s2 : MomentSummary or None
        Group 2; must be ``None`` for ``"paired"``.
    sigmas : tuple of two floats, optional
        Known population standard deviations, required for ``"z"``.
    null_difference, alternative, alpha
        As for the individual tests.
    interval : {"newcombe", "wald"}
        Interval for ``"proportions"`` (ignored otherwise).

    Returns
    -------
    FixedSampleResult

    Examples
    --------
    >>> from monitor.stats.summaries import MomentSummary
    >>> a = MomentSummary.from_values([12.1, 11.8, 12.6, 13.0, 12.2])
    >>> b = MomentSummary.from_values([11.2, 11.9, 11.5, 11.0, 11.6])
    >>> r = from_summaries("welch", a, b)
    >>> round(r.estimate, 2), r.reject
    (0.9, True)
    """
    if method not in METHODS:
        raise InvalidArgumentError(f"method must be one of {', '.join(METHODS)}; got {method!r}")
    common = {"null_difference": null_difference, "alternative": alternative, "alpha": alpha}
    if not isinstance(s1, MomentSummary):
        raise InvalidArgumentError(f"s1 must be a MomentSummary; got {s1!r}")
    if method == "paired":
        if s2 is not None:
            raise InvalidArgumentError(
                f"s2 must be None for paired (s1 summarises the differences); got {s2!r}")
        sd = s1.sd if s1.n >= 2 else math.nan
        if s1.n < 2:
            raise InvalidArgumentError(f"s1.n must be at least 2 for paired; got {s1.n!r}")
        return paired_t(s1.n, s1.mean, sd, **common)
    if not isinstance(s2, MomentSummary):
        raise InvalidArgumentError(f"s2 must be a MomentSummary; got {s2!r}")
    if method == "proportions":
        return two_proportions(s1.n, _successes(s1, "s1"), s2.n, _successes(s2, "s2"),
                               interval=interval, **common)
    if method == "z":
        if sigmas is None or len(sigmas) != 2:
            raise InvalidArgumentError(f"sigmas must be two known standard deviations for z; got {sigmas!r}")
        if s1.n < 1 or s2.n < 1:
            raise InvalidArgumentError(f"both groups need at least one value for z; got n1={s1.n}, n2={s2.n}")
        return z_test(s1.n, s1.mean, sigmas[0], s2.n, s2.mean, sigmas[1], **common)
    for name, s in (("s1", s1), ("s2", s2)):
        if s.n < 2:
            raise InvalidArgumentError(f"{name}.n must be at least 2 for {method} (a variance is needed); got {s.n!r}")
    test = pooled_t if method == "pooled" else welch_t
    return test(s1.n, s1.mean, s1.sd, s2.n, s2.mean, s2.sd, **common)
