"""Inference that respects the repeated looks of a group-sequential comparison.

Three things are needed around a sequential design:

* during monitoring, a **repeated confidence interval** at every look whose
  coverage holds simultaneously over all looks (Jennison & Turnbull 2000, ch. 9);
* after a stop, a **stagewise-ordering p-value** (Jennison & Turnbull 2000,
  ch. 8): the outcomes more extreme than the one observed are those that
  crossed the efficacy boundary at an earlier look, plus those that reached the
  stop look and went further than the observed z;
* a **median-unbiased estimate** of the difference, the drift at which the
  stagewise p-value is one half, with the matching adjusted confidence interval.

All probabilities come from the boundary engine's
:func:`monitor.stats.boundaries.crossing_probabilities` (recursive numerical
integration with Brownian-motion covariance), so they are exact up to its
quadrature error.

Conventions shared by the functions below:

* looks are numbered from 1, as in :class:`monitor.stats.boundaries.LookBoundary`;
* ``upper_z`` holds the efficacy boundaries as positive z values, exactly as the
  boundary engine reports them (for ``"less"`` a look rejects when Z <= -z);
* a non-binding futility boundary is ignored: the continuation region before the
  stop look is "below the efficacy boundary" (between the two efficacy
  boundaries for two-sided designs). This is the usual convention and keeps the
  p-value valid whether or not futility stops were followed.

Pure module: numpy and scipy only.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
from scipy import optimize, special

from ._checks import check_alternative, finite, open_unit
from .boundaries import crossing_probabilities
from .sequential_t import _check_df, t_critical, t_crossing_probabilities
from ..errors import InvalidArgumentError

__all__ = [
    "SequentialEstimate",
    "repeated_confidence_interval",
    "stagewise_p_value",
    "median_unbiased_estimate",
    "AdjustedInference",
    "StagewisePivot",
    "adjusted_inference",
]

# Below the observed z at the stop look the lower limit only has to sit under the
# upper one: the first-crossing probability of the upper limit at the last look
# does not depend on it.
_LAST_LOOK_LOWER_GAP = 12.0


def _check_looks(fractions, upper_z, stop_look):
    try:
        t = np.asarray(fractions, dtype=float).ravel()
        b = np.asarray(upper_z, dtype=float).ravel()
    except (TypeError, ValueError):
        raise InvalidArgumentError(
            f"fractions and upper_z must be sequences of numbers; got {fractions!r}, {upper_z!r}"
        ) from None
    if t.size == 0:
        raise InvalidArgumentError("fractions must hold at least one look; got an empty sequence")
    if b.size != t.size:
        raise InvalidArgumentError(
            f"upper_z must have one boundary per look ({t.size}); got {b.size}: {upper_z!r}"
        )
    if not np.all(np.isfinite(t)) or np.any(t <= 0) or np.any(np.diff(t) <= 0):
        raise InvalidArgumentError(
            f"fractions must be positive, finite and strictly increasing; got {fractions!r}"
        )
    if np.any(np.isnan(b)) or np.any(b <= 0):
        raise InvalidArgumentError(f"upper_z must hold positive boundaries; got {upper_z!r}")
    if isinstance(stop_look, bool) or not isinstance(stop_look, (int, np.integer)):
        raise InvalidArgumentError(f"stop_look must be a look number (int); got {stop_look!r}")
    if not 1 <= stop_look <= t.size:
        raise InvalidArgumentError(
            f"stop_look must be between 1 and the number of looks ({t.size}); got {stop_look!r}"
        )
    return t[:stop_look], b[:stop_look]


def _at_or_beyond(t, b, z, drift, two_sided):
    """Probability, at drift ``drift``, of an outcome at least as high as (stop look, z).

    The stagewise ordering: crossing the upper efficacy boundary at an earlier
    look beats any outcome at the stop look; at the stop look a higher z is more
    extreme. For two-sided designs the paths that left through the lower
    boundary earlier are below every outcome at the stop look.
    """
    upper = np.append(b[:-1], z)
    lower = None
    if two_sided:
        lower = np.append(-b[:-1], z - _LAST_LOOK_LOWER_GAP)
    up, _ = crossing_probabilities(t, upper, lower, drift=drift)
    return float(min(1.0, max(0.0, float(np.sum(up)))))


def repeated_confidence_interval(estimate, standard_error, boundary_z, alternative="two-sided"):
    """Repeated confidence interval for the difference at one look.

    ``estimate ± boundary_z · standard_error`` (Jennison & Turnbull 2000, ch. 9):
    with the design's efficacy boundary in place of the fixed-sample quantile,
    the intervals of all looks cover the true difference simultaneously with
    probability at least ``1 − alpha``, so one may be read at any look.

    Parameters
    ----------
    estimate : float
        Estimated difference (group 1 − group 2) at the look.
    standard_error : float
        Its standard error. A zero, nan or infinite standard error (degenerate
        data) gives ``(nan, nan)``.
    boundary_z : float
        The look's efficacy boundary on the z scale (``LookBoundary.z``, positive).
        For t-based looks pass the t quantile at the boundary's nominal level
        instead, ``scipy.stats.t.isf(nominal_p, df)``, the nominal-level approach.
    alternative : {"two-sided", "greater", "less"}
        One-sided designs give a one-sided interval; the open end is ``None``.

    Returns
    -------
    tuple
        ``(low, high)``; ``None`` marks an open end.

    Examples
    --------
    >>> repeated_confidence_interval(1.5, 0.5, 2.0)
    (0.5, 2.5)
    >>> repeated_confidence_interval(1.5, 0.5, 2.0, "greater")
    (0.5, None)
    """
    check_alternative(alternative)
    estimate = float(estimate)
    z = float(boundary_z)
    if math.isnan(z) or z <= 0:
        raise InvalidArgumentError(f"boundary_z must be positive; got {boundary_z!r}")
    se = float(standard_error)
    if se < 0:
        raise InvalidArgumentError(f"standard_error must not be negative; got {standard_error!r}")
    if not (math.isfinite(se) and se > 0 and math.isfinite(estimate)):
        nan = float("nan")
        return (
            nan if alternative != "less" else None,
            nan if alternative != "greater" else None,
        )
    half = z * se
    low = estimate - half if alternative != "less" else None
    high = estimate + half if alternative != "greater" else None
    return (low, high)


def stagewise_p_value(fractions, upper_z, stop_look, z_observed, alternative="two-sided"):
    """P-value after a sequential comparison stopped, in the stagewise ordering.

    The probability, when the groups do not differ, of crossing the efficacy
    boundary at a look before ``stop_look`` or of reaching ``stop_look`` with a
    z at least as extreme as the one observed (Jennison & Turnbull 2000, ch. 8).
    Two-sided: twice the one-sided value in the direction of the observed z,
    capped at 1. A non-binding futility boundary is ignored. At a single look
    this is the fixed-sample p-value.

    Parameters
    ----------
    fractions : sequence of float
        Information fractions of the looks taken, at least up to the stop look.
    upper_z : sequence of float
        Efficacy boundaries (positive z) at those looks; the stop look's own
        boundary is not used.
    stop_look : int
        Number (from 1) of the look at which the comparison stopped.
    z_observed : float
        The z statistic at the stop look (group 1 − group 2).
    alternative : {"two-sided", "greater", "less"}
        The design's alternative.

    Returns
    -------
    float

    Examples
    --------
    >>> round(stagewise_p_value([1.0], [1.96], 1, 2.5), 6)  # single look: 2(1 − Φ(2.5))
    0.012419
    >>> p = stagewise_p_value([0.5, 1.0], [2.797, 1.977], 2, 2.1)
    >>> 0.03 < p < 0.05
    True
    """
    check_alternative(alternative)
    t, b = _check_looks(fractions, upper_z, stop_look)
    z = finite(z_observed, "z_observed")
    if alternative == "greater":
        return _at_or_beyond(t, b, z, 0.0, two_sided=False)
    if alternative == "less":
        return _at_or_beyond(t, b, -z, 0.0, two_sided=False)
    return min(1.0, 2.0 * _at_or_beyond(t, b, abs(z), 0.0, two_sided=True))


@dataclass(frozen=True)
class SequentialEstimate:
    """Estimate of the difference after a sequential comparison stopped.

    Attributes
    ----------
    estimate : float
        Median-unbiased estimate of the difference (group 1 − group 2).
    ci : tuple
        Stagewise-ordering confidence interval at level ``1 − alpha``
        (two-sided designs: ``alpha/2`` in each tail; one-sided designs: one
        bound, the open end ``None``).
    alpha : float
    p_value : float
        The stagewise p-value of the design's alternative.
    naive_estimate : float
        ``z / sqrt(information at the stop look)``, the ordinary estimate, which
        is biased away from zero after an early stop.
    stop_look : int
    """

    estimate: float
    ci: tuple
    alpha: float
    p_value: float
    naive_estimate: float
    stop_look: int

    def __float__(self):
        return float(self.estimate)

    def to_dict(self):
        out = asdict(self)
        out["ci"] = list(self.ci)
        return out


def _solve_drift(t, b, z, target, two_sided):
    """Drift at which the stagewise upper-tail probability equals ``target``."""

    def gap(drift):
        return _at_or_beyond(t, b, z, drift, two_sided) - target

    # Centre on the drift that makes z the expected value at the stop look and
    # widen on the scale of the first look, where a drift shows the least.
    centre = z / math.sqrt(t[-1])
    step = 4.0 / math.sqrt(t[0])
    low, high = centre - step, centre + step
    for _ in range(60):
        g_low, g_high = gap(low), gap(high)
        if g_low <= 0 <= g_high:
            break
        if g_low > 0:
            low -= step
        if g_high < 0:
            high += step
        step *= 1.5
    else:  # pragma: no cover - the probability is monotone from 0 to 1 in the drift
        raise InvalidArgumentError(f"could not bracket the drift for z_observed={z!r}")
    return optimize.brentq(gap, low, high, xtol=1e-10, rtol=1e-12)


def median_unbiased_estimate(
    fractions, upper_z, stop_look, z_observed, information, alternative="two-sided", *, alpha=0.05
):
    """Median-unbiased estimate of the difference after a sequential stop.

    The drift at which the stagewise-ordering probability of an outcome at
    least as extreme as the observed one is one half (Jennison & Turnbull 2000,
    ch. 8), converted to the difference scale. The confidence limits are the
    drifts at which that probability is ``alpha/2`` and ``1 − alpha/2``
    (one-sided designs: ``alpha``, one limit only). A non-binding futility
    boundary is ignored. At a single look the estimate is ``z/sqrt(information)``
    and the interval the fixed-sample Wald interval.

    Parameters
    ----------
    fractions, upper_z, stop_look, z_observed, alternative
        As for :func:`stagewise_p_value`.
    information : float
        Statistical information at fraction 1, ``I_max`` (the reciprocal of the
        squared standard error of the difference the full plan would give). The
        drift is ``difference · sqrt(I_max)`` and the z at look k has mean
        ``difference · sqrt(I_max · t_k)``. From a look: ``I_max = 1 / (SE² · t)``
        with the standard error and fraction ``t`` at that look.
    alpha : float, default 0.05
        One minus the confidence level of ``ci``.

    Returns
    -------
    SequentialEstimate

    Examples
    --------
    >>> r = median_unbiased_estimate([1.0], [1.96], 1, 2.5, information=4.0)
    >>> round(r.estimate, 6), round(r.ci[0], 4), round(r.ci[1], 4)
    (1.25, 0.27, 2.23)
    >>> late = median_unbiased_estimate([0.5, 1.0], [2.797, 1.977], 2, 2.5, information=4.0)
    >>> round(late.estimate, 3), late.naive_estimate, round(late.p_value, 4)
    (1.235, 1.25, 0.0159)
    """
    check_alternative(alternative)
    t, b = _check_looks(fractions, upper_z, stop_look)
    z = finite(z_observed, "z_observed")
    info = finite(information, "information")
    if info <= 0:
        raise InvalidArgumentError(f"information must be positive; got {information!r}")
    alpha = open_unit(alpha, "alpha")

    two_sided = alternative == "two-sided"
    # "less" designs are solved in the mirrored frame where the boundary is upper.
    sign = -1.0 if alternative == "less" else 1.0
    z_frame = sign * z
    scale = 1.0 / math.sqrt(info)

    def drift_at(target):
        return _solve_drift(t, b, z_frame, target, two_sided)

    estimate = sign * drift_at(0.5) * scale
    tail = alpha / 2 if two_sided else alpha
    # Higher drift makes "at least as extreme" likelier: the 1 − tail point is the upper limit.
    lower_limit = drift_at(tail) * scale
    upper_limit = drift_at(1.0 - tail) * scale
    if two_sided:
        ci = (lower_limit, upper_limit)
    elif alternative == "greater":
        ci = (lower_limit, None)
    else:
        ci = (None, -lower_limit)
    p_value = stagewise_p_value(fractions, upper_z, stop_look, z, alternative)
    naive = z / math.sqrt(info * t[-1])
    return SequentialEstimate(
        estimate=float(estimate),
        ci=tuple(None if c is None else float(c) for c in ci),
        alpha=alpha,
        p_value=p_value,
        naive_estimate=float(naive),
        stop_look=int(stop_look),
    )



# ----------------------------------------------------------------------------
# Adjusted inference on the estimate's own scale

#: Chi-square nodes of the sequential t law when the pivot is evaluated: each
#: figure needs a few dozen evaluations, and the quantiles it solves for are
#: read to far less than the boundaries' own accuracy.
PIVOT_T_NODES = 16
PIVOT_T_PER_SD = 2.0


@dataclass(frozen=True)
class AdjustedInference:
    """Inference after a sequential stop, on the scale of the difference itself.

    Attributes
    ----------
    estimate : float
        Median-unbiased estimate of the difference (group 1 − group 2), in the
        metric's units: never the difference minus ``null_difference``.
    ci : tuple
        Adjusted confidence interval at ``1 − alpha`` (one bound for one-sided
        designs, the open end ``None``).
    p_value : float
        Stagewise-ordering p-value of ``null_difference`` for the design's alternative.
    naive_estimate : float
        The estimate the stop look reported.
    null_difference : float
    stop_look : int
    alpha : float
    df : float or None
        Degrees of freedom at the stop look (None for z statistics).
    """

    estimate: float
    ci: tuple
    p_value: float
    naive_estimate: float
    null_difference: float
    stop_look: int
    alpha: float
    df: float | None

    def to_dict(self):
        out = asdict(self)
        out["ci"] = list(self.ci)
        return out


class StagewisePivot:
    """``G(δ)``: chance, if the true difference were ``δ``, of an outcome at least as high as the one observed.

    The stagewise ordering (Jennison & Turnbull 2000, ch. 8): crossing the
    upper efficacy boundary at an earlier look beats any outcome at the stop
    look; at the stop look a larger statistic is higher. Under a true
    difference ``δ`` the statistics ``T_k(δ) = (estimate_k − δ)/SE_k`` follow
    the null law of the design (z, or the sequential t law of
    :mod:`monitor.stats.sequential_t` at the looks' df), and the recorded
    boundaries on ``T_k(δ0)`` become ``c_k − (δ − δ0)/SE_k`` on them. The
    standard error at earlier looks is taken as ``SE_K·√(t_K/t_k)`` (information
    proportional to the fraction, the stop look's variance estimate). ``G``
    rises with ``δ``; the median-unbiased estimate is ``G⁻¹(1/2)`` and the
    adjusted interval ``[G⁻¹(α/2), G⁻¹(1 − α/2)]``. At a single look this is
    the fixed-sample estimate and interval (t on the look's df for t tests).

    Parameters are as for :func:`adjusted_inference`; ``alternative`` "less"
    is handled by the caller in the mirrored frame.
    """

    def __init__(self, fractions, boundaries_z, stop_look, statistic_at, standard_error, null_difference,
                 two_sided, dfs=None):
        t, b = _check_looks(fractions, boundaries_z, stop_look)
        self._t = t
        self._root = np.sqrt(t / t[-1])
        self._se = float(standard_error)
        self._null = float(null_difference)
        self._two_sided = two_sided
        self._statistic_at = statistic_at
        self._dfs = None
        if dfs is None:
            self._bounds = b
        else:
            dfs = list(dfs)[:stop_look]
            if len(dfs) != stop_look:
                raise InvalidArgumentError(f"dfs must give one value per look up to the stop look; got {dfs!r}")
            model, previous = [], None
            for df in dfs:
                previous = _check_df(df, previous)
                model.append(previous)
            self._dfs = model
            self._look_df = float(dfs[-1])
            self._bounds = np.array([t_critical(float(special.ndtr(-z)), d) for z, d in zip(b, model)])

    def _observed(self, delta):
        """The stop look's statistic for hypothesis ``delta``, on the scale the law uses."""
        value = float(self._statistic_at(delta))
        if self._dfs is None or not math.isfinite(value):
            return value
        # A t on the look's own df, carried to the model's (whole-number) df by its tail.
        tail = float(special.stdtr(self._look_df, -value))
        if tail <= 0.0:
            return math.inf
        if tail >= 1.0:
            return -math.inf
        return t_critical(tail, self._dfs[-1]) if tail < 0.5 else -t_critical(1.0 - tail, self._dfs[-1])

    def __call__(self, delta):
        u = (float(delta) - self._null) / self._se
        shift = u * self._root
        upper = self._bounds - shift
        lower = (-self._bounds - shift) if self._two_sided else np.full(self._t.size, -np.inf)
        last = self._observed(delta)
        upper[-1] = last
        lower[-1] = -np.inf
        upper = np.where(np.isnan(upper), np.inf, upper)
        if self._t.size == 1:
            # One look: the fixed-sample law exactly (Student t on the look's own df, or normal).
            value = float(self._statistic_at(delta))
            if self._dfs is None:
                return float(special.ndtr(-value))
            return float(special.stdtr(self._look_df, -value))
        if self._dfs is None:
            up, _ = crossing_probabilities(self._t, upper, lower)
        else:
            up, _ = t_crossing_probabilities(self._t, self._dfs, upper, lower, nodes=PIVOT_T_NODES,
                                             per_sd=PIVOT_T_PER_SD)
        return float(min(1.0, max(0.0, float(np.sum(up)))))


def _solve_pivot(pivot, target, centre, scale, step=3.0):
    """``δ`` with ``pivot(δ) = target`` (the pivot rises with ``δ``), searched from ``centre``."""
    step = step * scale
    low, high = centre - step, centre + step
    g_low, g_high = pivot(low) - target, pivot(high) - target
    for _ in range(60):
        if g_low <= 0 <= g_high:
            break
        step *= 1.6
        if g_low > 0:
            high, g_high = low, g_low
            low = centre - step
            g_low = pivot(low) - target
        else:
            low, g_low = high, g_high
            high = centre + step
            g_high = pivot(high) - target
    else:  # pragma: no cover - G runs from 0 to 1
        raise InvalidArgumentError(f"could not bracket the difference at which G = {target!r}")
    # A ten-thousandth of a standard error is far below what the figures are read to.
    return float(optimize.brentq(lambda d: pivot(d) - target, low, high, xtol=1e-4 * scale, rtol=1e-10))


def adjusted_inference(fractions, boundaries_z, stop_look, estimate, standard_error, *, null_difference=0.0,
                       alternative="two-sided", alpha=0.05, dfs=None, statistic_at=None):
    """Stagewise p-value, median-unbiased estimate and adjusted interval on the difference's own scale.

    Everything is computed from the stop look's estimate, its standard error
    and ``null_difference`` (δ0): the reported estimate is a difference in the
    metric's units, never the difference minus δ0. t-based looks (``dfs``
    given) use the sequential t law at the looks' degrees of freedom, as the
    boundaries themselves do (:mod:`monitor.stats.sequential_t`); see
    :class:`StagewisePivot` for the ordering and the pivot.

    Parameters
    ----------
    fractions : sequence of float
        Information fractions of the testing looks, at least up to the stop look.
    boundaries_z : sequence of float
        Their recorded efficacy boundaries on the z scale (``LookBoundary.z``;
        for t designs the z with the calibrated nominal level).
    stop_look : int
        The testing look (from 1) at which the comparison stopped.
    estimate, standard_error : float
        The stop look's difference and its standard error.
    null_difference : float
        δ0 of the design.
    alternative : {"two-sided", "greater", "less"}
    alpha : float
        One minus the level of the interval.
    dfs : sequence of float, optional
        Degrees of freedom of each look's t statistic; None for z statistics.
    statistic_at : callable, optional
        ``statistic_at(δ)``: the stop look's statistic for the hypothesis δ
        (default ``(estimate − δ)/standard_error``). Rates pass the score
        statistic, so that a single look gives the score interval.

    Returns
    -------
    AdjustedInference

    Examples
    --------
    One final look at five pairs: the ordinary t estimate and interval.

    >>> r = adjusted_inference([1.0], [1.959964], 1, 1.0, 0.1873, dfs=[4])
    >>> round(r.estimate, 3), round(r.ci[0], 2), round(r.ci[1], 2)
    (1.0, 0.48, 1.52)

    A margin δ0 = 5 leaves the estimate on the difference's scale:

    >>> r = adjusted_inference([0.5, 1.0], [2.797, 1.977], 2, 7.6, 1.0, null_difference=5.0)
    >>> 7.0 < r.estimate < 7.7
    True
    """
    check_alternative(alternative)
    estimate = finite(estimate, "estimate")
    se = finite(standard_error, "standard_error")
    if se <= 0:
        raise InvalidArgumentError(f"standard_error must be positive; got {standard_error!r}")
    null = finite(null_difference, "null_difference")
    alpha = open_unit(alpha, "alpha")
    if statistic_at is None:
        def statistic_at(delta):
            return (estimate - delta) / se
    # "less" designs are solved in the mirrored frame, where the boundary is an upper one.
    sign = -1.0 if alternative == "less" else 1.0

    def mirrored(delta):
        return sign * float(statistic_at(sign * delta))

    pivot = StagewisePivot(fractions, boundaries_z, stop_look, mirrored, se, sign * null,
                           alternative == "two-sided", dfs)
    tail = alpha / 2 if alternative == "two-sided" else alpha
    targets = (0.5, tail, 1.0 - tail)
    if dfs is None:
        guesses, step = (sign * estimate,) * 3, 3.0
    else:
        # The z law's answers are close: start the (slower) t law's search there.
        z_pivot = StagewisePivot(fractions, boundaries_z, stop_look, mirrored, se, sign * null,
                                 alternative == "two-sided", None)
        guesses = tuple(_solve_pivot(z_pivot, g, sign * estimate, se) for g in targets)
        step = 0.25
    median = sign * _solve_pivot(pivot, 0.5, guesses[0], se, step)
    low = _solve_pivot(pivot, tail, guesses[1], se, step)
    if alternative == "two-sided":
        high = _solve_pivot(pivot, 1.0 - tail, guesses[2], se, step)
        ci = (low, high)
    elif alternative == "greater":
        ci = (low, None)
    else:
        ci = (None, -low)
    at_null = pivot(sign * null)
    if alternative == "two-sided":
        p = min(1.0, 2.0 * min(at_null, 1.0 - at_null))
    else:
        p = at_null
    df = None if dfs is None else float(list(dfs)[stop_look - 1])
    return AdjustedInference(
        estimate=float(median), ci=tuple(None if c is None else float(c) for c in ci), p_value=float(p),
        naive_estimate=float(estimate), null_difference=null, stop_look=int(stop_look), alpha=alpha, df=df)
