"""Rates per unit of work: the difference of two ratios of sums, with a delta-method standard error.

Many operations figures are a ratio of two sums over the same rows — defects per 1,000 units
packed (a row per batch), cases per labour hour (a row per shift), minutes of downtime per run
hour. The right estimate for a group is ``R = Σ numerator / Σ denominator`` (a 10,000-unit batch
weighs a thousand times a 10-unit one); the mean of per-row ratios answers another question.

Standard error (the ratio estimator's linearisation, Cochran 1977, *Sampling Techniques*, 3rd
ed., §6.3): with the per-row residual ``e = y − R·x``,

    Var(R) ≈ Σ e² / (n − 1) · n / (Σ x)²

for independent rows, and for rows grouped in clusters (days, crews) the cluster-robust form
over cluster totals ``E_c = Y_c − R·X_c``. The cluster-robust difference is exactly the
CR1 standard error of ``b1 − b2`` in a weighted least-squares fit of ``y/x`` on two group
indicators with weights ``x`` and errors clustered on the key (small-sample factor
``G/(G−1)·(N−1)/(N−2)``), the same convention as :mod:`monitor.stats.clustered`.
Where every cluster holds one group's rows, the CR2 form with Bell–McCaffrey degrees of freedom
(:func:`monitor.stats.clustered.nested_cr2`) is used instead, as for means.

Everything comes from per-cell sums pushed into the database: the row count, ``Σ(y − c_y)``,
``Σ(x − c_x)``, their squares and cross-product, for shifts ``c`` near the data (the shifts keep
the residual sum of squares from cancelling its digits away).

Pure module: numpy and scipy only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import InvalidArgumentError
from ._checks import check_alternative, finite, open_unit
from .clustered import nested_cr2
from .fixed import IntervalRecord, _critical_values, _interval, _p_value

__all__ = ["RatioCells", "RatioResult", "ratio_difference", "ratio_planning_sd"]

NO_DENOMINATOR_NOTE = "degenerate: a group's denominators add up to zero"
TOO_FEW_ROWS_NOTE = "degenerate: a group has fewer than two rows (no spread to measure)"


@dataclass(frozen=True)
class RatioCells:
    """Per-cell sums of one comparison's rows (all arrays of one length).

    ``group`` is 0 for group 1 and 1 for group 2; ``key`` the cluster key of the cell (any
    hashable; equal keys in both groups are one cluster) or None for unclustered cells.
    ``num`` and ``den`` are ``Σ(y − shift_num)`` and ``Σ(x − shift_den)``; ``num2``, ``den2``
    and ``cross`` their squares and cross-product ``Σ(y − c_y)(x − c_x)``.
    """

    group: tuple
    key: tuple
    n: tuple
    num: tuple
    den: tuple
    num2: tuple
    den2: tuple
    cross: tuple
    shift_num: float = 0.0
    shift_den: float = 0.0


@dataclass(frozen=True)
class RatioResult(IntervalRecord):
    """Difference of two ratios ``R1 − R2`` with its delta-method standard error.

    Attributes
    ----------
    ratio1, ratio2 : float
        ``Σy / Σx`` of each group.
    estimate : float
        ``ratio1 − ratio2``.
    standard_error, statistic, df, p_value, ci, critical_values, reject
        As for the fixed-sample tests; ``statistic = (estimate − δ0) / standard_error``, t on
        ``df`` (Welch–Satterthwaite for independent rows, clusters − 1 when clustered).
    relative_change : float
        ``ratio1 / ratio2 − 1``: the change as a share of group 2's rate.
    relative_standard_error : float
        Its delta-method standard error.
    n1, n2 : int
        Rows in each group.
    denominator1, denominator2 : float
        ``Σx`` of each group (units of work).
    clusters : int or None
        Distinct clusters when clustered, else None.
    notes : tuple of str
    """

    ratio1: float
    ratio2: float
    estimate: float
    standard_error: float
    statistic: float
    df: float
    p_value: float
    ci: tuple
    critical_values: tuple
    reject: bool
    relative_change: float
    relative_standard_error: float
    n1: int
    n2: int
    denominator1: float
    denominator2: float
    clusters: int | None
    notes: tuple
    alternative: str = "two-sided"
    alpha: float = 0.05
    null_difference: float = 0.0
    _interval: tuple = field(default=(), repr=False, compare=False)


def _arrays(cells: RatioCells):
    names = ("n", "num", "den", "num2", "den2", "cross")
    group = np.asarray(cells.group, dtype=np.int64).ravel()
    count = group.size
    if count == 0:
        raise InvalidArgumentError("cells must hold at least one cell; got none")
    if not np.all(np.isin(group, (0, 1))):
        raise InvalidArgumentError(f"group must be 0 (group 1) or 1 (group 2); got {cells.group!r}")
    out = {}
    for name in names:
        try:
            arr = np.asarray(getattr(cells, name), dtype=float).ravel()
        except (TypeError, ValueError):
            raise InvalidArgumentError(f"{name} must be numbers; got {getattr(cells, name)!r}") from None
        if arr.size != count:
            raise InvalidArgumentError(f"{name} must have one entry per cell ({count}); got {arr.size}")
        if not np.all(np.isfinite(arr)):
            raise InvalidArgumentError(f"{name} must be finite; got {getattr(cells, name)!r}")
        out[name] = arr
    if np.any(out["n"] < 0):
        raise InvalidArgumentError(f"n must not be negative; got {cells.n!r}")
    return group, out


def _key_codes(keys, count):
    keys = list(keys)
    if len(keys) != count:
        raise InvalidArgumentError(f"key must have one entry per cell ({count}); got {len(keys)}")
    index: dict = {}
    try:
        codes = np.fromiter((index.setdefault(k, len(index)) for k in keys), dtype=np.int64, count=count)
    except TypeError:
        raise InvalidArgumentError("key must be hashable (a day, shift or crew identifier)") from None
    return codes


def ratio_difference(cells: RatioCells, *, clustered: bool = False, null_difference=0.0,
                     alternative="two-sided", alpha=0.05) -> RatioResult:
    """Difference of two groups' ratios of sums, ``Σy1/Σx1 − Σy2/Σx2``.

    Parameters
    ----------
    cells : RatioCells
        Per-cell sums (rows need not be split into cells at all: one cell per group works
        for independent rows).
    clustered : bool, default False
        Cluster-robust standard error over the cells' keys. Where every cluster holds one
        group's rows (crews, lines: ``cluster_column``), CR2 with Bell–McCaffrey degrees of
        freedom (Bell & McCaffrey 2002), the weighted fit's leverage of a cluster being its
        share of the group's denominator; where clusters hold both groups (calendar days: a
        key in both groups counts once), CR1 with t on clusters − 1 degrees of freedom. Without it rows
        are independent and the standard error is the ratio estimator's, with
        Welch–Satterthwaite degrees of freedom.
    null_difference : float, default 0
        Hypothesised ``R1 − R2``.
    alternative : {"two-sided", "greater", "less"}
    alpha : float, default 0.05

    Returns
    -------
    RatioResult
        With a group of fewer than two rows (or clusters), or a zero denominator total,
        the standard error, statistic and p-value are nan and the notes say why.

    Examples
    --------
    Defects and units packed, one cell per group (independent batches):

    >>> cells = RatioCells(group=(0, 1), key=(None, None), n=(3, 3),
    ...                    num=(9.0, 6.0), den=(3000.0, 3000.0), num2=(29.0, 14.0),
    ...                    den2=(3020000.0, 3080000.0), cross=(9200.0, 6400.0))
    >>> r = ratio_difference(cells)
    >>> round(r.ratio1 * 1000, 3), round(r.ratio2 * 1000, 3)
    (3.0, 2.0)
    """
    null_difference = finite(null_difference, "null_difference")
    alternative = check_alternative(alternative)
    alpha = open_unit(alpha, "alpha")
    group, a = _arrays(cells)
    cy = finite(cells.shift_num, "shift_num")
    cx = finite(cells.shift_den, "shift_den")
    n = a["n"]
    ratios, sizes, den_totals, rows = [], [], [], []
    for j in (0, 1):
        sel = group == j
        size = float(n[sel].sum())
        if size == 0:
            raise InvalidArgumentError(f"group {j + 1} has no rows (n is 0 in every group-{j + 1} cell)")
        sy = float(a["num"][sel].sum()) + size * cy
        sx = float(a["den"][sel].sum()) + size * cx
        sizes.append(size)
        den_totals.append(sx)
        ratios.append(sy / sx if sx != 0 else math.nan)
        rows.append(int(size))
    notes = []
    common = dict(n1=rows[0], n2=rows[1], denominator1=den_totals[0], denominator2=den_totals[1],
                  alternative=alternative, alpha=alpha, null_difference=null_difference)
    if not all(math.isfinite(r) for r in ratios):
        return _degenerate(ratios, None, NO_DENOMINATOR_NOTE, notes, common)

    r_cell = np.where(group == 0, ratios[0], ratios[1])
    # Residual e = y − R x = (y − c_y) − R (x − c_x) + k, with k = c_y − R c_x (near 0 when the
    # shifts sit near the data, so nothing large cancels).
    k = cy - r_cell * cx
    resid_sum = a["num"] - r_cell * a["den"] + a["n"] * k
    if clustered:
        codes = _key_codes(cells.key, group.size)
        occupied = n > 0
        clusters = int(np.unique(codes[occupied]).size)
        total = sizes[0] + sizes[1]
        # Per-cluster score of b1 − b2 (and of R1/R2 for the relative change).
        w = np.where(group == 0, 1.0 / den_totals[0], -1.0 / den_totals[1])
        score = np.bincount(codes, weights=w * resid_sum)
        w_rel = np.where(group == 0, 1.0 / (den_totals[0] * ratios[1]),
                         -ratios[0] / (ratios[1] ** 2 * den_totals[1]))
        score_rel = np.bincount(codes, weights=w_rel * resid_sum)
        if clusters < 2 or total <= 2:
            return _degenerate(ratios, clusters, TOO_FEW_ROWS_NOTE, notes, common)
        # Clusters that each hold one group's rows (crews, lines, batches by cluster_column):
        # CR2 with Bell–McCaffrey df, as for means; calendar clusters both groups share: CR1.
        cluster_den = np.bincount(codes, weights=a["den"] + n * cx)
        cluster_resid = np.bincount(codes, weights=resid_sum)
        in_group = [np.bincount(codes, weights=(occupied & (group == j)).astype(float)) > 0 for j in (0, 1)]
        nested = not np.any(in_group[0] & in_group[1])
        if nested:
            per_group = [(cluster_den[in_group[j]], cluster_resid[in_group[j]], den_totals[j]) for j in (0, 1)]
            counts = [int(in_group[j].sum()) for j in (0, 1)]
            if min(counts) < 2:
                return _degenerate(ratios, clusters, "one group has a single cluster: its spread between "
                                   "clusters cannot be measured", notes, common)
            variance, df = nested_cr2(per_group)
            if not math.isfinite(variance):
                return _degenerate(ratios, clusters, TOO_FEW_ROWS_NOTE, notes, common)
            rel_weights = (1.0 / (den_totals[0] * ratios[1]), ratios[0] / (ratios[1] ** 2 * den_totals[1]))
            rel_variance = sum(
                float(np.sum((rel_weights[j] * r) ** 2 / (1.0 - w / total_w)))
                for j, (w, r, total_w) in enumerate(per_group))
            notes.append(f"CR2 (Bell–McCaffrey) cluster-robust delta-method standard error over clusters "
                         f"nested in groups ({counts[0]} and {counts[1]}); t on {df:.1f} Bell–McCaffrey "
                         f"degrees of freedom")
        else:
            factor = clusters / (clusters - 1.0) * (total - 1.0) / (total - 2.0)
            variance = factor * float(np.sum(score ** 2))
            rel_variance = factor * float(np.sum(score_rel ** 2))
            df = float(clusters - 1)
            notes.append(f"cluster-robust (CR1) delta-method standard error over {clusters} clusters; "
                         f"t on {clusters - 1} degrees of freedom")
    else:
        clusters = None
        # Σ e² per cell = Σ(y'−R x')² + 2k Σ(y'−R x') + n k², y' = y − c_y, x' = x − c_x.
        centred = a["num2"] - 2.0 * r_cell * a["cross"] + r_cell ** 2 * a["den2"]
        ss_cell = centred + 2.0 * k * (a["num"] - r_cell * a["den"]) + a["n"] * k ** 2
        parts = []
        for j in (0, 1):
            if sizes[j] < 2:
                return _degenerate(ratios, None, TOO_FEW_ROWS_NOTE, notes, common)
            ss = max(float(ss_cell[group == j].sum()), 0.0)
            # Cochran (1977) §6.3: Var(R) ≈ s_e² · n / (Σx)², s_e² = Σ e² / (n − 1).
            parts.append(ss / (sizes[j] - 1.0) * sizes[j] / den_totals[j] ** 2)
        variance = parts[0] + parts[1]
        rel_variance = parts[0] / ratios[1] ** 2 + parts[1] * ratios[0] ** 2 / ratios[1] ** 4
        df_num = variance ** 2
        df_den = parts[0] ** 2 / (sizes[0] - 1.0) + parts[1] ** 2 / (sizes[1] - 1.0)
        df = df_num / df_den if df_den > 0 else math.nan
        notes.append("delta-method standard error of each group's ratio of sums (Cochran 1977); "
                     "Welch–Satterthwaite degrees of freedom")

    estimate = ratios[0] - ratios[1]
    relative = ratios[0] / ratios[1] - 1.0 if ratios[1] != 0 else math.nan
    rel_se = math.sqrt(rel_variance) if ratios[1] != 0 and math.isfinite(rel_variance) else math.nan
    se = math.sqrt(variance)
    if se == 0.0 or not math.isfinite(df):
        return _degenerate(ratios, clusters, "degenerate: every row lies on its group's ratio (no spread)",
                           notes, common)
    statistic = (estimate - null_difference) / se
    p = _p_value(statistic, df, alternative)
    spec = ("se", se, df)
    return RatioResult(
        ratio1=ratios[0], ratio2=ratios[1], estimate=estimate, standard_error=se,
        statistic=float(statistic), df=float(df), p_value=float(p),
        ci=_interval(spec, estimate, alternative, alpha),
        critical_values=tuple(float(c) for c in _critical_values(df, alternative, alpha)),
        reject=bool(p <= alpha), relative_change=relative, relative_standard_error=rel_se,
        clusters=clusters, notes=tuple(notes), _interval=spec, **common)


def _degenerate(ratios, clusters, why, notes, common) -> RatioResult:
    alternative = common["alternative"]
    nan_ci = {"two-sided": (math.nan, math.nan), "greater": (math.nan, None),
              "less": (None, math.nan)}[alternative]
    crit = (math.nan, math.nan) if alternative == "two-sided" else (math.nan,)
    estimate = ratios[0] - ratios[1]
    relative = ratios[0] / ratios[1] - 1.0 if ratios[1] not in (0.0,) and math.isfinite(ratios[1]) else math.nan
    return RatioResult(
        ratio1=ratios[0], ratio2=ratios[1], estimate=estimate, standard_error=math.nan,
        statistic=math.nan, df=math.nan, p_value=math.nan, ci=nan_ci, critical_values=crit,
        reject=False, relative_change=relative, relative_standard_error=math.nan,
        clusters=clusters, notes=tuple(notes) + (why,), **common)


def ratio_planning_sd(residual_sd, mean_denominator) -> float:
    """The per-row standard deviation to plan a ratio comparison with, as for means.

    A group's ratio over ``n`` rows has variance ``σ_e² / (n · μ_x²)`` (Cochran 1977 §6.3),
    where ``σ_e`` is the spread of the per-row residual ``y − R·x`` and ``μ_x`` the mean
    denominator per row: exactly the variance of a mean of ``n`` values with standard
    deviation ``σ_e / μ_x``. So a ratio comparison is planned as a comparison of means with
    that standard deviation.

    >>> ratio_planning_sd(4.0, 800.0)
    0.005
    """
    residual_sd = finite(residual_sd, "residual_sd")
    mean_denominator = finite(mean_denominator, "mean_denominator")
    if residual_sd <= 0:
        raise InvalidArgumentError(f"residual_sd must be positive; got {residual_sd!r}")
    if mean_denominator <= 0:
        raise InvalidArgumentError(f"mean_denominator must be positive; got {mean_denominator!r}")
    return residual_sd / mean_denominator
