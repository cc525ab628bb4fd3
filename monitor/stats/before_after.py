"""Before and after: the difference in differences of two groups around a change.

Operations comparisons are seldom randomised. A change goes live at one site
(group 1) at a known moment, another site (group 2) carries on as before, and
the two sites never ran at the same level: different buildings, stock and
staff. The plain difference ``group 1 − group 2`` after the start is then the
old gap plus the change. Subtracting the gap measured in a baseline period
just before the start leaves the change itself::

    DiD = (m1_after − m2_after) − (m1_baseline − m2_baseline)

where each ``m`` is the event-weighted mean (or 0/1 rate) of a group in a
period. It is exactly the interaction coefficient of an ordinary least-squares
fit of the value on an intercept, a group-1 indicator, an after-the-start
indicator and their product (the model is saturated in the four cells, so the
fitted values are the four cell means).

Two cluster-robust standard errors over calendar days are computed, both from
cells alone:

* **CR1**: the sandwich with the small-sample factor ``G/(G−1) · (N−1)/(N−K)``,
  ``K = 4``, exactly as statsmodels computes ``cov_type="cluster"`` for the
  interaction coefficient, with t on ``G − 1`` degrees of freedom.
* **CR2** (Bell & McCaffrey 2002): each cluster's residuals scaled by
  ``(I − H_cc)^{-1/2}`` before the sandwich, with the Bell–McCaffrey degrees of
  freedom (Imbens & Kolesár 2016, working model of independent events). The
  model is saturated in the four (group, period) cells, so ``H_cc`` is
  block-diagonal with blocks ``J/N_j``: a cell's residual sum in a cluster
  is scaled by ``1/√(1 − n_cj/N_j)``, and the degrees of freedom reduce to sums
  over clusters.

CR1 pools all clusters into one factor ``G/(G−1)``, but the DiD centres the
baseline and the after period separately: with ``A`` days after the start its
after-period part is too small by about ``(A−1)/A``, and t on ``G − 1`` takes
the baseline's days as if they measured the after period's spread too. With
ten days after a 28-day baseline a single CR1 test at 0.05 rejects about 0.066
of the time when nothing changed; CR2 with Bell–McCaffrey degrees of freedom
holds 0.05 (``tests/benchmarks/before_after.py``). CR2 is the default; CR1 is
kept for comparison with other software. :func:`degrees_of_freedom` is the one
place the degrees of freedom are chosen.

A key seen by both groups (the same day at both sites) is one cluster; so is a
day that holds events from before and after the start (the day the change went
live). Keys given per group (``"hollin:2026-03-04"``) make each group's days
its own clusters. As for clustered comparisons, everything comes from
per-(group, period, key) cells: the count and the sums ``Σ(x − c)`` (and
``Σ(x − c)²`` for the event-level spread), because the score of the
interaction in a cluster depends on the data only through the residual sums of
that cluster's cells.

Also here: the baseline gap with its interval, the relative effect (the change
as a percentage of what group 1 would have shown without it), and planning
(information of the DiD for a baseline length, day-to-day spread and events per
day; planned days after the start for a difference worth detecting).

Pure module: numpy and scipy only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, fields

import numpy as np
from scipy import optimize, stats

from ..errors import InvalidArgumentError
from ._checks import check_alternative, finite, open_unit, whole
from .clustered import ClusteredResult, _as_array, _key_codes, cluster_robust_difference
from .fixed import IntervalRecord, _critical_values, _interval, _p_value
from .planning import _quantiles, _stop_profile, design_boundaries, sequential_drift
from .spending import parse_spending

__all__ = [
    "BeforeAfterResult",
    "BeforeAfterPlan",
    "difference_in_differences",
    "degrees_of_freedom",
    "day_variance",
    "information",
    "information_fraction",
    "planned_degrees_of_freedom",
    "plan_before_after",
    "PARAMETERS",
    "VARIANCES",
    "TOO_FEW_CLUSTERS_NOTE",
    "DEGENERATE_NOTE",
    "ONE_CLUSTER_CELL_NOTE",
]

# Coefficients of the OLS whose interaction is the DiD (K in the CR1 factor).
PARAMETERS = 4
TOO_FEW_CLUSTERS_NOTE = "degenerate: fewer than two clusters (no degrees of freedom)"
DEGENERATE_NOTE = "degenerate: the cluster-level residuals are all zero"
ONE_CLUSTER_CELL_NOTE = ("degenerate: a (group, period) cell has all its events in one cluster "
                         "(CR2 needs at least two)")
RELATIVE_NAME = "relative effect, delta method"
_PERIODS = ("baseline", "after")


VARIANCES = ("cr2", "cr1")


def degrees_of_freedom(variance, clusters, bell_mccaffrey):
    """Degrees of freedom of the t reference: the one place this choice is made.

    ``"cr1"``: ``clusters − 1``, the convention of cluster-robust inference
    (statsmodels' ``df_resid_inference``). ``"cr2"``: the Bell–McCaffrey
    degrees of freedom of the contrast (computed from the cells). Arrays in,
    arrays out (the simulation calls it for many comparisons at once).

    Examples
    --------
    >>> degrees_of_freedom("cr1", 38, 15.9)
    37.0
    >>> degrees_of_freedom("cr2", 38, 15.9)
    15.9
    """
    if variance == "cr1":
        out = np.asarray(clusters, dtype=float) - 1.0
    else:
        out = np.asarray(bell_mccaffrey, dtype=float)
    return float(out) if out.ndim == 0 else out


# ----------------------------------------------------------------------------- result


@dataclass(frozen=True)
class BeforeAfterResult(IntervalRecord):
    """Difference in differences with a day-clustered (CR1) standard error.

    Attributes
    ----------
    estimate : float
        ``(m1_after − m2_after) − (m1_baseline − m2_baseline)``.
    standard_error : float
        Cluster-robust standard error of the kind asked for (``variance``);
        nan with fewer than two clusters.
    statistic : float
        ``(estimate − null_difference) / standard_error``.
    df : float
        :func:`degrees_of_freedom`: Bell–McCaffrey for CR2, clusters − 1 for CR1.
    variance : str
        ``"cr2"`` or ``"cr1"``.
    cr1_standard_error : float
        The CR1 standard error whatever ``variance`` is (statsmodels' figure).
    p_value : float
        Student t on ``df`` for the alternative.
    ci : tuple
        ``(low, high)`` at ``1 − alpha``; ``None`` for the open end of a one-sided bound.
    critical_values : tuple
        t critical values, as for the fixed-sample tests.
    reject : bool
        ``p_value <= alpha`` (never when degenerate).
    clusters : int
        Distinct keys with events (a day seen by both groups, or on both sides
        of the start, counts once).
    clusters_baseline, clusters_after : int
        Keys with baseline events and with events after the start.
    n : dict
        Events per cell: ``{"group1_baseline", "group2_baseline", "group1_after", "group2_after"}``.
    means : dict
        Means (rates) per cell, same keys.
    baseline_gap : ClusteredResult
        ``m1_baseline − m2_baseline`` as a clustered comparison of the baseline
        cells alone (CR1, t on baseline clusters − 1), at the same alpha.
    after_gap : ClusteredResult
        ``m1_after − m2_after`` likewise: what a comparison that ignores the
        baseline would report.
    relative : dict or None
        The change as a percentage of group 1's expected value without it,
        ``100 · DiD / (m1_baseline + m2_after − m2_baseline)``, with a delta-method
        standard error and interval (``{"name", "percent", "standard_error", "ci",
        "counterfactual"}``); ``None`` unless asked for.
    notes : tuple of str
    alternative, alpha, null_difference
    Examples
    --------
    >>> r = difference_in_differences([0, 1, 0, 1, 0, 1, 0, 1], [0, 0, 0, 0, 1, 1, 1, 1],
    ...                               ["d1", "d1", "d2", "d2", "d3", "d3", "d4", "d4"],
    ...                               [5, 5, 5, 5, 5, 5, 5, 5],
    ...                               [55.0, 45.0, 52.0, 49.0, 41.0, 47.0, 43.0, 52.0], 0.0)
    >>> low, high = r.confidence_interval(0.5)
    >>> r.ci[0] < low < r.estimate < high < r.ci[1]
    True
    """

    estimate: float
    standard_error: float
    statistic: float
    df: float
    p_value: float
    ci: tuple
    critical_values: tuple
    reject: bool
    clusters: int
    clusters_baseline: int
    clusters_after: int
    n: dict
    means: dict
    baseline_gap: ClusteredResult
    after_gap: ClusteredResult
    relative: dict | None
    notes: tuple
    variance: str = "cr2"
    cr1_standard_error: float = math.nan
    alternative: str = "two-sided"
    alpha: float = 0.05
    null_difference: float = 0.0
    _interval: tuple = field(default=(), repr=False, compare=False)
    _open_when_empty = True  # a one-sided bound with no data keeps its open end


# ----------------------------------------------------------------------------- cells


def _cell_index(groups, periods, count):
    g = np.asarray(groups).ravel()
    p = np.asarray(periods).ravel()
    if g.size != count or p.size != count:
        raise InvalidArgumentError(
            f"groups and periods must have one entry per cell ({count}); got {g.size} and {p.size}")
    for values, name, meaning in ((g, "groups", "0 (group 1) or 1 (group 2)"),
                                  (p, "periods", "0 (baseline) or 1 (after the start)")):
        bad = ~np.isin(values, (0, 1))
        if np.any(bad):
            raise InvalidArgumentError(f"{name} must be {meaning}; got {values[bad][0]!r}")
    return g.astype(np.int64), p.astype(np.int64)


def _cell_name(g, p):
    return f"group{g + 1}_{_PERIODS[p]}"


def difference_in_differences(groups, periods, keys, n, sum_dev, shift, *, sum_dev2=None,
                              null_difference=0.0, alternative="two-sided", alpha=0.05,
                              variance="cr2", relative=False) -> BeforeAfterResult:
    """Difference in differences of means (or 0/1 rates) with a day-clustered standard error.

    Parameters
    ----------
    groups : array_like of int
        Per cell: 0 for group 1 (the group that changed), 1 for group 2.
    periods : array_like of int
        Per cell: 0 for the baseline, 1 for after the start.
    keys : sequence of hashable
        Per cell: the cluster key (a calendar day). Equal keys are one cluster,
        whatever their group or period.
    n : array_like of int
        Per cell: events.
    sum_dev : array_like of float
        Per cell: ``Σ(x − c)``.
    shift : float or array_like of float
        The shift ``c`` (one for all cells, or one per cell).
    sum_dev2 : array_like of float, optional
        Per cell: ``Σ(x − c)²``; gives the two gaps their event-level spread
        and design effect.
    null_difference : float, default 0
        Hypothesised change ``δ0``.
    alternative : {"two-sided", "greater", "less"}
        ``"greater"`` tests DiD > δ0.
    alpha : float, default 0.05
    variance : {"cr2", "cr1"}, default "cr2"
        CR2 with Bell–McCaffrey degrees of freedom, or CR1 with t on clusters − 1
        (statsmodels' cluster-robust OLS).
    relative : bool, default False
        Also give the relative effect (percentage of group 1's expected value
        without the change; delta method).

    Returns
    -------
    BeforeAfterResult
        With fewer than two clusters (or at most four events), or for CR2 a
        (group, period) cell whose events all fall in one cluster, the standard
        error, statistic and p-value are nan and a note says why; zero
        cluster-level residuals give an infinite or nan statistic as for the
        clustered comparison. ``reject`` is ``False`` in both cases.

    Raises
    ------
    InvalidArgumentError
        A group or period other than 0/1, counts that are negative or
        fractional, arrays of unequal length, non-finite sums, an unknown
        ``variance``, or one of the four (group, period) cells without events.

    Examples
    --------
    Two baseline days and two days after the start; group 1 ran 1.2 above
    group 2 before and 0.4 below after, so the change is −1.6:

    >>> r = difference_in_differences([0, 1, 0, 1, 0, 1, 0, 1], [0, 0, 0, 0, 1, 1, 1, 1],
    ...                               ["d1", "d1", "d2", "d2", "d3", "d3", "d4", "d4"],
    ...                               [5, 5, 5, 5, 5, 5, 5, 5],
    ...                               [55.0, 45.0, 52.0, 50.0, 41.0, 47.0, 49.0, 47.0], 0.0)
    >>> round(r.baseline_gap.estimate, 6), round(r.after_gap.estimate, 6), round(r.estimate, 6)
    (1.2, -0.4, -1.6)
    >>> r.clusters, r.variance
    (4, 'cr2')
    """
    null_difference = finite(null_difference, "null_difference")
    alternative = check_alternative(alternative)
    alpha = open_unit(alpha, "alpha")
    if variance not in VARIANCES:
        raise InvalidArgumentError(f"variance must be one of {', '.join(VARIANCES)}; got {variance!r}")
    counts = _as_array(n, "n")
    count = counts.size
    if count == 0:
        raise InvalidArgumentError("cells must hold at least one cell; got none")
    g, p = _cell_index(groups, periods, count)
    if np.any(counts < 0) or np.any(counts != np.floor(counts)):
        bad = counts[(counts < 0) | (counts != np.floor(counts))][0]
        raise InvalidArgumentError(f"n must be whole counts, not negative; got {bad!r}")
    dev = _as_array(sum_dev, "sum_dev", count)
    shifts = (np.broadcast_to(_as_array(shift, "shift"), (count,)) if np.ndim(shift) == 0
              else _as_array(shift, "shift", count))
    dev2 = None if sum_dev2 is None else _as_array(sum_dev2, "sum_dev2", count)
    codes, _ = _key_codes(keys, count)
    cell = 2 * p + g      # 0: g1 baseline, 1: g2 baseline, 2: g1 after, 3: g2 after

    sizes = np.bincount(cell, weights=counts, minlength=4)
    for j in range(4):
        if sizes[j] == 0:
            raise InvalidArgumentError(
                f"{_cell_name(j % 2, j // 2).replace('_', ' ')} has no events "
                f"(n is 0 in every such cell)")
    means = np.empty(4)
    for j in range(4):
        sel = (cell == j) & (counts > 0)
        ref = float(shifts[sel][0])
        means[j] = ref + float(np.sum(dev[sel] + counts[sel] * (shifts[sel] - ref))) / sizes[j]
    estimate = float((means[2] - means[3]) - (means[0] - means[1]))

    # Per (cluster, cell): events and residual sums Σ(x − m_j) (cells split over rows add up).
    occupied = counts > 0
    present = np.bincount(codes[occupied], minlength=int(codes.max()) + 1) > 0
    keep = np.cumsum(present) - 1                 # cluster codes with events, renumbered
    clusters = int(present.sum())
    events = np.zeros((clusters, 4))
    residuals = np.zeros((clusters, 4))
    np.add.at(events, (keep[codes[occupied]], cell[occupied]), counts[occupied])
    np.add.at(residuals, (keep[codes[occupied]], cell[occupied]),
              (dev - counts * (means[cell] - shifts))[occupied])
    in_base = (events[:, 0] + events[:, 1]) > 0
    in_after = (events[:, 2] + events[:, 3]) > 0
    contrast = np.array([-1.0, 1.0, 1.0, -1.0])
    cr1_cov, cr2_cov, alone = _covariances(events, residuals, sizes)
    cr1_variance = float(contrast @ cr1_cov @ contrast)
    cov = cr2_cov if variance == "cr2" else cr1_cov
    var = float(contrast @ cov @ contrast)
    df = degrees_of_freedom(variance, clusters, _bell_mccaffrey(events, sizes, contrast))

    notes = [f"difference in differences with a {variance.upper()} standard error over {clusters} "
             f"clusters ({int(in_base.sum())} with baseline events, {int(in_after.sum())} after the "
             f"start); t on {df:.4g} degrees of freedom"
             + (" (Bell–McCaffrey)" if variance == "cr2" else "")]
    both = int((in_base & in_after).sum())
    if both:
        notes.append(f"{both} cluster(s) hold events from before and after the start and count once")

    gaps = []
    for period in (0, 1):
        sel = p == period
        gaps.append(cluster_robust_difference(
            g[sel], codes[sel], counts[sel], dev[sel], shifts[sel],
            sum_dev2=None if dev2 is None else dev2[sel], alternative="two-sided", alpha=alpha))
    rel = _relative(means, cov, events, sizes, variance, clusters, alpha, alternative) if relative else None

    common = dict(clusters=clusters, clusters_baseline=int(in_base.sum()),
                  clusters_after=int(in_after.sum()),
                  n={_cell_name(j % 2, j // 2): int(sizes[j]) for j in range(4)},
                  means={_cell_name(j % 2, j // 2): float(means[j]) for j in range(4)},
                  baseline_gap=gaps[0], after_gap=gaps[1], relative=rel, variance=variance,
                  cr1_standard_error=math.sqrt(cr1_variance) if cr1_variance >= 0 else math.nan,
                  alternative=alternative, alpha=alpha, null_difference=null_difference)
    if not math.isfinite(var) or not math.isfinite(df):
        notes.append(ONE_CLUSTER_CELL_NOTE if (clusters >= 2 and alone and variance == "cr2")
                     else TOO_FEW_CLUSTERS_NOTE)
        nan_ci = {"two-sided": (math.nan, math.nan), "greater": (math.nan, None),
                  "less": (None, math.nan)}[alternative]
        crit = (math.nan, math.nan) if alternative == "two-sided" else (math.nan,)
        return BeforeAfterResult(estimate, math.nan, math.nan, df, math.nan, nan_ci, crit, False,
                                 notes=tuple(notes), **common)
    se = math.sqrt(max(var, 0.0))
    excess = estimate - null_difference
    if se == 0.0:
        notes.append(DEGENERATE_NOTE)
        statistic = math.copysign(math.inf, excess) if excess != 0 else math.nan
        if math.isnan(statistic):
            p_value = math.nan
        elif alternative == "two-sided":
            p_value = 0.0
        else:
            p_value = 0.0 if (statistic > 0) == (alternative == "greater") else 1.0
    else:
        statistic = excess / se
        p_value = _p_value(statistic, df, alternative)
    spec = ("se", se, df)
    return BeforeAfterResult(
        estimate, se, float(statistic), df, float(p_value), _interval(spec, estimate, alternative, alpha),
        tuple(float(c) for c in _critical_values(df, alternative, alpha)),
        bool(se > 0.0 and p_value <= alpha), notes=tuple(notes), _interval=spec, **common)


def _covariances(events, residuals, sizes):
    """CR1 and CR2 covariances of the four cell means from per-(cluster, cell) sums.

    Returns ``(cr1, cr2, alone)``; ``alone`` says whether some cell has all its
    events in one cluster (its CR2 adjustment ``1/√(1 − n_cj/N_j)`` is then
    infinite and the CR2 covariance nan).
    """
    clusters = events.shape[0]
    total = float(sizes.sum())
    scores = residuals / sizes
    if clusters >= 2 and total > PARAMETERS:
        factor = clusters / (clusters - 1.0) * (total - 1.0) / (total - PARAMETERS)
        cr1 = factor * (scores.T @ scores)
    else:
        cr1 = np.full((4, 4), math.nan)
    share = events / sizes
    alone = bool(np.any(share >= 1.0))
    if clusters >= 2 and not alone:
        adjusted = scores / np.sqrt(1.0 - share)
        cr2 = adjusted.T @ adjusted
    else:
        cr2 = np.full((4, 4), math.nan)
    return cr1, cr2, alone


def _bell_mccaffrey(events, sizes, contrast):
    """Bell–McCaffrey degrees of freedom of ``contrast · cell means`` under CR2.

    ``(tr M)² / tr(M²)`` with ``M = G'G`` (Imbens & Kolesár 2016, working model
    of independent events with equal variance). For the saturated cell model
    ``M = diag(D) − Σ_j u_j u_jᵀ / N_j`` over clusters, with
    ``κ_cj = w_j / (N_j √(1 − n_cj/N_j))``, ``u_jc = n_cj κ_cj`` and
    ``D_c = Σ_j n_cj κ_cj²``, so both traces are sums over clusters.
    """
    share = events / sizes
    if events.shape[0] < 2 or np.any(share >= 1.0):
        return math.nan
    kappa = contrast / (sizes * np.sqrt(1.0 - share))
    u = events * kappa                            # (clusters, 4)
    d = np.sum(events * kappa * kappa, axis=1)
    trace = float(np.sum(d) - np.sum(np.sum(u * u, axis=0) / sizes))
    gram = u.T @ u                                # u_j · u_l
    trace_sq = float(np.sum(d * d) - 2.0 * np.sum((d[:, None] * u * u) / sizes)
                     + np.sum(gram * gram / np.outer(sizes, sizes)))
    if trace_sq <= 0 or not math.isfinite(trace_sq):
        return math.nan
    return trace * trace / trace_sq


def _relative(means, covariance, events, sizes, variance, clusters, alpha, alternative) -> dict:
    """``100 · DiD / counterfactual`` with its delta-method standard error and interval.

    The counterfactual is group 1's expected value after the start had nothing
    changed: its baseline level moved by group 2's change,
    ``m1_baseline + (m2_after − m2_baseline)``. With ``R = m1_after / C − 1``,
    the gradient over ``(m1_b, m2_b, m1_a, m2_a)`` is
    ``(−m1_a/C², m1_a/C², 1/C, −m1_a/C²)``; the t reference has the degrees of
    freedom of that contrast.
    """
    counterfactual = float(means[0] + means[3] - means[1])
    out = {"name": RELATIVE_NAME, "counterfactual": counterfactual, "percent": math.nan,
           "standard_error": math.nan, "ci": [math.nan, math.nan]}
    if counterfactual == 0.0 or not math.isfinite(counterfactual):
        out["note"] = "group 1's expected value without the change is 0: no relative effect"
        return out
    c = counterfactual
    ratio = means[2] / c - 1.0
    gradient = np.array([-means[2] / c ** 2, means[2] / c ** 2, 1.0 / c, -means[2] / c ** 2])
    var = float(gradient @ covariance @ gradient)
    se = math.sqrt(max(var, 0.0)) if math.isfinite(var) else math.nan
    df = degrees_of_freedom(variance, clusters, _bell_mccaffrey(events, sizes, gradient))
    out["percent"] = 100.0 * float(ratio)
    out["standard_error"] = 100.0 * se
    out["df"] = df
    if math.isfinite(se) and math.isfinite(df):
        low, high = _interval(("se", se, df), float(ratio), alternative, alpha)
        out["ci"] = [None if low is None else 100.0 * low, None if high is None else 100.0 * high]
    return out


# ----------------------------------------------------------------------------- after a stop


# ----------------------------------------------------------------------------- planning


def information(after_days, baseline_days, gap_variance):
    """Information (1 / variance) of the DiD with ``after_days`` and ``baseline_days`` of data.

    With the same events per day in both periods, each day's gap between the
    groups has variance ``gap_variance`` (see :func:`day_variance`), and the DiD
    is the mean gap after the start minus the mean gap in the baseline::

        Var(DiD) = gap_variance · (1/after_days + 1/baseline_days)

    Examples
    --------
    >>> information(10, 10, 2.0)
    2.5
    """
    a = np.asarray(after_days, dtype=float)
    with np.errstate(divide="ignore"):
        out = 1.0 / (gap_variance * (1.0 / a + 1.0 / float(baseline_days)))
    return float(out) if out.ndim == 0 else out


def information_fraction(after_days, planned_after_days, baseline_days):
    """Fraction of the planned information reached after ``after_days`` (vectorised).

    ``(1/A_max + 1/B) / (1/A + 1/B)``: the information of the DiD with ``A``
    days after the start over its information at the planned ``A_max`` days,
    both with ``B`` baseline days. It depends on the counts only, never on a
    variance estimate, so it rises with the data and does not wobble. A very
    long baseline gives ``A / A_max``, the event fraction of a comparison
    without one. ``after_days`` may be fractional (events so far over planned
    events per day).

    Examples
    --------
    >>> round(information_fraction(10, 20, 28), 4)
    0.6316
    >>> round(information_fraction(10, 20, 1e12), 4)
    0.5
    """
    a = np.asarray(after_days, dtype=float)
    b = float(baseline_days)
    with np.errstate(divide="ignore"):
        out = (1.0 / planned_after_days + 1.0 / b) / (1.0 / a + 1.0 / b)
    out = np.where(a > 0, out, 0.0)
    return float(out) if out.ndim == 0 else out


def day_variance(sd, events_per_day, day_sd=0.0):
    """Variance of one day's gap between the groups' means.

    ``2 · (day_sd² + sd² / events_per_day)``: each group's day mean moves by
    its own day effect (standard deviation ``day_sd``, the day-to-day spread
    not shared with the other group; a shock both groups share cancels in the
    gap) plus the event noise averaged over ``events_per_day`` events.

    Examples
    --------
    >>> day_variance(50.0, 100, 5.0)
    100.0
    """
    return 2.0 * (day_sd ** 2 + sd ** 2 / events_per_day)


@dataclass(frozen=True)
class BeforeAfterPlan:
    """A planned before/after comparison.

    Attributes
    ----------
    metric : str
        ``"mean"`` or ``"proportion"``.
    difference : float
        The change worth detecting (DiD units).
    sd : float
        Event-level standard deviation (``√(rate·(1 − rate))`` for rates).
    rate : float or None
        Group 1's planned rate (proportions only).
    day_sd : float
        Each group's own day-to-day spread of its daily mean.
    events_per_day : float
        Events per group per day, the same before and after the start.
    baseline_days : float
        Length of the baseline in days.
    alpha, power, alternative, spending, futility
        The sequential design.
    looks : int or None
        Equally spaced looks assumed, or None for daily looks.
    first_look_day : int or None
        First day after the start that may decide (daily looks).
    day_variance : float
        Variance of one day's gap (:func:`day_variance`).
    fixed_information, max_information : float
        Information a single analysis needs, and the sequential design's
        maximum ``(drift / difference)²``.
    inflation : float
        ``max_information / fixed_information`` (the sequential design's
        inflation times ``t_inflation``).
    t_inflation : float
        The part of the inflation that allows for the t reference (1 without it).
    planned_df : float
        Bell–McCaffrey degrees of freedom at the planned days.
    drift, fixed_drift : float
        Expected z at fraction 1 under the planned change; the single-analysis value.
    minimum_baseline_days : float
        Below this baseline length the planned information cannot be reached
        however long the comparison runs.
    fixed_after_days : float
        Days after the start a single analysis needs.
    after_days_exact, after_days : float, int
        Planned days after the start (exact and rounded up).
    planned_per_group : int
        ``ceil(after_days_exact · events_per_day)``: events per group after
        the start at the planned maximum.
    fractions : tuple
        Information fractions of the planned looks.
    efficacy_z : tuple
        Efficacy boundaries there.
    expected_days_null, expected_days_alternative : float
        Expected days after the start at the decision when nothing changed and
        when the planned change happened.
    """

    metric: str
    difference: float
    sd: float
    rate: float | None
    day_sd: float
    events_per_day: float
    baseline_days: float
    alpha: float
    power: float
    alternative: str
    spending: str
    futility: bool
    looks: int | None
    first_look_day: int | None
    day_variance: float
    fixed_information: float
    max_information: float
    inflation: float
    t_inflation: float
    planned_df: float
    drift: float
    fixed_drift: float
    minimum_baseline_days: float
    fixed_after_days: float
    after_days_exact: float
    after_days: int
    planned_per_group: int
    fractions: tuple
    efficacy_z: tuple
    expected_days_null: float
    expected_days_alternative: float

    def to_dict(self) -> dict:
        """Plain JSON-ready dict (an infinite boundary becomes None)."""
        out = {f.name: getattr(self, f.name) for f in fields(self)}
        out["fractions"] = list(self.fractions)
        out["efficacy_z"] = [z if math.isfinite(z) else None for z in self.efficacy_z]
        return out


def _days_needed(info, baseline_days, variance):
    """Days after the start at which the DiD reaches ``info`` (inf when the baseline is too short)."""
    allowed = 1.0 / (info * variance) - 1.0 / baseline_days
    return 1.0 / allowed if allowed > 0 else math.inf


def plan_before_after(difference, sd=None, *, rate=None, day_sd=0.0, events_per_day, baseline_days,
                      alpha=0.05, power=0.8, alternative="two-sided", spending="obrien-fleming",
                      looks=5, first_look_day=None, futility=False, t_reference=True) -> BeforeAfterPlan:
    """Plan a before/after comparison: days after the start for a change worth detecting.

    The DiD's information after ``A`` days is ``1 / (v · (1/A + 1/B))`` with
    ``v`` the variance of one day's gap (:func:`day_variance`) and ``B`` the
    baseline days. A single analysis needs information
    ``((z_{1−α(/2)} + z_{1−β}) / δ)²``; the sequential design needs that times
    its inflation (:func:`monitor.stats.planning.sequential_drift`), and the
    planned days are where the information reaches it.

    Parameters
    ----------
    difference : float
        Change worth detecting (non-zero; positive for ``"greater"``, negative for ``"less"``).
    sd : float, optional
        Event-level standard deviation (means). Give ``sd`` or ``rate``.
    rate : float, optional
        Group 1's planned rate for a 0/1 metric; ``sd = √(rate(1 − rate))``.
    day_sd : float, default 0
        Each group's own day-to-day spread of its daily mean (not shared with
        the other group).
    events_per_day : float
        Events per group per day.
    baseline_days : float
        Length of the baseline (days).
    alpha, power, alternative, spending, futility
        As :func:`monitor.stats.planning.plan_mean`.
    looks : int, default 5
        Equally spaced looks the plan assumes; ignored with ``first_look_day``.
    first_look_day : int, optional
        Plan for one look a day from this day after the start to the planned
        last day (the usual live schedule); the planned days and the
        boundaries' fractions are solved together.
    t_reference : bool, default True
        The look refers its statistic to t on the Bell–McCaffrey degrees of
        freedom, which costs power against the normal reference planning
        assumes. Widen the planned information by
        ``((t_ν(1−α/2) + t_ν(1−β)) / (z_{1−α/2} + z_{1−β}))²`` at the degrees of
        freedom ``ν`` of the planned days (:func:`planned_degrees_of_freedom`).

    Returns
    -------
    BeforeAfterPlan

    Raises
    ------
    InvalidArgumentError
        Bad inputs, or a baseline too short for the planned information (the
        message gives the shortest baseline that can reach it).

    Examples
    --------
    >>> plan = plan_before_after(-10.0, 50.0, day_sd=5.0, events_per_day=400, baseline_days=28,
    ...                          looks=1)
    >>> round(plan.day_variance, 2), plan.after_days
    (62.5, 8)
    """
    difference = finite(difference, "difference")
    alpha = open_unit(alpha, "alpha")
    power = finite(power, "power")
    if not alpha < power < 1:
        raise InvalidArgumentError(f"power must be in (alpha, 1) = ({alpha}, 1); got {power!r}")
    check_alternative(alternative)
    if difference == 0:
        raise InvalidArgumentError(f"difference must not be zero; got {difference!r}")
    if alternative == "greater" and difference < 0 or alternative == "less" and difference > 0:
        raise InvalidArgumentError(
            f"difference must be {'positive' if alternative == 'greater' else 'negative'} for "
            f"alternative {alternative!r}; got {difference!r}")
    if (sd is None) == (rate is None):
        raise InvalidArgumentError(f"give sd (means) or rate (0/1 outcomes), not both or neither; "
                                   f"got sd={sd!r}, rate={rate!r}")
    if rate is not None:
        rate = open_unit(rate, "rate")
        sd = math.sqrt(rate * (1.0 - rate))
    sd = finite(sd, "sd")
    if sd <= 0:
        raise InvalidArgumentError(f"sd must be positive; got {sd!r}")
    day_sd = finite(day_sd, "day_sd")
    if day_sd < 0:
        raise InvalidArgumentError(f"day_sd must not be negative; got {day_sd!r}")
    events_per_day = finite(events_per_day, "events_per_day")
    if events_per_day <= 0:
        raise InvalidArgumentError(f"events_per_day must be positive; got {events_per_day!r}")
    baseline_days = finite(baseline_days, "baseline_days")
    if baseline_days <= 0:
        raise InvalidArgumentError(f"baseline_days must be positive; got {baseline_days!r}")
    if first_look_day is not None:
        first_look_day = whole(first_look_day, "first_look_day", 1)
        looks = None
    else:
        looks = whole(looks, "looks", 1)
    spec = getattr(parse_spending(spending), "spec", spending)
    futility = bool(futility)

    variance = day_variance(sd, events_per_day, day_sd)
    z_alpha, z_beta = _quantiles(alpha, power, alternative)
    fixed_drift = z_alpha + z_beta
    fixed_info = (fixed_drift / difference) ** 2
    fixed_days = _days_needed(fixed_info, baseline_days, variance)

    drifts: dict = {}

    def fractions_at(days):
        if looks is not None:
            return [k / looks for k in range(1, looks + 1)]
        return _daily_fractions(first_look_day, max(1, math.ceil(days - 1e-9)), days, baseline_days)

    def t_inflation(days):
        if not t_reference or not math.isfinite(days):
            return 1.0
        nu = planned_degrees_of_freedom(max(days, 1.0 + 1e-6), baseline_days)
        return float(((stats.t.isf(alpha / 2 if alternative == "two-sided" else alpha, nu)
                       + stats.t.isf(1.0 - power, nu)) / fixed_drift) ** 2)

    def days_for(drift):
        """Days at which the information reaches the design's, widened at those days' df."""
        base = (drift / difference) ** 2
        plain = _days_needed(base, baseline_days, variance)
        if not t_reference or not math.isfinite(plain):
            return plain

        def excess(a):
            # Fewer days mean fewer degrees of freedom and more days needed: one crossing.
            return min(_days_needed(base * t_inflation(a), baseline_days, variance), 1e12) - a

        low, high = 1.0 + 1e-6, max(2.0 * plain, 4.0)
        while excess(high) > 0 and high < 1e9:
            high *= 2.0
        if excess(low) <= 0:
            return low
        return float(optimize.brentq(excess, low, high, xtol=1e-10, rtol=1e-12))

    # The fractions of daily looks depend on the planned days, and the days on the
    # design's inflation (which depends on the fractions). A few rounds settle both.
    days, fractions, drift = fixed_days, [1.0], fixed_drift
    for _ in range(60):
        fractions = fractions_at(days)
        key = tuple(fractions)
        if key not in drifts:
            drifts[key] = sequential_drift(fractions, alpha, spec, alternative, power, futility=futility)
        drift = drifts[key]
        new_days = days_for(drift)
        settled = not math.isfinite(new_days) or abs(new_days - days) <= 1e-7 * days
        days = new_days
        if settled or looks is not None:
            break
    if not math.isfinite(days):
        raise InvalidArgumentError(
            f"baseline_days {baseline_days:g} is too short to detect a change of {difference:g}: the "
            f"baseline alone leaves too much uncertainty about the old gap; it needs more than "
            f"{(drift / difference) ** 2 * variance:.1f} days (or a larger difference, more events "
            f"per day, less day-to-day spread)")
    widening = t_inflation(days)
    info = (drift / difference) ** 2 * widening
    fractions = fractions_at(days)
    upper, lower, _ = design_boundaries(fractions, alpha, spec, alternative, futility=futility,
                                        beta=1 - power, drift=drift)
    null_up, null_low = _stop_profile(fractions, upper, lower, 0.0)
    alt_up, alt_low = _stop_profile(fractions, upper, lower, drift)

    def expected_days(up, low):
        at = [_days_needed(f * info, baseline_days, variance) for f in fractions]
        stop = up[:-1] + low[:-1]
        return float(np.sum(np.asarray(at[:-1]) * stop) + at[-1] * max(0.0, 1.0 - np.sum(stop)))

    return BeforeAfterPlan(
        metric="mean" if rate is None else "proportion", difference=difference, sd=sd, rate=rate,
        day_sd=day_sd, events_per_day=events_per_day, baseline_days=baseline_days, alpha=alpha,
        power=power, alternative=alternative, spending=spec, futility=futility, looks=looks,
        first_look_day=first_look_day, day_variance=float(variance),
        fixed_information=float(fixed_info), max_information=float(info),
        inflation=float(info / fixed_info), t_inflation=float(widening),
        planned_df=float(planned_degrees_of_freedom(days, baseline_days)) if math.isfinite(days) else math.nan, drift=float(drift), fixed_drift=float(fixed_drift),
        minimum_baseline_days=float(info * variance), fixed_after_days=float(fixed_days),
        after_days_exact=float(days), after_days=int(math.ceil(days - 1e-9)),
        planned_per_group=int(math.ceil(days * events_per_day - 1e-9)),
        fractions=tuple(float(f) for f in fractions), efficacy_z=tuple(float(z) for z in upper),
        expected_days_null=expected_days(null_up, null_low),
        expected_days_alternative=expected_days(alt_up, alt_low))


def planned_degrees_of_freedom(after_days, baseline_days):
    """Bell–McCaffrey degrees of freedom of the DiD with equal days (vectorised).

    With the same events on every day, the Bell–McCaffrey degrees of freedom
    of the DiD reduce to Satterthwaite's across the two periods::

        (1/A + 1/B)² / (1/(A²(A − 1)) + 1/(B²(B − 1)))

    Examples
    --------
    >>> round(planned_degrees_of_freedom(14, 14), 6)
    26.0
    """
    a = np.asarray(after_days, dtype=float)
    b = float(baseline_days)
    out = (1 / a + 1 / b) ** 2 / (1 / (a * a * (a - 1)) + 1 / (b * b * (b - 1)))
    return float(out) if out.ndim == 0 else out


def _daily_fractions(first_look_day, last_day, planned_days, baseline_days):
    """Fractions of daily looks from ``first_look_day`` to ``last_day`` (the last at least 1)."""
    days = np.arange(min(first_look_day, last_day), last_day + 1, dtype=float)
    fractions = information_fraction(days, planned_days, baseline_days)
    fractions = np.atleast_1d(fractions)
    # The last look may pass the plan (whole days): its fraction above 1 is kept, so the
    # boundary's correlations match the information the looks really have.
    fractions[-1] = max(1.0, float(fractions[-1]))
    return [float(f) for f in fractions]
