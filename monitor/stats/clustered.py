"""Cluster-robust two-group differences for events that share shifts, crews or days.

Operational events are rarely independent: events on one day share the weather,
the staffing and the backlog, so the spread between days is larger than the
spread between events suggests. An event-level standard error is then too
small, and a test built on it raises false alarms. Here the unit of
independence is the cluster (a day, a shift, a crew).

The difference ``mean1 − mean2`` (or ``rate1 − rate2`` for 0/1 values) gets the
CR1 sandwich standard error: exactly the standard error of the group
coefficient in an ordinary least-squares fit of the value on an intercept and a
group-1 indicator with errors clustered on the key, including the usual
small-sample factor ``G/(G−1) · (N−1)/(N−K)`` with ``K = 2``. The reference
distribution is Student t on ``G − 1`` degrees of freedom.

Everything is computed from per-(group, cluster) cells: the count and the sum
of ``x − c`` for a shift ``c`` (plus ``Σ(x − c)²`` when the event-level
comparison and the design effect are wanted). No event rows are needed,
because the score of the group coefficient in a cluster depends on the data
only through the residual sums of the two groups' cells in that cluster.

A cluster key present in both groups is one cluster (the same day seen by both
sites); a key present in one group only is a cluster of that group alone.

Pure module: numpy and scipy only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, fields
from typing import Mapping

import numpy as np

from ..errors import InvalidArgumentError
from ._checks import check_alternative as _check_alternative
from ._checks import finite as _check_finite
from ._checks import open_unit as _check_probability
from .fixed import IntervalRecord, _critical_values, _interval, _p_value
from scipy import optimize, stats

__all__ = [
    "ClusteredResult",
    "ClusterCells",
    "DesignEffect",
    "ClusteredSize",
    "cluster_robust_difference",
    "design_effect",
    "design_effect_from_icc",
    "inflate_for_clustering",
    "clusters_needed",
    "t_noncentrality",
    "t_inflation",
    "planning_df",
    "ClusterPlan",
    "plan_clusters",
    "DEGENERATE_CLUSTER_NOTE",
    "TOO_FEW_CLUSTERS_NOTE",
    "ONE_CLUSTER_NOTE",
    "VARIANCES",
    "MIN_CLUSTERS_PER_GROUP",
    "ClusterCounts",
    "cluster_counts",
    "MIN_CLUSTERS_FOR_DESIGN_EFFECT",
    "NOT_YET_MEASURABLE",
]

DEGENERATE_CLUSTER_NOTE = "degenerate: the cluster-level residuals are all zero"
ONE_CLUSTER_NOTE = ("degenerate: a group has only one cluster of its own, so its between-cluster "
                    "variance cannot be estimated")
VARIANCES = ("cr1", "cr2", "auto")
#: Clusters of its own each group needs before a comparison with clusters nested in
#: groups decides: CR2 is undefined with one, and with two its Bell–McCaffrey df are
#: about one (a t on one df makes every interval nearly unbounded).
MIN_CLUSTERS_PER_GROUP = 3
#: Days (clusters) with events before a measured design effect is reported: the CR1
#: variance over G days rests on G − 1 degrees of freedom, so from two days the ratio
#: is noise (its relative standard error is about √(2/(G − 1)): 1.4 at 2 days, 0.47 at 10).
MIN_CLUSTERS_FOR_DESIGN_EFFECT = 10
NOT_YET_MEASURABLE = "not yet measurable"
# Variance below this share of the estimate's scale is zero up to rounding.
_ZERO_VARIANCE = 1e-24
TOO_FEW_CLUSTERS_NOTE = "degenerate: fewer than two clusters (no degrees of freedom)"


@dataclass(frozen=True)
class ClusteredResult(IntervalRecord):
    """Difference between two groups with a cluster-robust (CR1 or CR2) standard error.

    Attributes
    ----------
    estimate : float
        ``mean1 − mean2`` (event-weighted means).
    standard_error : float
        Cluster-robust standard error of the estimate (see ``variance_method``).
    statistic : float
        ``(estimate − null_difference) / standard_error``.
    df : float
        ``clusters − 1`` for CR1; the Bell–McCaffrey degrees of freedom for CR2.
    p_value : float
        From Student t on ``df`` for the alternative.
    ci : tuple
        ``(low, high)`` at level ``1 − alpha``; ``None`` for the open end of a
        one-sided bound.
    clusters : int
        Number of distinct clusters ``G`` with at least one event (a key seen
        in both groups counts once). The look's minimum-clusters rule reads it.
    n1, n2 : int
        Events in group 1 and group 2.
    naive_standard_error : float or None
        Event-level Welch-type standard error ``√(s1²/n1 + s2²/n2)``; ``None``
        when ``sum_dev2`` was not given.
    design_effect : float or None
        CR1 variance / naive variance: how many times the event-level variance
        understates the variance of the difference.
    effective_n : tuple or None
        ``(n1 / d, n2 / d)`` with ``d = max(design_effect, 1)``: events per
        group an independent sample of equal precision would need (never more
        than the events there are).
    critical_values : tuple
        ``(-c, c)`` for two-sided, ``(c,)`` / ``(-c,)`` for one-sided, on the t scale.
    reject : bool
        ``p_value <= alpha`` (always ``False`` when degenerate).
    notes : tuple of str
        Plain-language remarks.
    alternative, alpha, null_difference
        The test asked for.
    clusters_group1, clusters_group2, shared_clusters : int
        Clusters with events of group 1, of group 2, and of both.
    variance_method : str
        ``"cr1"`` or ``"cr2"`` (Bell–McCaffrey).
    Examples
    --------
    >>> r = cluster_robust_difference([0, 0, 0, 1, 1, 1], [1, 2, 3, 1, 2, 3],
    ...                               [10, 12, 9, 11, 10, 8], [52.0, 66.0, 41.0, 40.0, 39.0, 30.0], 0.0)
    >>> r.confidence_interval(0.99)[0] < r.ci[0]
    True
    """

    estimate: float
    standard_error: float
    statistic: float
    df: float
    p_value: float
    ci: tuple
    clusters: int
    n1: int
    n2: int
    naive_standard_error: float | None
    design_effect: float | None
    effective_n: tuple | None
    critical_values: tuple
    reject: bool
    notes: tuple
    alternative: str = "two-sided"
    alpha: float = 0.05
    null_difference: float = 0.0
    clusters_group1: int = 0
    clusters_group2: int = 0
    shared_clusters: int = 0
    variance_method: str = "cr1"
    _interval: tuple = field(default=(), repr=False, compare=False)


@dataclass(frozen=True)
class ClusterCells:
    """Per-(group, cluster) cells: group index (0 = group 1, 1 = group 2), key, count and sums.

    ``shift`` may be one number or one per cell; ``sum_dev2`` is optional.
    """

    groups: tuple
    keys: tuple
    n: tuple
    sum_dev: tuple
    shift: object = 0.0
    sum_dev2: tuple | None = None

    @classmethod
    def from_mapping(cls, cells: Mapping) -> "ClusterCells":
        """Build from a mapping with keys ``groups, keys, n, sum_dev, shift`` and optional ``sum_dev2``."""
        missing = [k for k in ("groups", "keys", "n", "sum_dev") if k not in cells]
        if missing:
            raise InvalidArgumentError(f"cells is missing {', '.join(missing)}; got keys {sorted(cells)!r}")
        return cls(cells["groups"], cells["keys"], cells["n"], cells["sum_dev"],
                   cells.get("shift", 0.0), cells.get("sum_dev2"))


@dataclass(frozen=True)
class DesignEffect:
    """Measured design effect of clustered cells.

    Attributes
    ----------
    design_effect : float
        CR1 variance of the difference / event-level (Welch-type) variance.
    effective_n : tuple of float
        ``(n1 / d, n2 / d)`` with ``d = max(design_effect, 1)`` (never above n).
    effective_total : float
        ``(n1 + n2) / d``.
    clusters : int
        Distinct clusters.
    cr1_variance, naive_variance : float
        The two variances compared.
    measurable : bool
        Whether enough clusters hold events (``MIN_CLUSTERS_FOR_DESIGN_EFFECT``
        by default) for the figure to mean something; when False, show
        ``NOT_YET_MEASURABLE`` instead of the number.
    """

    design_effect: float
    effective_n: tuple
    effective_total: float
    clusters: int
    cr1_variance: float
    naive_variance: float
    measurable: bool = True

    def to_dict(self) -> dict:
        return {f.name: (list(getattr(self, f.name)) if isinstance(getattr(self, f.name), tuple)
                         else getattr(self, f.name)) for f in fields(self)}


# ----------------------------------------------------------------------------
# core computation from cells


@dataclass(frozen=True)
class _Core:
    estimate: float
    cr1_variance: float
    naive_variance: float | None
    clusters: int
    n1: int
    n2: int
    clusters_group1: int
    clusters_group2: int
    shared: int
    # Per cluster with events: events, residual sum about its group's mean, group (0, 1; -1 shared).
    cluster_n: np.ndarray = None
    cluster_residual: np.ndarray = None
    cluster_group: np.ndarray = None


def _as_array(values, name, count=None):
    try:
        arr = np.asarray(values, dtype=float).ravel()
    except (TypeError, ValueError):
        raise InvalidArgumentError(f"{name} must be numbers; got {values!r}") from None
    if count is not None and arr.size != count:
        raise InvalidArgumentError(f"{name} must have one entry per cell ({count}); got {arr.size}")
    if not np.all(np.isfinite(arr)):
        raise InvalidArgumentError(f"{name} must be finite; got {values!r}")
    return arr


def _key_codes(keys, count):
    keys = list(keys) if not isinstance(keys, np.ndarray) else keys.ravel().tolist()
    if len(keys) != count:
        raise InvalidArgumentError(f"keys must have one entry per cell ({count}); got {len(keys)}")
    index: dict = {}
    try:
        codes = np.fromiter((index.setdefault(k, len(index)) for k in keys), dtype=np.int64, count=count)
    except TypeError:
        raise InvalidArgumentError("keys must be hashable (a day, shift or crew identifier)") from None
    return codes, len(index)


def _core(groups, keys, n, sum_dev, shift, sum_dev2) -> _Core:
    g = np.asarray(groups).ravel()
    count = g.size
    if count == 0:
        raise InvalidArgumentError("groups must hold at least one cell; got none")
    if not np.all(np.isin(g, (0, 1))):
        bad = g[~np.isin(g, (0, 1))][0]
        raise InvalidArgumentError(f"groups must be 0 (group 1) or 1 (group 2); got {bad!r}")
    g = g.astype(np.int64)
    counts = _as_array(n, "n", count)
    if np.any(counts < 0) or np.any(counts != np.floor(counts)):
        bad = counts[(counts < 0) | (counts != np.floor(counts))][0]
        raise InvalidArgumentError(f"n must be whole counts, not negative; got {bad!r}")
    dev = _as_array(sum_dev, "sum_dev", count)
    shifts = np.broadcast_to(_as_array(shift, "shift"), (count,)) if np.ndim(shift) == 0 \
        else _as_array(shift, "shift", count)
    dev2 = None if sum_dev2 is None else _as_array(sum_dev2, "sum_dev2", count)
    codes, _ = _key_codes(keys, count)

    n1 = int(counts[g == 0].sum())
    n2 = int(counts[g == 1].sum())
    if n1 == 0:
        raise InvalidArgumentError("group 1 has no events (n is 0 in every group-1 cell)")
    if n2 == 0:
        raise InvalidArgumentError("group 2 has no events (n is 0 in every group-2 cell)")

    # Group means about a reference shift near the data, to keep the digits.
    means = np.empty(2)
    for j, size in ((0, n1), (1, n2)):
        sel = (g == j) & (counts > 0)
        ref = float(shifts[sel][0])
        means[j] = ref + float(np.sum(dev[sel] + counts[sel] * (shifts[sel] - ref))) / size
    # Residual sum Σ(x − mean_g) of each cell: Σ(x − c) − n·(mean_g − c).
    offset = means[g] - shifts
    residual = dev - counts * offset
    sizes = np.where(g == 0, n1, n2).astype(float)
    # Score of the group coefficient per cluster: r1c/n1 − r2c/n2.
    sign = np.where(g == 0, 1.0, -1.0)
    score = np.bincount(codes, weights=sign * residual / sizes)
    occupied = counts > 0
    in1 = np.bincount(codes, weights=(occupied & (g == 0)).astype(float)) > 0
    in2 = np.bincount(codes, weights=(occupied & (g == 1)).astype(float)) > 0
    present = in1 | in2
    clusters = int(present.sum())
    total = n1 + n2
    if clusters >= 2 and total > 2:
        factor = clusters / (clusters - 1.0) * (total - 1.0) / (total - 2.0)
        cr1 = factor * float(np.sum(score[present] ** 2))
    else:
        cr1 = math.nan

    naive = None
    if dev2 is not None:
        # Σ(x − mean_g)² per cell = Σ(x − c)² − 2·d·Σ(x − c) + n·d², d = mean_g − c.
        ss = dev2 - 2.0 * offset * dev + counts * offset * offset
        ss1 = max(float(ss[g == 0].sum()), 0.0)
        ss2 = max(float(ss[g == 1].sum()), 0.0)
        if n1 >= 2 and n2 >= 2:
            naive = ss1 / (n1 - 1) / n1 + ss2 / (n2 - 1) / n2
        else:
            naive = math.nan
    cluster_n = np.bincount(codes, weights=counts)[present]
    cluster_residual = np.bincount(codes, weights=residual)[present]
    cluster_group = np.where(in1 & in2, -1, np.where(in1, 0, 1))[present]
    return _Core(float(means[0] - means[1]), cr1, naive, clusters, n1, n2,
                 int(in1.sum()), int(in2.sum()), int((in1 & in2).sum()),
                 cluster_n, cluster_residual, cluster_group)


# ----------------------------------------------------------------------------
# public functions


def cluster_robust_difference(groups, keys, n, sum_dev, shift, *, null_difference=0.0,
                              alternative="two-sided", alpha=0.05, sum_dev2=None,
                              variance="cr1") -> ClusteredResult:
    """Difference in means (or rates) with a cluster-robust standard error.

    Parameters
    ----------
    groups : array_like of int
        Per cell: 0 for group 1, 1 for group 2.
    keys : sequence of hashable
        Per cell: the cluster key (a day, a shift, a crew). Equal keys in both
        groups are one cluster.
    n : array_like of int
        Per cell: number of events.
    sum_dev : array_like of float
        Per cell: ``Σ(x − c)``.
    shift : float or array_like of float
        The shift ``c`` (one for all cells, or one per cell).
    null_difference : float, default 0
        Hypothesised difference ``δ0`` of group 1 − group 2.
    alternative : {"two-sided", "greater", "less"}
        ``"greater"`` tests group 1 − group 2 > δ0.
    alpha : float, default 0.05
        Significance level.
    sum_dev2 : array_like of float, optional
        Per cell: ``Σ(x − c)²``; needed for the event-level standard error,
        the design effect and the effective sample sizes.
    variance : {"cr1", "cr2", "auto"}, default "cr1"
        ``"cr1"``: CR1 on ``G − 1`` df (clusters shared by both groups, such as
        calendar days). ``"cr2"``: the Bell–McCaffrey CR2 variance with its
        degrees of freedom, for clusters that each belong to one group (crews,
        batches, routes); refused when a cluster holds events of both groups.
        ``"auto"``: CR2 when no cluster is shared, CR1 otherwise.

    Returns
    -------
    ClusteredResult
        When clusters are nested in groups and a group has a single cluster,
        the result is degenerate (nan statistic, ``ONE_CLUSTER_NOTE``): that
        group's between-cluster variance cannot be estimated. With fewer than two clusters (or fewer than three events) the standard
        error, statistic and p-value are nan and the notes say why; with zero
        cluster-level residuals the statistic is ±inf or nan as for the
        fixed-sample tests. ``reject`` is ``False`` in both cases.

    Raises
    ------
    InvalidArgumentError
        A group index other than 0/1, negative or fractional counts, arrays of
        unequal length, non-finite sums, or a group without events.

    Examples
    --------
    Three days seen by both sites; day totals of a duration about ``c = 0``:

    >>> r = cluster_robust_difference([0, 0, 0, 1, 1, 1], [1, 2, 3, 1, 2, 3],
    ...                               [10, 12, 9, 11, 10, 8], [52.0, 66.0, 41.0, 40.0, 39.0, 30.0], 0.0)
    >>> r.clusters, r.df
    (3, 2.0)
    >>> round(r.estimate, 4), round(r.standard_error, 4)
    (1.3704, 0.2493)
    """
    null_difference = _check_finite(null_difference, "null_difference")
    alternative = _check_alternative(alternative)
    alpha = _check_probability(alpha, "alpha")
    if variance not in VARIANCES:
        raise InvalidArgumentError(f"variance must be one of {', '.join(VARIANCES)}; got {variance!r}")
    core = _core(groups, keys, n, sum_dev, shift, sum_dev2)
    nested = core.shared == 0
    use_cr2 = variance == "cr2" or (variance == "auto" and nested)
    if use_cr2 and not nested:
        raise InvalidArgumentError(
            f"variance 'cr2' needs clusters that each belong to one group; {core.shared} clusters "
            f"hold events of both groups")

    naive_se = design = effective = None
    if core.naive_variance is not None:
        naive_se = math.sqrt(core.naive_variance) if math.isfinite(core.naive_variance) else math.nan
        if core.naive_variance > 0 and math.isfinite(core.cr1_variance):
            design = core.cr1_variance / core.naive_variance
            # Effective n never exceeds n: a design effect below 1 is noise, not extra events.
            effective = (core.n1 / max(design, 1.0), core.n2 / max(design, 1.0))
        else:
            design = math.nan

    common = dict(clusters=core.clusters, n1=core.n1, n2=core.n2, naive_standard_error=naive_se,
                  design_effect=design, effective_n=effective, alternative=alternative, alpha=alpha,
                  null_difference=null_difference, clusters_group1=core.clusters_group1,
                  clusters_group2=core.clusters_group2, shared_clusters=core.shared)
    notes = []
    if use_cr2:
        var, df = _bell_mccaffrey(core)
        common["variance_method"] = "cr2"
        notes.append(f"CR2 (Bell–McCaffrey) cluster-robust standard error over clusters nested in "
                     f"groups ({core.clusters_group1} and {core.clusters_group2}); t on "
                     f"{_df_words(df)} Bell–McCaffrey degrees of freedom")
    else:
        var, df = core.cr1_variance, float(core.clusters - 1)
        notes.append(f"CR1 cluster-robust standard error over {core.clusters} clusters; "
                     f"t on {core.clusters - 1} degrees of freedom")
    if core.shared:
        notes.append(f"{core.shared} clusters hold events of both groups and count once")

    def degenerate_result(why):
        notes.append(why)
        nan_ci = {"two-sided": (math.nan, math.nan), "greater": (math.nan, None),
                  "less": (None, math.nan)}[alternative]
        crit = (math.nan, math.nan) if alternative == "two-sided" else (math.nan,)
        return ClusteredResult(core.estimate, math.nan, math.nan, df, math.nan, nan_ci,
                               critical_values=crit, reject=False, notes=tuple(notes), **common)

    if nested and min(core.clusters_group1, core.clusters_group2) < 2:
        # With one cluster in a group its between-cluster spread drops out of the variance
        # entirely (the cluster's residual about its own group mean is zero): no test.
        return degenerate_result(ONE_CLUSTER_NOTE)
    if not math.isfinite(var):
        return degenerate_result(TOO_FEW_CLUSTERS_NOTE)

    # A variance that is zero up to rounding is zero: t = 1e13 is not a finding.
    scale = max(core.estimate * core.estimate, core.naive_variance or 0.0, 1e-300)
    se = math.sqrt(var) if var > _ZERO_VARIANCE * scale else 0.0
    excess = core.estimate - null_difference
    if se == 0.0:
        notes.append(DEGENERATE_CLUSTER_NOTE)
        statistic = math.copysign(math.inf, excess) if excess != 0 else math.nan
        if math.isnan(statistic):
            p = math.nan
        elif alternative == "two-sided":
            p = 0.0
        else:
            p = 0.0 if (statistic > 0) == (alternative == "greater") else 1.0
    else:
        statistic = excess / se
        p = _p_value(statistic, df, alternative)
    degenerate = se == 0.0
    spec = ("se", se, df)
    return ClusteredResult(
        core.estimate, se, float(statistic), df, float(p),
        _interval(spec, core.estimate, alternative, alpha),
        critical_values=tuple(float(c) for c in _critical_values(df, alternative, alpha)),
        reject=bool(not degenerate and p <= alpha), notes=tuple(notes), _interval=spec, **common)


def _df_words(df):
    return f"{df:.1f}" if math.isfinite(df) else "undefined"


def _bell_mccaffrey(core):
    """CR2 variance of the difference and Bell–McCaffrey degrees of freedom, clusters nested in groups.

    Bell & McCaffrey (2002), "Bias reduction in standard errors for linear
    regression with multi-stage samples", Survey Methodology 28(2):169–181;
    Imbens & Kolesár (2016), "Robust standard errors in small samples: some
    practical advice", Review of Economics and Statistics 98(4):701–712.

    For OLS of the value on an intercept and a group-1 indicator, the hat
    matrix of a cluster ``c`` of group ``g`` is ``(n_c/n_g)·P`` (``P`` the
    projection on the constant), so the CR2 adjustment ``(I − H_cc)^{-1/2}``
    scales the cluster's residual sum ``r_c`` by ``(1 − n_c/n_g)^{-1/2}``:

        V_CR2 = Σ_g Σ_{c in g} r_c² / (n_g² (1 − n_c/n_g)).

    The Bell–McCaffrey df ``(tr M)² / tr(M²)`` use ``M = G'G`` under the
    working model of independent equal-variance errors; ``M`` is block
    diagonal by group with blocks ``diag(s_c² n_c) − (s n)(s n)'/n_g``,
    ``s_c = (1/n_g)(1 − n_c/n_g)^{-1/2}``, so both traces need only the
    cluster sizes. Returns (nan, nan) when a group has a single cluster.
    """
    groups = []
    for group, size in ((0, core.n1), (1, core.n2)):
        sel = core.cluster_group == group
        groups.append((core.cluster_n[sel], core.cluster_residual[sel], size))
    return nested_cr2(groups)


def nested_cr2(groups):
    """CR2 variance of a two-group contrast and its Bell–McCaffrey df, clusters nested in groups.

    ``groups`` holds, per group, ``(weights, residuals, total)``: each cluster's weight (its
    events for a mean; its denominator sum for a ratio of sums, the weighted fit's weight),
    its residual sum (``Σ(x − mean)``; ``Σ(y − R·x)`` for a ratio) and the group's total weight.
    A cluster's leverage is its share of the group's weight, ``h_c = w_c/W_g``, and

        V_CR2 = Σ_g Σ_{c in g} r_c² / (W_g² (1 − h_c)),

    with the df ``(tr M)² / tr(M²)`` of the working model of independent equal-variance errors
    in the weighted fit, which again need only the weights (see :func:`_bell_mccaffrey`).
    Returns (nan, nan) when a group has fewer than two clusters or one holds all its weight.
    """
    var = 0.0
    trace = 0.0
    trace_sq = 0.0
    for nc, rc, size in groups:
        nc = np.asarray(nc, dtype=float)
        rc = np.asarray(rc, dtype=float)
        leverage = nc / size
        if nc.size < 2 or np.any(leverage >= 1.0):
            return math.nan, math.nan
        var += float(np.sum(rc * rc / (size * size * (1.0 - leverage))))
        s2 = 1.0 / (size * size * (1.0 - leverage))
        diag = s2 * nc
        u = np.sqrt(s2) * nc
        uu = float(u @ u)
        trace += float(diag.sum()) - uu / size
        trace_sq += float(diag @ diag) - 2.0 * float(np.sum(diag * u * u)) / size + uu * uu / (size * size)
    df = trace * trace / trace_sq if trace_sq > 0 else math.nan
    return var, float(df)


def design_effect(cells, naive_variance=None, *, min_clusters=MIN_CLUSTERS_FOR_DESIGN_EFFECT) -> DesignEffect:
    """Design effect and effective sample size of per-(group, cluster) cells.

    Every look records the day-level design effect: with cells per (group,
    day), it says how much the day-to-day spread inflates the variance of the
    difference over what an event-level test assumes.

    Parameters
    ----------
    cells : ClusterCells or mapping
        ``groups, keys, n, sum_dev, shift`` and ``sum_dev2`` per cell (see
        :func:`cluster_robust_difference`).
    naive_variance : float, optional
        The event-level variance of the difference to compare against; by
        default the Welch-type ``s1²/n1 + s2²/n2`` from ``sum_dev2``.
    min_clusters : int
        Clusters with events needed before the figure is ``measurable``.

    Returns
    -------
    DesignEffect
        nan design effect (and effective sizes) when there are fewer than two
        clusters or the naive variance is zero; ``measurable`` False below
        ``min_clusters``.

    Examples
    --------
    >>> cells = {"groups": [0, 0, 1, 1], "keys": ["mon", "tue", "mon", "tue"],
    ...          "n": [20, 20, 20, 20], "sum_dev": [10.0, 30.0, 12.0, 8.0],
    ...          "sum_dev2": [60.0, 100.0, 50.0, 40.0], "shift": 0.0}
    >>> de = design_effect(cells)
    >>> de.clusters, round(de.design_effect, 3), de.measurable
    (2, 2.844, False)
    """
    if isinstance(cells, Mapping):
        cells = ClusterCells.from_mapping(cells)
    if not isinstance(cells, ClusterCells):
        raise InvalidArgumentError(f"cells must be ClusterCells or a mapping; got {type(cells).__name__}")
    if cells.sum_dev2 is None and naive_variance is None:
        raise InvalidArgumentError("cells need sum_dev2 unless naive_variance is given; got neither")
    core = _core(cells.groups, cells.keys, cells.n, cells.sum_dev, cells.shift, cells.sum_dev2)
    naive = core.naive_variance if naive_variance is None else _check_finite(naive_variance, "naive_variance")
    if naive is not None and naive < 0:
        raise InvalidArgumentError(f"naive_variance must not be negative; got {naive_variance!r}")
    if naive and math.isfinite(core.cr1_variance) and math.isfinite(naive):
        deff = core.cr1_variance / naive
    else:
        deff = math.nan
    if math.isnan(deff):
        eff = (math.nan, math.nan)
    else:
        # Never more effective events than events: a design effect below 1 is noise.
        eff = (core.n1 / max(deff, 1.0), core.n2 / max(deff, 1.0))
    measurable = bool(core.clusters >= int(min_clusters) and math.isfinite(deff))
    return DesignEffect(float(deff), eff, float(eff[0] + eff[1]), core.clusters,
                        float(core.cr1_variance), float(naive), measurable)


@dataclass(frozen=True)
class ClusterCounts:
    """How many clusters each group has, and whether a comparison may decide yet.

    Attributes
    ----------
    group1, group2 : int
        Clusters holding events of group 1 / group 2 (a shared cluster counts in both).
    shared : int
        Clusters holding events of both groups.
    total : int
        Distinct clusters.
    nested : bool
        No cluster is shared: every cluster belongs to one group (crews, batches).
    minimum : int
        The minimum that applies: per group when nested, in total otherwise.
    enough : bool
        Whether the minimum is met.
    reason : str
        Plain words for the state (what is missing when not enough).
    """

    group1: int
    group2: int
    shared: int
    total: int
    nested: bool
    minimum: int
    enough: bool
    reason: str

    def to_dict(self) -> dict:
        return {f.name: getattr(self, f.name) for f in fields(self)}


def cluster_counts(groups, keys, n, *, min_clusters=10, min_per_group=MIN_CLUSTERS_PER_GROUP) -> ClusterCounts:
    """Clusters per group and whether a clustered comparison has enough to decide.

    Clusters shared by both groups (calendar days) need ``min_clusters`` in
    total. Clusters that each belong to one group (crews of one site) need
    ``max(min_per_group, ceil(min_clusters / 2))`` in *each* group: the
    variance of each group's mean is estimated from its own clusters only.

    Parameters
    ----------
    groups, keys, n : array_like
        Per cell: group index (0/1), cluster key, events (cells with no events are ignored).
    min_clusters : int
        The comparison's configured minimum (total).
    min_per_group : int
        Floor per group for nested clusters.

    Returns
    -------
    ClusterCounts

    Examples
    --------
    >>> c = cluster_counts([0, 0, 1], ["crew a", "crew b", "crew c"], [5, 4, 6], min_clusters=4)
    >>> c.group1, c.group2, c.nested, c.enough
    (2, 1, True, False)
    >>> c.reason
    'clusters belong to one group: group 1 has 2 and group 2 has 1; each group needs 3'
    """
    g = np.asarray(groups).ravel()
    counts = np.asarray(n, dtype=float).ravel()
    keys = list(keys) if not isinstance(keys, np.ndarray) else keys.ravel().tolist()
    if not (g.size == counts.size == len(keys)):
        raise InvalidArgumentError(
            f"groups, keys and n must have one entry per cell; got {g.size}, {len(keys)} and {counts.size}")
    minimum_total = int(min_clusters)
    by_key: dict = {}
    for gi, key, size in zip(g.tolist(), keys, counts.tolist()):
        if size > 0:
            by_key.setdefault(key, set()).add(int(gi))
    c1 = sum(1 for s in by_key.values() if 0 in s)
    c2 = sum(1 for s in by_key.values() if 1 in s)
    shared = sum(1 for s in by_key.values() if len(s) == 2)
    total = len(by_key)
    nested = shared == 0 and total > 0
    if nested:
        minimum = max(int(min_per_group), math.ceil(minimum_total / 2))
        enough = c1 >= minimum and c2 >= minimum
        reason = (f"clusters belong to one group: group 1 has {c1} and group 2 has {c2}; "
                  f"each group needs {minimum}")
    else:
        minimum = minimum_total
        enough = total >= minimum
        reason = f"{total} clusters so far; decisions start at {minimum}"
    return ClusterCounts(c1, c2, shared, total, nested, minimum, enough, reason)


# ----------------------------------------------------------------------------
# planning


@dataclass(frozen=True)
class ClusteredSize:
    """Events (and clusters) per group after allowing for clustering.

    Attributes
    ----------
    design_effect : float
        Variance inflation assumed.
    unclustered_per_group : float
        Events per group an independent-events plan needs.
    events_per_group : int
        ``ceil(unclustered_per_group × design_effect)``.
    events_per_cluster : float or None
        Events per group in one cluster, when given.
    clusters_per_group : int or None
        ``ceil(events_per_group / events_per_cluster)``: clusters (days) each
        group must see. When days are shared, this is the number of days.
    """

    design_effect: float
    unclustered_per_group: float
    events_per_group: int
    events_per_cluster: float | None
    clusters_per_group: int | None

    def to_dict(self) -> dict:
        return {f.name: getattr(self, f.name) for f in fields(self)}


def design_effect_from_icc(icc, events_per_cluster) -> float:
    """Kish's design effect ``1 + (m − 1)·ρ`` for equal clusters.

    Parameters
    ----------
    icc : float
        Intra-cluster correlation ρ in [0, 1].
    events_per_cluster : float
        Events per cluster ``m`` (at least 1).

    Returns
    -------
    float

    Examples
    --------
    >>> design_effect_from_icc(0.05, 101)
    6.0
    """
    rho = _check_finite(icc, "icc")
    if not 0.0 <= rho <= 1.0:
        raise InvalidArgumentError(f"icc must be in [0, 1]; got {icc!r}")
    m = _check_finite(events_per_cluster, "events_per_cluster")
    if m < 1:
        raise InvalidArgumentError(f"events_per_cluster must be at least 1; got {events_per_cluster!r}")
    return 1.0 + (m - 1.0) * rho


def _resolve_design_effect(design_effect, icc, events_per_cluster):
    if design_effect is not None and icc is not None:
        raise InvalidArgumentError(
            f"give design_effect or icc, not both; got design_effect={design_effect!r}, icc={icc!r}")
    if design_effect is not None:
        deff = _check_finite(design_effect, "design_effect")
        if deff < 1.0:
            raise InvalidArgumentError(f"design_effect must be at least 1; got {design_effect!r}")
        return deff
    if icc is None:
        raise InvalidArgumentError("give design_effect, or icc with events_per_cluster; got neither")
    if events_per_cluster is None:
        raise InvalidArgumentError(f"icc needs events_per_cluster; got icc={icc!r} alone")
    return design_effect_from_icc(icc, events_per_cluster)


def inflate_for_clustering(events_per_group, *, design_effect=None, icc=None,
                           events_per_cluster=None) -> ClusteredSize:
    """Events per group a clustered comparison needs for the precision of an unclustered plan.

    Parameters
    ----------
    events_per_group : float
        Events per group from an independent-events plan (e.g. a ``Plan``'s
        ``max_per_group``).
    design_effect : float, optional
        Assumed variance inflation (at least 1).
    icc : float, optional
        Intra-cluster correlation, used with ``events_per_cluster`` when no
        design effect is given: ``1 + (m − 1)·ρ``.
    events_per_cluster : float, optional
        Events per group in one cluster (a day); also gives the clusters needed.

    Returns
    -------
    ClusteredSize

    Examples
    --------
    >>> s = inflate_for_clustering(400, icc=0.02, events_per_cluster=51)
    >>> s.design_effect, s.events_per_group, s.clusters_per_group
    (2.0, 800, 16)
    """
    base = _check_finite(events_per_group, "events_per_group")
    if base <= 0:
        raise InvalidArgumentError(f"events_per_group must be positive; got {events_per_group!r}")
    deff = _resolve_design_effect(design_effect, icc, events_per_cluster)
    # A tiny tolerance keeps 400 × 2.0000000000000004 from rounding up to 801.
    events = int(math.ceil(base * deff - 1e-9))
    per_cluster = None
    clusters = None
    if events_per_cluster is not None:
        per_cluster = _check_finite(events_per_cluster, "events_per_cluster")
        if per_cluster < 1:
            raise InvalidArgumentError(f"events_per_cluster must be at least 1; got {events_per_cluster!r}")
        clusters = int(math.ceil(events / per_cluster - 1e-9))
    return ClusteredSize(deff, base, events, per_cluster, clusters)


def clusters_needed(events_per_group, events_per_cluster, *, design_effect=None, icc=None) -> int:
    """Clusters (days) per group needed after inflating for clustering.

    Parameters
    ----------
    events_per_group : float
        Events per group from an independent-events plan.
    events_per_cluster : float
        Events per group in one cluster (a day).
    design_effect : float, optional
        Assumed variance inflation; by default ``1 + (m − 1)·icc``.
    icc : float, optional
        Intra-cluster correlation, used when ``design_effect`` is not given.

    Returns
    -------
    int
        ``ceil(events_per_group × design effect / events_per_cluster)``.

    Examples
    --------
    >>> clusters_needed(400, 51, icc=0.02)
    16
    """
    if events_per_cluster is None:
        raise InvalidArgumentError("events_per_cluster is required; got None")
    return inflate_for_clustering(events_per_group, design_effect=design_effect, icc=icc,
                                  events_per_cluster=events_per_cluster).clusters_per_group


# ----------------------------------------------------------------------------
# few clusters: the t allowance


def t_noncentrality(df, *, alpha=0.05, power=0.8, alternative="two-sided") -> float:
    """Noncentrality a t test on ``df`` degrees of freedom needs for the given power.

    The expected z of the difference (its size over its true standard error)
    at which a t test at level ``alpha`` rejects with probability ``power``
    (both tails counted for two-sided). With many degrees of freedom it tends
    to ``z_{1−α(/2)} + z_{1−β}``; with few it is larger, because the standard
    error is itself estimated from few clusters.

    Parameters
    ----------
    df : float
        Degrees of freedom of the t the decision uses (at least 1).
    alpha, power : float
        Level and power, ``0 < alpha < power < 1``.
    alternative : str
        ``"two-sided"``, ``"greater"`` or ``"less"``.

    Returns
    -------
    float

    Examples
    --------
    >>> round(t_noncentrality(1e9), 4)   # the normal value 1.96 + 0.8416
    2.8016
    >>> round(t_noncentrality(4), 3)
    3.761
    """
    nu = _check_finite(df, "df")
    if nu < 1:
        raise InvalidArgumentError(f"df must be at least 1; got {df!r}")
    level = _check_probability(alpha, "alpha")
    target = _check_probability(power, "power")
    if target <= level:
        raise InvalidArgumentError(f"power must be above alpha; got power={power!r}, alpha={alpha!r}")
    _check_alternative(alternative)
    two_sided = alternative == "two-sided"
    crit = stats.t.isf(level / 2 if two_sided else level, nu)

    def shortfall(lam):
        reject = float(stats.nct.sf(crit, nu, lam))
        if two_sided:
            # The far tail; scipy returns nan where it is below rounding (df 1, large λ).
            wrong_side = float(stats.nct.cdf(-crit, nu, lam))
            reject += wrong_side if math.isfinite(wrong_side) else 0.0
        return reject - target

    # Power rises with the noncentrality; the normal value is a lower end (t is wider).
    low = max(stats.norm.isf(level / 2 if two_sided else level) + stats.norm.isf(1 - target) - 1.0, 0.0)
    high = crit + stats.t.isf(1 - target, nu) + 1.0
    while shortfall(high) < 0:
        high *= 2
    return float(optimize.brentq(shortfall, low, high, xtol=1e-10, rtol=1e-12))


def t_inflation(df, *, alpha=0.05, power=0.8, alternative="two-sided") -> float:
    """Events (or clusters) a t decision on ``df`` needs over what a z decision needs.

    ``(λ_t / λ_z)²`` with ``λ_t`` from :func:`t_noncentrality` and
    ``λ_z = z_{1−α(/2)} + z_{1−β}``: the variance of the difference must be that
    much smaller for the same power.

    Examples
    --------
    >>> round(t_inflation(9), 3)
    1.264
    """
    _check_alternative(alternative)
    z = (stats.norm.isf(alpha / 2 if alternative == "two-sided" else alpha)
         + stats.norm.isf(1 - power))
    return float((t_noncentrality(df, alpha=alpha, power=power, alternative=alternative) / z) ** 2)


def planning_df(clusters_per_group, *, shared=True) -> float:
    """Degrees of freedom the look's clustered t has with equal clusters.

    Clusters shared by both groups (calendar days): CR1 on ``G − 1`` df, with
    ``G`` the clusters. Clusters that each belong to one group (crews): CR2
    with Bell–McCaffrey df, which for ``k`` equal clusters per group are
    ``2(k − 1)`` (as for a pooled t on the cluster means).

    Examples
    --------
    >>> planning_df(12), planning_df(12, shared=False)
    (11.0, 22.0)
    """
    k = _check_finite(clusters_per_group, "clusters_per_group")
    return float(k - 1) if shared else float(2 * (k - 1))


@dataclass(frozen=True)
class ClusterPlan:
    """Clusters and events per group for a clustered comparison, few-cluster t included.

    Attributes
    ----------
    design_effect : float
        Variance inflation assumed for clustering.
    events_per_cluster : float
        Events of one group in one cluster.
    shared : bool
        Clusters hold both groups (days) rather than one group each (crews).
    unclustered_per_group : float
        Events per group of the independent-events plan.
    clustered_per_group : int
        ``ceil(unclustered × design effect)``: before the t allowance.
    df : float
        Degrees of freedom of the look's t at the planned clusters.
    t_inflation : float
        Allowance for deciding on t with ``df`` (1 with many clusters).
    events_per_group : int
        ``ceil(unclustered × design effect × t_inflation)``; when the minimum
        raised the clusters, the events of that many full clusters.
    clusters_per_group : int
        The fewest equal clusters per group holding ``events_per_group``
        (shared clusters: the number of days), at least ``minimum_clusters``.
    minimum_clusters : int
        Clusters per group the look needs before it decides.
    raised_to_minimum : bool
        Whether the minimum, not power, set ``clusters_per_group``.
    """

    design_effect: float
    events_per_cluster: float
    shared: bool
    unclustered_per_group: float
    clustered_per_group: int
    df: float
    t_inflation: float
    events_per_group: int
    clusters_per_group: int
    minimum_clusters: int
    raised_to_minimum: bool

    def to_dict(self) -> dict:
        return {f.name: getattr(self, f.name) for f in fields(self)}


def plan_clusters(events_per_group, events_per_cluster, *, design_effect=None, icc=None, shared=True,
                  alpha=0.05, power=0.8, alternative="two-sided", minimum_clusters=2) -> ClusterPlan:
    """Clusters per group a clustered comparison needs, allowing for its t on few clusters.

    Starts from the events an independent-events plan needs, inflates them by
    the design effect (given, or ``1 + (m − 1)·icc``), then finds the fewest
    clusters ``k`` per group for which ``k·m`` events are enough once the
    decision's t on ``planning_df(k)`` degrees of freedom is allowed for
    (:func:`t_inflation`). A minimum number of clusters (what the look needs
    before deciding) is applied last.

    Parameters
    ----------
    events_per_group : float
        Events per group of the independent-events plan (a ``Plan``'s
        ``max_per_group`` for a sequential design).
    events_per_cluster : float
        Events of one group in one cluster ``m`` (at least 1).
    design_effect, icc : float, optional
        One of the two (see :func:`inflate_for_clustering`).
    shared : bool
        True for clusters that hold both groups (calendar days), False for
        clusters that each belong to one group.
    alpha, power, alternative
        Of the design; they set the t allowance.
    minimum_clusters : int
        Clusters per group before the look decides (at least 2).

    Returns
    -------
    ClusterPlan

    Examples
    --------
    >>> c = plan_clusters(400, 40, icc=0.05)
    >>> c.design_effect, c.clustered_per_group, c.clusters_per_group, round(c.df)
    (2.95, 1180, 32, 31)
    """
    size = inflate_for_clustering(events_per_group, design_effect=design_effect, icc=icc,
                                  events_per_cluster=events_per_cluster)
    floor = int(minimum_clusters)
    if floor != minimum_clusters or floor < 2:
        raise InvalidArgumentError(f"minimum_clusters must be a whole number of at least 2; got {minimum_clusters!r}")
    m = size.events_per_cluster
    needed = size.unclustered_per_group * size.design_effect

    def events_at(k):
        factor = t_inflation(planning_df(k, shared=shared), alpha=alpha, power=power, alternative=alternative)
        return factor, needed * factor

    # The need falls as clusters (and df) rise: step up from the z answer to the first k that holds it.
    k = max(size.clusters_per_group, 2)
    factor, events = events_at(k)
    while k * m < events - 1e-9:
        k += 1
        factor, events = events_at(k)
    raised = k < floor
    if raised:
        k = floor
        factor, events = events_at(k)
    return ClusterPlan(size.design_effect, m, bool(shared), size.unclustered_per_group,
                       size.events_per_group, planning_df(k, shared=shared), float(factor),
                       int(math.ceil((k * m if raised else events) - 1e-9)), int(k), floor, bool(raised))
