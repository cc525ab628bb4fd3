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
from .fixed import _critical_values, _interval, _p_value

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
    "DEGENERATE_CLUSTER_NOTE",
    "TOO_FEW_CLUSTERS_NOTE",
]

DEGENERATE_CLUSTER_NOTE = "degenerate: the cluster-level residuals are all zero"
TOO_FEW_CLUSTERS_NOTE = "degenerate: fewer than two clusters (no degrees of freedom)"


@dataclass(frozen=True)
class ClusteredResult:
    """Difference between two groups with a cluster-robust (CR1) standard error.

    Attributes
    ----------
    estimate : float
        ``mean1 − mean2`` (event-weighted means).
    standard_error : float
        CR1 standard error of the estimate.
    statistic : float
        ``(estimate − null_difference) / standard_error``.
    df : float
        ``clusters − 1``.
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
        ``(n1 / design_effect, n2 / design_effect)``: events per group an
        independent sample of equal precision would need.
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
    _interval: tuple = field(default=(), repr=False, compare=False)

    @property
    def degenerate(self) -> bool:
        """Whether the data could not support a cluster-robust test."""
        return any(note.startswith("degenerate:") for note in self.notes)

    def confidence_interval(self, level: float = None) -> tuple:
        """Interval (or one-sided bound) for the difference at ``level`` (default ``1 − alpha``).

        Examples
        --------
        >>> r = cluster_robust_difference([0, 0, 0, 1, 1, 1], [1, 2, 3, 1, 2, 3],
        ...                               [10, 12, 9, 11, 10, 8], [52.0, 66.0, 41.0, 40.0, 39.0, 30.0], 0.0)
        >>> r.confidence_interval(0.99)[0] < r.ci[0]
        True
        """
        if level is None:
            level = 1.0 - self.alpha
        level = _check_probability(level, "level")
        if not self._interval:
            return (math.nan, math.nan)
        return _interval(self._interval, self.estimate, self.alternative, 1.0 - level)

    def to_dict(self) -> dict:
        """Plain-dict form (tuples become lists)."""
        out = {}
        for f in fields(self):
            if f.name.startswith("_"):
                continue
            value = getattr(self, f.name)
            out[f.name] = list(value) if isinstance(value, tuple) else value
        return out


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
        ``(n1 / design_effect, n2 / design_effect)``.
    effective_total : float
        ``(n1 + n2) / design_effect``.
    clusters : int
        Distinct clusters.
    cr1_variance, naive_variance : float
        The two variances compared.
    """

    design_effect: float
    effective_n: tuple
    effective_total: float
    clusters: int
    cr1_variance: float
    naive_variance: float

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
    return _Core(float(means[0] - means[1]), cr1, naive, clusters, n1, n2,
                 int(in1.sum()), int(in2.sum()), int((in1 & in2).sum()))


# ----------------------------------------------------------------------------
# public functions


def cluster_robust_difference(groups, keys, n, sum_dev, shift, *, null_difference=0.0,
                              alternative="two-sided", alpha=0.05, sum_dev2=None) -> ClusteredResult:
    """Difference in means (or rates) with a CR1 cluster-robust standard error.

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

    Returns
    -------
    ClusteredResult
        With fewer than two clusters (or fewer than three events) the standard
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
    core = _core(groups, keys, n, sum_dev, shift, sum_dev2)
    notes = [f"CR1 cluster-robust standard error over {core.clusters} clusters; "
             f"t on {core.clusters - 1} degrees of freedom"]
    if core.shared:
        notes.append(f"{core.shared} clusters hold events of both groups and count once")
    df = float(core.clusters - 1)

    naive_se = design = effective = None
    if core.naive_variance is not None:
        naive_se = math.sqrt(core.naive_variance) if math.isfinite(core.naive_variance) else math.nan
        if core.naive_variance > 0 and math.isfinite(core.cr1_variance):
            design = core.cr1_variance / core.naive_variance
            if design > 0:
                effective = (core.n1 / design, core.n2 / design)
            else:
                effective = (math.inf, math.inf)
        else:
            design = math.nan

    common = dict(clusters=core.clusters, n1=core.n1, n2=core.n2, naive_standard_error=naive_se,
                  design_effect=design, effective_n=effective, alternative=alternative, alpha=alpha,
                  null_difference=null_difference, clusters_group1=core.clusters_group1,
                  clusters_group2=core.clusters_group2, shared_clusters=core.shared)
    if not math.isfinite(core.cr1_variance):
        notes.append(TOO_FEW_CLUSTERS_NOTE)
        nan_ci = {"two-sided": (math.nan, math.nan), "greater": (math.nan, None),
                  "less": (None, math.nan)}[alternative]
        crit = (math.nan, math.nan) if alternative == "two-sided" else (math.nan,)
        return ClusteredResult(core.estimate, math.nan, math.nan, df, math.nan, nan_ci,
                               critical_values=crit, reject=False, notes=tuple(notes), **common)

    se = math.sqrt(core.cr1_variance)
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


def design_effect(cells, naive_variance=None) -> DesignEffect:
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

    Returns
    -------
    DesignEffect
        nan design effect (and effective sizes) when there are fewer than two
        clusters or the naive variance is zero.

    Examples
    --------
    >>> cells = {"groups": [0, 0, 1, 1], "keys": ["mon", "tue", "mon", "tue"],
    ...          "n": [20, 20, 20, 20], "sum_dev": [10.0, 30.0, 12.0, 8.0],
    ...          "sum_dev2": [60.0, 100.0, 50.0, 40.0], "shift": 0.0}
    >>> de = design_effect(cells)
    >>> de.clusters, round(de.design_effect, 3)
    (2, 2.844)
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
    if deff > 0:
        eff = (core.n1 / deff, core.n2 / deff)
    else:
        eff = (math.nan, math.nan) if math.isnan(deff) else (math.inf, math.inf)
    return DesignEffect(float(deff), eff, float(eff[0] + eff[1]), core.clusters,
                        float(core.cr1_variance), float(naive))


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
