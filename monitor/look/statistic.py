"""The fixed-sample statistic of a look's running cells (pure: no SQL, no clock).

Paired comparisons test the per-pair mean differences of closed buckets, clustered ones
use the cluster-robust difference, ratio comparisons the difference of the two ratios of
sums (delta-method standard error, cluster-robust when clustered), the others the design's
method on the two totals. The
one-sided p-values feed the boundary; the day-level design effect feeds the warning that
an unclustered comparison needs clustering.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from scipy import special

from ..calendar import bucket_end
from ..design import Design
from ..errors import InvalidArgumentError
from ..stats import fixed
from ..stats.boundaries import FutilitySpec
from ..stats.before_after import difference_in_differences
from ..stats.clustered import cluster_counts, cluster_robust_difference, design_effect
from ..stats.ratio import RatioCells, ratio_difference
from ..stats.summaries import MomentSummary
from ..vocabulary import json_safe
from .cells import BASELINE_READ, of_kind


def cluster_variance(design: Design) -> str:
    """Cluster-robust variance of a clustered design: CR1 for calendar buckets shared by both
    groups; for a cluster column, CR2 (Bell–McCaffrey) when every cluster belongs to one group."""
    return "auto" if design.clustering is not None and design.clustering.cluster_column else "cr1"


__all__ = ["Stat", "statistic", "one_sided_ps", "t_critical", "futility_spec", "day_design_effect",
           "finite_or_none", "cluster_variance"]


def finite_or_none(x):
    """A float, or None for none, nan and the infinities (the look's figures)."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


@dataclass
class Stat:
    """What the statistic step produced."""

    estimate: float | None = None
    standard_error: float | None = None
    statistic: float | None = None
    df: float | None = None
    p_value: float | None = None
    p_upper: float | None = None
    p_lower: float | None = None
    fixed: dict | None = None
    clusters: int | None = None
    pairs: int | None = None
    cluster_design_effect: float | None = None
    ratio: dict | None = None        # ratio comparisons: both ratios and the relative change
    problem: str | None = None       # a data problem (the decision is data_problem)
    waiting: str | None = None       # not enough data yet (collecting / awaiting_clusters)
    awaiting_clusters: bool = False
    cluster_counts: dict | None = None   # clusters per group and the minimum that applies
    counts: tuple | None = None          # (successes1, n1, successes2, n2) for rates
    before_after: dict | None = None     # baseline gap, after-only gap, relative effect (before/after)

    @property
    def testable(self) -> bool:
        return (self.problem is None and self.waiting is None and self.statistic is not None
                and not math.isnan(self.statistic))


def one_sided_ps(statistic, df):
    """(P[T >= t], P[T <= t]) under no difference; scipy.special keeps this to microseconds."""
    if df is None:
        return float(special.ndtr(-statistic)), float(special.ndtr(statistic))
    return float(special.stdtr(df, -statistic)), float(special.stdtr(df, statistic))


def t_critical(nominal_p, df):
    """The t value with upper tail ``nominal_p`` (``-stdtrit(df, p)`` keeps tiny tails exact)."""
    critical = float(-special.stdtrit(df, nominal_p))
    # stdtrit gives +inf for a tail of 0 (or ~1e-300 at small df): the boundary is then out of reach.
    return critical if critical > 0 else math.inf


def statistic(design: Design, cells, s1, s2, cutoff, excluded_total) -> Stat:
    """The fixed-sample statistic of the merged cells, or why there is none yet."""
    common = dict(null_difference=design.null_difference, alternative=design.alternative, alpha=design.alpha)
    if design.before_after:
        return _before_after(design, cells, s1, s2, common)
    st = Stat()
    if s1.n == 0 and s2.n == 0:
        if excluded_total:
            st.problem = "every row read so far is excluded as bad"
        else:
            st.waiting = "no events yet"
        return st
    if s1.n == 0 or s2.n == 0:
        empty = design.groups[0 if s1.n == 0 else 1]
        st.problem = f"group {empty!r} has no valid events"
        return st

    if design.ratio is not None:
        return _ratio_statistic(design, cells, st, common)
    if design.paired:
        pairing, zone = design.pairing, design.measure.zone
        by = pairing.pair_by
        means = {}
        for gi, key, (n, sd, _s2) in of_kind(cells, "pair"):
            if n > 0:
                means.setdefault(key, {})[gi] = design.shift + sd / n
        diffs = []
        for key in sorted(means):
            m = means[key]
            if 0 in m and 1 in m:
                if by is not None and bucket_end(key, by, zone, pairing.shift_starts) > cutoff:
                    continue  # the bucket is still open: its means may move
                diffs.append(m[0] - m[1])
        st.pairs = len(diffs)
        if len(diffs) < 2:
            st.waiting = f"{len(diffs)} complete pair(s) so far; a paired test needs at least 2"
            return st
        result = fixed.from_summaries("paired", MomentSummary.from_values(diffs), None, **common)
        min_pairs = pairing.min_pairs
        if len(diffs) < min_pairs:
            # The statistic is shown; the comparison decides from min_pairs pairs on.
            st.waiting = f"{len(diffs)} complete pairs so far; decisions start at {min_pairs} (min_pairs)"
    elif design.clustered:
        rows = [(gi, key, v) for gi, key, v in of_kind(cells, "cluster") if v[0] > 0]
        rows.sort(key=lambda r: (r[0], r[1]))
        groups, keys = [r[0] for r in rows], [r[1] for r in rows]
        count = cluster_counts(groups, keys, [r[2][0] for r in rows], min_clusters=design.min_clusters)
        st.clusters = count.total
        st.cluster_counts = count.to_dict()
        if not count.enough:
            # No statistic while waiting: with too few clusters of a group its figures mean nothing.
            st.waiting = count.reason
            st.awaiting_clusters = True
            return st
        shift = design.shift or 0.0
        result = cluster_robust_difference(
            groups, keys, [r[2][0] for r in rows], [r[2][1] for r in rows], shift,
            sum_dev2=[r[2][2] for r in rows], variance=cluster_variance(design), **common)
        st.cluster_design_effect = finite_or_none(result.design_effect)
        st.fixed = json_safe(result.to_dict())
        if result.degenerate or not math.isfinite(result.standard_error) or result.standard_error == 0:
            st.problem = "the cluster-level spread is zero or undefined: " + "; ".join(result.notes)
            return st
        st.estimate, st.standard_error = float(result.estimate), finite_or_none(result.standard_error)
        st.statistic, st.df, st.p_value = float(result.statistic), float(result.df), float(result.p_value)
        st.p_upper, st.p_lower = one_sided_ps(result.statistic, result.df)
        return st
    else:
        method = design.method
        if method in ("welch", "pooled") and (s1.n < 2 or s2.n < 2):
            st.waiting = "each group needs at least 2 events for a variance"
            return st
        result = fixed.from_summaries(method, s1, s2, sigmas=design.sigmas, **common)
        if method == "proportions":
            st.counts = (int(round(s1.total)), s1.n, int(round(s2.total)), s2.n)

    st.estimate = float(result.estimate)
    st.standard_error = finite_or_none(result.standard_error)
    st.statistic = float(result.statistic)
    st.df = None if result.df is None else float(result.df)
    st.p_value = float(result.p_value)
    st.fixed = json_safe(result.to_dict())
    if (result.degenerate or result.standard_error is None or not math.isfinite(result.standard_error)
            or result.standard_error == 0 or math.isnan(result.statistic)):
        st.problem = "zero variance: every value is the same, no test is possible"
        return st
    st.p_upper, st.p_lower = one_sided_ps(result.statistic, result.df)
    return st


def _gap_figures(result) -> dict:
    return {"estimate": finite_or_none(result.estimate), "standard_error": finite_or_none(result.standard_error),
            "df": finite_or_none(result.df), "ci": [finite_or_none(x) for x in result.ci],
            "clusters": int(result.clusters), "n": [int(result.n1), int(result.n2)]}


def _before_after(design, cells, s1, s2, common) -> Stat:
    """The difference in differences against the frozen baseline (CR2 over calendar days).

    The baseline gap is recorded at every look once the baseline is read, whether or not
    the comparison can test yet; decisions wait for ``min_clusters`` days since the start.
    """
    st = Stat()
    window = design.window
    groups = design.groups
    if BASELINE_READ not in cells:
        st.waiting = (f"the baseline ends at {window.baseline_to}; it is read at the first look after "
                      f"that, and the comparison counts events from the start on")
        return st
    shift = design.shift or 0.0
    base = sorted((gi, key, v) for gi, key, v in of_kind(cells, "baseline") if v[0] > 0)
    for gi in (0, 1):
        if not any(r[0] == gi for r in base):
            st.problem = (f"group {groups[gi]!r} has no valid events in the baseline "
                          f"({window.baseline_from} to {window.baseline_to})")
            return st
    gap = cluster_robust_difference([r[0] for r in base], [r[1] for r in base], [r[2][0] for r in base],
                                    [r[2][1] for r in base], shift, alpha=common["alpha"])
    st.before_after = {"baseline_gap": _gap_figures(gap)}
    if s1.n == 0 or s2.n == 0:
        waiting = [groups[gi] for gi, s in ((0, s1), (1, s2)) if s.n == 0]
        st.waiting = f"no events since the start yet for {' and '.join(map(str, waiting))}"
        return st
    after = sorted((gi, key, v) for gi, key, v in of_kind(cells, "day") if v[0] > 0)
    rows = [(gi, 0, key, v) for gi, key, v in base] + [(gi, 1, key, v) for gi, key, v in after]
    result = difference_in_differences(
        [r[0] for r in rows], [r[1] for r in rows], [r[2] for r in rows], [r[3][0] for r in rows],
        [r[3][1] for r in rows], shift, sum_dev2=[r[3][2] for r in rows], variance="cr2", relative=True,
        **common)
    st.before_after.update({
        "after_gap": _gap_figures(result.after_gap), "relative": json_safe(result.relative),
        "means": json_safe(result.means), "clusters_baseline": result.clusters_baseline,
        "clusters_after": result.clusters_after, "cr1_standard_error": finite_or_none(result.cr1_standard_error),
    })
    st.clusters = int(result.clusters)
    st.estimate, st.standard_error = float(result.estimate), finite_or_none(result.standard_error)
    st.statistic, st.df, st.p_value = float(result.statistic), finite_or_none(result.df), float(result.p_value)
    st.fixed = json_safe(result.to_dict())
    if result.clusters_after < design.min_clusters:
        st.waiting = (f"{result.clusters_after} day(s) since the start so far; decisions start at "
                      f"{design.min_clusters} (min_clusters)")
        st.awaiting_clusters = True
        return st
    if result.degenerate or st.standard_error is None or st.standard_error == 0 or st.df is None:
        st.problem = "the day-to-day spread is zero or undefined: " + "; ".join(result.notes)
        return st
    st.p_upper, st.p_lower = one_sided_ps(result.statistic, result.df)
    return st


def _ratio_statistic(design: Design, cells, st: Stat, common) -> Stat:
    """Difference of the two groups' ratios of sums (cluster cells when clustered, else totals)."""
    clustered = design.clustered
    kind = "cluster" if clustered else "total"
    # Sorted by (group, key) so the sums run in one order whatever order the cells came in.
    rows = sorted((gi, key, v) for gi, key, v in of_kind(cells, kind) if v[0] > 0)
    sums = list(zip(*(v for _gi, _key, v in rows)))
    result = ratio_difference(
        RatioCells(group=tuple(r[0] for r in rows), key=tuple(r[1] if clustered else None for r in rows),
                   n=sums[0], num=sums[1], num2=sums[2], den=sums[3], den2=sums[4], cross=sums[5],
                   shift_num=design.shift or 0.0, shift_den=design.shift_den or 0.0),
        clustered=clustered, **common)
    st.ratio = {"ratio1": finite_or_none(result.ratio1), "ratio2": finite_or_none(result.ratio2),
                "relative_change": finite_or_none(result.relative_change),
                "relative_standard_error": finite_or_none(result.relative_standard_error),
                "denominator1": result.denominator1, "denominator2": result.denominator2}
    st.fixed = json_safe(result.to_dict())
    st.estimate = finite_or_none(result.estimate)
    st.clusters = result.clusters
    if not result.degenerate:
        st.standard_error = float(result.standard_error)
        st.statistic, st.df, st.p_value = float(result.statistic), float(result.df), float(result.p_value)
    if clustered and result.clusters is not None and result.clusters < design.min_clusters:
        st.waiting = (f"{result.clusters} clusters so far; decisions start at "
                      f"{design.min_clusters} (min_clusters)")
        st.awaiting_clusters = True
        return st
    if not clustered and (result.n1 < 2 or result.n2 < 2):
        st.waiting = "each group needs at least 2 rows for a spread"
        return st
    if result.degenerate:
        st.problem = "the spread about the groups' ratios is zero or undefined: " + "; ".join(
            n for n in result.notes if n.startswith("degenerate:"))
        return st
    st.p_upper, st.p_lower = one_sided_ps(result.statistic, result.df)
    return st


def futility_spec(design: Design):
    """The futility rule of the design (None without one, or without the plan's drift and power)."""
    if not design.futility:
        return None
    drift = design.plan.drift
    power = design.plan.inputs.power if design.plan.inputs is not None else None
    if drift is None or power is None:
        return None
    return FutilitySpec(design.spending, 1.0 - power, drift)


def day_design_effect(design: Design, cells, s1, s2):
    """Day-level design effect and effective n (None when it cannot be measured)."""
    if s1.n < 2 or s2.n < 2 or design.ratio is not None:
        # A ratio's day-level spread is not its numerator's: no event-level design effect here.
        return None
    # Sorted by (group, day) so the sums run in one order whatever order the cells came in.
    rows = sorted((gi, key, v[0], v[1], v[2]) for (kind, gi, key), v in cells.items()
                  if kind == "day" and v[0] > 0)
    if len({r[1] for r in rows}) < 2:
        return None
    groups, keys, n, sum_dev, sum_dev2 = zip(*rows)
    try:
        de = design_effect({"groups": groups, "keys": keys, "n": n, "sum_dev": sum_dev,
                            "sum_dev2": sum_dev2, "shift": design.shift or 0.0})
    except InvalidArgumentError:
        return None
    if not math.isfinite(de.design_effect):
        return None
    return de   # de.measurable says whether enough days hold events to report it
