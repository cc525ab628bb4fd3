"""False alarms and adjusted inference at small samples, through the look's decision step.

Each row simulates many independent monitored comparisons ("streams") of one
small-sample design and counts how often the look's decision step declares a
difference when there is none (null rows), or how its adjusted figures after a
stop relate to the truth (inference rows).

How the look's own decision step is used
----------------------------------------
A look decides in ``monitor.look.decision``: the statistic of the running cells
(``weigh``), the boundary at the look (``SequentialTBoundary`` for t statistics,
``SequentialBoundary`` for z), and the rule that compares them (``decide``).
Calling it once per stream and look would take hours at 100,000 streams, so each
row runs the same computation vectorised over streams:

* the boundaries are the decision step's own objects (``new_boundary`` of the
  design), computed once per distinct sequence of (fraction, df) — every row here
  has fixed look sizes, and Welch's data-dependent df are handled by a tree of
  boundaries keyed by the looks' whole-number model df (the rule of
  ``stats.sequential_t``), each node computed once;
* the statistics are the same formulas on arrays (paired, pooled and Welch t, the
  Farrington–Manning score statistic by ``stats.proportions.score_statistics``,
  CR2 with Bell–McCaffrey df for crews, CR1 for shared days);
* the crossing rule is the decision step's: the one-sided t p-value at the look's
  df against the boundary's nominal level, or ``|z| >= boundary`` for rates.

Every row then replays ``--check`` of its streams (default 20) one by one
through ``weigh`` and ``decide`` themselves, from cells built as the look builds
them, and stops with an error if any decision differs from the vectorised one.

Adjusted inference: after a stop the decision step reports a median-unbiased
estimate and an adjusted interval from ``stats.inference.adjusted_inference``,
which inverts the stagewise pivot ``G(δ)`` (``StagewisePivot``). The estimate is
at or below the truth exactly when ``G(truth) >= 1/2`` and the interval covers
the truth exactly when ``α/2 <= G(truth) <= 1 − α/2``, so each stopped stream
needs one evaluation of the same pivot at the truth, not three root searches; the
first ``--check-inference`` stopped streams (default 3) are also solved in full by
``decide`` and checked against that classification.

Scenarios (two-sided α = 0.05 unless said; invented, in the project's own terms)
--------------------------------------------------------------------------------
* paired: per-pair differences N(0, 1), looks after 3, 4, …, 15 pairs (fraction
  pairs/15, ``min_pairs`` 3 so every look tests), Pocock and O'Brien–Fleming;
* pooled: both groups N(0, 1), looks at 5, 10, …, 25 per group;
* Welch: sd 1 and 3, 3:1 group sizes, looks at (2, 6), (4, 12), …, (10, 30);
* rates at 0.05: both groups at 0.05, looks at 100, 200, …, 500 per group;
  margin: rates 0.02 and 0.05, null difference −0.03, one-sided 0.025;
* crews: clusters nested in groups (3 vs 7, 5 vs 5 crews), crew effects with
  intra-crew correlation 0.1, 20 events per crew per look, five looks; CR2 with
  Bell–McCaffrey df;
* shared days: days 10 to 20 of a 20-day plan, one look a day, each site 40
  events a day with its own day effects (intra-day correlation 0.05), CR1 on
  days − 1 df;
* inference: paired (true difference 0.8 sd, 4…12 pairs), Welch (difference 1.2,
  sd 1 and 2, sizes (4, 8)…(16, 32)), crews 5 vs 5 (difference 0.6), rates
  0.30 vs 0.20 at 60…300 per group, each with null difference 0 and a non-zero one;
  repeated intervals for rates at 3:1 group sizes (rates 0.10 and 0.20, 75/25 …
  375/125 per group): simultaneous coverage over all looks.

Run (about 6 minutes on a two-core machine shared with other work):

    python tests/benchmarks/small_sample_false_alarm.py --streams 100000 --inference-streams 300 --seed 1 \
        --check 5 --check-inference 1

The README's false-alarm table comes from that command; its inference table from the same
script with ``--skip-null --inference-streams 1500 --seed 1 --check-inference 1``.
"""

from __future__ import annotations

import argparse
import copy
import math
import sys
import time
from pathlib import Path
from zoneinfo import ZoneInfo

import numpy as np
from scipy import special

ROOT = Path(__file__).resolve().parents[2]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from monitor.design import Design  # noqa: E402
from monitor.look.decision import LookInputs, decide, new_boundary, weigh  # noqa: E402
from monitor.stats import clustered  # noqa: E402
from monitor.stats.inference import StagewisePivot  # noqa: E402
from monitor.stats.proportions import score_statistic, score_statistics  # noqa: E402

ALPHA = 0.05
UTC = ZoneInfo("UTC")


# --------------------------------------------------------------------------- designs


def design(method, *, planned, spending="pocock", alternative="two-sided", alpha=ALPHA, null_difference=0.0,
           pairing=None, clustering=None, min_clusters=None):
    """A frozen design as the look reads it (the stored form, read back as the look does)."""
    return Design.from_stored({
        "method": method, "metric": "proportion" if method == "proportions" else "mean",
        "plan": {"planned_per_group": planned}, "spending": spending,
        "alternative": alternative, "alpha": alpha, "null_difference": null_difference,
        "shift": 0.0, "groups": ["one", "two"], "futility": False, "sigmas": None,
        "pairing": pairing, "clustering": clustering, "min_clusters": min_clusters,
        "table": "events", "group_column": "line", "value_column": "value", "time_column": "done_at"})


class BoundaryTree:
    """The decision step's boundary at every distinct sequence of looks, each computed once.

    A node is the boundary object standing after a prefix of looks; a new look
    below it is a deep copy with one more ``add_look``.
    """

    def __init__(self, design_):
        self.design = design_
        self.t_based = design_.method not in ("z", "proportions") or design_.clustering is not None
        self.root = new_boundary(design_)
        self.nodes = {(): self.root}

    def look(self, prefix):
        """LookBoundary at the last look of ``prefix`` (tuple of (fraction, df) or fractions)."""
        return self.boundary(prefix).looks[-1]

    def boundary(self, prefix):
        node = self.nodes.get(prefix)
        if node is None:
            parent = self.boundary(prefix[:-1])
            node = copy.deepcopy(parent)
            last = prefix[-1]
            if self.t_based:
                node.add_look(last[0], last[1])
            else:
                node.add_look(last)
            self.nodes[prefix] = node
        return node


def model_df(dfs):
    """The whole-number running maximum the sequential t model uses (see stats.sequential_t)."""
    out, top = [], 0.0
    for df in dfs:
        top = max(top, math.floor(min(df, 1e6)))
        out.append(float(max(top, 1.0)))
    return out


def t_crosses(t, df, nominal_p, alternative):
    """The decision step's rule for t statistics: one-sided p at the look's df against the nominal level."""
    upper = special.stdtr(df, -t)
    lower = special.stdtr(df, t)
    if alternative == "greater":
        return upper <= nominal_p
    if alternative == "less":
        return lower <= nominal_p
    return np.minimum(upper, lower) <= nominal_p


def z_crosses(z, bound, alternative):
    if alternative == "greater":
        return z >= bound
    if alternative == "less":
        return z <= -bound
    return np.abs(z) >= bound


def _one_sided_spent(design_, fraction):
    """One-sided alpha the spending function allows by ``fraction`` (all of it from fraction 1)."""
    from monitor.stats.spending import parse_spending

    level = design_.alpha / 2 if design_.alternative == "two-sided" else design_.alpha
    if fraction >= 1.0:
        return level
    return float(parse_spending(design_.spending).cumulative(fraction, level)) + 1e-12


def rate(alarms):
    n = alarms.size
    p = float(np.mean(alarms))
    return p, math.sqrt(max(p * (1 - p), 1e-12) / n)


# --------------------------------------------------------------------------- statistics on arrays


def paired_t(diffs, n):
    d = diffs[:, :n]
    mean = d.mean(axis=1)
    se = d.std(axis=1, ddof=1) / math.sqrt(n)
    return mean, se


def two_sample(x, y, pooled):
    n1, n2 = x.shape[1], y.shape[1]
    m1, m2 = x.mean(axis=1), y.mean(axis=1)
    v1, v2 = x.var(axis=1, ddof=1), y.var(axis=1, ddof=1)
    if pooled:
        sp = ((n1 - 1) * v1 + (n2 - 1) * v2) / (n1 + n2 - 2)
        se = np.sqrt(sp * (1 / n1 + 1 / n2))
        df = np.full(x.shape[0], float(n1 + n2 - 2))
    else:
        a, b = v1 / n1, v2 / n2
        se = np.sqrt(a + b)
        df = (a + b) ** 2 / (a * a / (n1 - 1) + b * b / (n2 - 1))
    return m1 - m2, se, df


def cr2_nested(sums1, sums2, size):
    """CR2 variance of mean1 − mean2 with equal crews of ``size`` events (Bell–McCaffrey)."""
    c1, c2 = sums1.shape[1], sums2.shape[1]
    n1, n2 = c1 * size, c2 * size
    m1, m2 = sums1.sum(axis=1) / n1, sums2.sum(axis=1) / n2
    r1 = sums1 - size * m1[:, None]
    r2 = sums2 - size * m2[:, None]
    var = (r1 ** 2).sum(axis=1) / (n1 * n1 * (1 - size / n1)) + (r2 ** 2).sum(axis=1) / (n2 * n2 * (1 - size / n2))
    return m1 - m2, np.sqrt(var)


def cr1_shared(sums1, sums2, counts1, counts2):
    """CR1 variance over days shared by both sites (every day holds both)."""
    n1, n2 = counts1.sum(), counts2.sum()
    m1, m2 = sums1.sum(axis=1) / n1, sums2.sum(axis=1) / n2
    score = (sums1 - counts1 * m1[:, None]) / n1 - (sums2 - counts2 * m2[:, None]) / n2
    g = sums1.shape[1]
    factor = g / (g - 1.0) * (n1 + n2 - 1.0) / (n1 + n2 - 2.0)
    return m1 - m2, np.sqrt(factor * (score ** 2).sum(axis=1))


# --------------------------------------------------------------------------- replay through weigh/decide


def replay(design_, cells_per_look, tree_prefixes):
    """Decisions of one stream, look by look, through weigh and decide."""
    boundary = new_boundary(design_)
    last_fraction = 0.0
    decisions = []
    for cells in cells_per_look:
        evidence = weigh(LookInputs(design_, cells, None, 0, last_fraction))
        decision = decide(evidence, boundary if evidence.tests else None)
        decisions.append(decision.decision)
        if decision.boundary is not None:
            last_fraction = decision.boundary.fraction
        if decision.stopped:
            break
    return decisions, boundary


def first_stop(crossed):
    """Index of the first crossing look per stream (-1 for none)."""
    any_cross = crossed.any(axis=1)
    return np.where(any_cross, crossed.argmax(axis=1), -1)


def check_replay(name, vector_stop, replayed_stops):
    bad = [i for i, (v, r) in enumerate(zip(vector_stop, replayed_stops)) if v != r]
    if bad:
        raise SystemExit(f"{name}: the vectorised decisions differ from weigh/decide for streams {bad[:10]}")


def decided_at(decisions):
    return next((k for k, d in enumerate(decisions) if d == "difference_found"), -1)


# --------------------------------------------------------------------------- null rows


def paired_row(rng, streams, spending, check, pairs=range(3, 16), truth=0.0):
    pairs = list(pairs)
    top = pairs[-1]
    d = design("paired", planned=top, spending=spending,
               pairing={"pair_by": None, "pair_column": "pair", "shift_starts": [], "min_pairs": pairs[0]})
    tree = BoundaryTree(d)
    diffs = truth + rng.standard_normal((streams, top))
    crossed = np.zeros((streams, len(pairs)), bool)
    prefix = ()
    for k, n in enumerate(pairs):
        prefix = prefix + ((n / top, float(n - 1)),)
        look = tree.look(prefix)
        mean, se = paired_t(diffs, n)
        crossed[:, k] = t_crosses(mean / se, n - 1, look.nominal_p, d.alternative)
    stop = first_stop(crossed)
    stops = []
    for i in range(min(check, streams)):
        looks = []
        for n in pairs:
            cells = {("total", 0, ""): _moments(diffs[i, :n]), ("total", 1, ""): _moments(np.zeros(n))}
            for j in range(n):
                cells[("pair", 0, f"p{j:03d}")] = _moments(diffs[i, j:j + 1])
                cells[("pair", 1, f"p{j:03d}")] = _moments(np.zeros(1))
            looks.append(cells)
        stops.append(decided_at(replay(d, looks, None)[0]))
    check_replay(f"paired {spending}", stop[:check], stops)
    return stop, tree, diffs


def _moments(values):
    values = np.asarray(values, float)
    return (int(values.size), float(values.sum()), float((values * values).sum()))


def two_sample_row(rng, streams, spending, check, sizes, sds=(1.0, 1.0), pooled=True, truth=0.0):
    method = "pooled" if pooled else "welch"
    planned = min(sizes[-1])
    d = design(method, planned=planned, spending=spending)
    tree = BoundaryTree(d)
    n1_max, n2_max = sizes[-1]
    x = truth + sds[0] * rng.standard_normal((streams, n1_max))
    y = sds[1] * rng.standard_normal((streams, n2_max))
    crossed = np.zeros((streams, len(sizes)), bool)
    dfs = []
    stats = []
    for n1, n2 in sizes:
        est, se, df = two_sample(x[:, :n1], y[:, :n2], pooled)
        dfs.append(df)
        stats.append((est, se, df))
    models = np.array([model_df(row) for row in np.column_stack(dfs)]) if not pooled else None
    for k, (n1, n2) in enumerate(sizes):
        est, se, df = stats[k]
        fraction = min(n1, n2) / planned
        if pooled:
            prefix = tuple((min(a, b) / planned, float(a + b - 2)) for a, b in sizes[:k + 1])
            look = tree.look(prefix)
            crossed[:, k] = t_crosses(est / se, df, look.nominal_p, d.alternative)
        else:
            # A look's nominal level never exceeds the one-sided alpha spent by then ({T_k >= c_k}
            # lies inside "crossed by look k"), so only streams whose p-value is below that bound
            # can cross: only their boundaries (one per distinct df path) are computed.
            bound = _one_sided_spent(d, fraction)
            p_min = np.minimum(special.stdtr(df, -est / se), special.stdtr(df, est / se))
            candidates = np.flatnonzero(p_min <= bound)
            nominal = np.zeros(streams)
            cache = {}
            for i in candidates:
                key = tuple(models[i, :k + 1])
                if key not in cache:
                    prefix = tuple((min(a, b) / planned, m) for (a, b), m in zip(sizes[:k + 1], key))
                    cache[key] = tree.look(prefix).nominal_p
                nominal[i] = cache[key]
            crossed[:, k] = t_crosses(est / se, df, nominal, d.alternative)
    stop = first_stop(crossed)
    stops = []
    for i in range(min(check, streams)):
        looks = [{("total", 0, ""): _moments(x[i, :n1]), ("total", 1, ""): _moments(y[i, :n2])} for n1, n2 in sizes]
        stops.append(decided_at(replay(d, looks, None)[0]))
    check_replay(f"{method} {spending}", stop[:check], stops)
    return stop, tree, (x, y, stats, models)


def rates_row(rng, streams, spending, check, sizes, rates_, null_difference=0.0, alternative="two-sided",
              alpha=ALPHA):
    planned = min(sizes[-1])
    d = design("proportions", planned=planned, spending=spending, alternative=alternative, alpha=alpha,
               null_difference=null_difference)
    tree = BoundaryTree(d)
    n1_max, n2_max = sizes[-1]
    a = rng.random((streams, n1_max)) < rates_[0]
    b = rng.random((streams, n2_max)) < rates_[1]
    ca, cb = np.cumsum(a, axis=1), np.cumsum(b, axis=1)
    crossed = np.zeros((streams, len(sizes)), bool)
    for k, (n1, n2) in enumerate(sizes):
        look = tree.look(tuple(min(p, q) / planned for p, q in sizes[:k + 1]))
        z = score_statistics(ca[:, n1 - 1], n1, cb[:, n2 - 1], n2, null_difference)
        crossed[:, k] = z_crosses(np.nan_to_num(z, nan=0.0), look.z, alternative)
    stop = first_stop(crossed)
    stops = []
    for i in range(min(check, streams)):
        looks = [{("total", 0, ""): _moments(a[i, :n1]), ("total", 1, ""): _moments(b[i, :n2])} for n1, n2 in sizes]
        stops.append(decided_at(replay(d, looks, None)[0]))
    check_replay(f"rates {rates_}", stop[:check], stops)
    return stop, tree, (ca, cb)


def crews_row(rng, streams, spending, check, crews, per_look=20, looks=5, icc=0.1, truth=0.0):
    c1, c2 = crews
    planned = looks * per_look * min(c1, c2)
    d = design("welch", planned=planned, spending=spending,
               clustering={"cluster_by": None, "cluster_column": "crew"}, min_clusters=2 * min(crews))
    tree = BoundaryTree(d)
    sb, sw = math.sqrt(icc), math.sqrt(1 - icc)
    effect1 = truth + sb * rng.standard_normal((streams, c1))
    effect2 = sb * rng.standard_normal((streams, c2))
    # Crew sums per look: the look's events are per_look new values per crew.
    inc1 = per_look * effect1[:, :, None] + sw * math.sqrt(per_look) * rng.standard_normal((streams, c1, looks))
    inc2 = per_look * effect2[:, :, None] + sw * math.sqrt(per_look) * rng.standard_normal((streams, c2, looks))
    sums1, sums2 = np.cumsum(inc1, axis=2), np.cumsum(inc2, axis=2)
    crossed = np.zeros((streams, looks), bool)
    results = []
    prefix = ()
    for k in range(looks):
        size = per_look * (k + 1)
        est, se = cr2_nested(sums1[:, :, k], sums2[:, :, k], size)
        df = _bm_df(c1, c2, size)
        prefix = prefix + ((size * min(c1, c2) / planned, float(df)),)
        look = tree.look(prefix)
        crossed[:, k] = t_crosses(est / se, df, look.nominal_p, d.alternative)
        results.append((est, se, df))
    stop = first_stop(crossed)
    # Sums of squares for the replay's cells: drawn per crew consistently with the sums is not needed
    # by the statistic (CR2 needs sums only), so the replay gives each crew's values as one cell.
    stops = []
    for i in range(min(check, streams)):
        cells_per_look = []
        for k in range(looks):
            size = per_look * (k + 1)
            cells = {("total", 0, ""): (c1 * size, float(sums1[i, :, k].sum()), float(size * c1 * 4.0)),
                     ("total", 1, ""): (c2 * size, float(sums2[i, :, k].sum()), float(size * c2 * 4.0))}
            for j in range(c1):
                cells[("cluster", 0, f"a{j}")] = (size, float(sums1[i, j, k]), float(size * 4.0))
            for j in range(c2):
                cells[("cluster", 1, f"b{j}")] = (size, float(sums2[i, j, k]), float(size * 4.0))
            cells_per_look.append(cells)
        stops.append(decided_at(replay(d, cells_per_look, None)[0]))
    check_replay(f"crews {crews}", stop[:check], stops)
    return stop, tree, results


def _bm_df(c1, c2, size):
    groups = [0] * c1 + [1] * c2
    keys = [f"k{i}" for i in range(c1 + c2)]
    # Bell–McCaffrey df depend on the cluster sizes only: ask the module itself.
    r = clustered.cluster_robust_difference(groups, keys, [size] * (c1 + c2),
                                            [float(i % 3) for i in range(c1 + c2)], 0.0, variance="cr2")
    return r.df


def days_row(rng, streams, spending, check, first=10, last=20, per_day=40, icc=0.05):
    d = design("welch", planned=last * per_day, spending=spending,
               clustering={"cluster_by": "day", "cluster_column": None}, min_clusters=first)
    tree = BoundaryTree(d)
    sb, sw = math.sqrt(icc), math.sqrt(1 - icc)
    day1 = per_day * sb * rng.standard_normal((streams, last)) + sw * math.sqrt(per_day) * rng.standard_normal((streams, last))
    day2 = per_day * sb * rng.standard_normal((streams, last)) + sw * math.sqrt(per_day) * rng.standard_normal((streams, last))
    looks = list(range(first, last + 1))
    crossed = np.zeros((streams, len(looks)), bool)
    prefix = ()
    for k, g in enumerate(looks):
        counts = np.full(g, per_day)
        est, se = cr1_shared(day1[:, :g], day2[:, :g], counts, counts)
        prefix = prefix + ((g / last, float(g - 1)),)
        look = tree.look(prefix)
        crossed[:, k] = t_crosses(est / se, g - 1, look.nominal_p, d.alternative)
    stop = first_stop(crossed)
    stops = []
    for i in range(min(check, streams)):
        cells_per_look = []
        for g in looks:
            cells = {("total", 0, ""): (per_day * g, float(day1[i, :g].sum()), 0.0),
                     ("total", 1, ""): (per_day * g, float(day2[i, :g].sum()), 0.0)}
            for j in range(g):
                cells[("cluster", 0, f"2026-01-{j + 1:02d}")] = (per_day, float(day1[i, j]), 0.0)
                cells[("cluster", 1, f"2026-01-{j + 1:02d}")] = (per_day, float(day2[i, j]), 0.0)
            cells_per_look.append(cells)
        stops.append(decided_at(replay(d, cells_per_look, None)[0]))
    check_replay(f"days {spending}", stop[:check], stops)
    return stop


def nominal_paired(rng, streams, spending, pairs=range(3, 16)):
    """The old nominal-level rule on the same kind of streams (for the table's reference column)."""
    from monitor.stats.boundaries import SequentialBoundary

    pairs = list(pairs)
    top = pairs[-1]
    b = SequentialBoundary(ALPHA, spending, "two-sided")
    diffs = rng.standard_normal((streams, top))
    alarm = np.zeros(streams, bool)
    for n in pairs:
        look = b.add_look(n / top)
        mean, se = paired_t(diffs, n)
        alarm |= t_crosses(mean / se, n - 1, look.nominal_p, "two-sided")
    return alarm


# --------------------------------------------------------------------------- inference rows


def pivot_at_truth(tree_boundary, stop_index, estimate, se, truth, null_difference, dfs=None,
                   statistic_at=None, two_sided=True):
    looks = tree_boundary.looks[:stop_index + 1]
    fractions = [b.fraction for b in looks]
    zs = [b.z for b in looks]
    if statistic_at is None:
        def statistic_at(delta):
            return (estimate - delta) / se
    pivot = StagewisePivot(fractions, zs, stop_index + 1, statistic_at, se, null_difference, two_sided,
                           None if dfs is None else list(dfs[:stop_index + 1]))
    return pivot(truth)


def summarise_pivots(g):
    g = np.asarray(g)
    n = g.size
    below = float(np.mean(g >= 0.5))
    cover = float(np.mean((g >= ALPHA / 2) & (g <= 1 - ALPHA / 2)))
    return {"streams": n, "estimate_at_or_below_truth": below, "se_below": math.sqrt(0.25 / n),
            "coverage": cover, "se_coverage": math.sqrt(max(cover * (1 - cover), ALPHA * (1 - ALPHA)) / n)}


def inference_paired(rng, streams, null_difference, truth=0.8, pairs=range(4, 13), full=3):
    pairs = list(pairs)
    top = pairs[-1]
    d = design("paired", planned=top, spending="obrien-fleming", null_difference=null_difference,
               pairing={"pair_by": None, "pair_column": "pair", "shift_starts": [], "min_pairs": pairs[0]})
    tree = BoundaryTree(d)
    diffs = truth + rng.standard_normal((streams, top))
    crossed = np.zeros((streams, len(pairs)), bool)
    prefix = ()
    per_look = []
    for k, n in enumerate(pairs):
        prefix = prefix + ((n / top, float(n - 1)),)
        look = tree.look(prefix)
        mean, se = paired_t(diffs, n)
        crossed[:, k] = t_crosses((mean - null_difference) / se, n - 1, look.nominal_p, "two-sided")
        per_look.append((mean, se))
    stop = first_stop(crossed)
    stop = np.where(stop < 0, len(pairs) - 1, stop)
    full_boundary = tree.boundary(prefix)
    dfs = [float(n - 1) for n in pairs]
    g = []
    for i in range(streams):
        k = int(stop[i])
        mean, se = per_look[k][0][i], per_look[k][1][i]
        g.append(pivot_at_truth(full_boundary, k, mean, se, truth, null_difference, dfs))
    _check_full(d, g, truth, full, lambda i: [
        {**{("total", 0, ""): _moments(diffs[i, :n]), ("total", 1, ""): _moments(np.zeros(n))},
         **{("pair", gi, f"p{j:03d}"): _moments(diffs[i, j:j + 1] if gi == 0 else np.zeros(1))
            for j in range(n) for gi in (0, 1)}} for n in pairs])
    return summarise_pivots(g)


def _check_full(design_, g, truth, count, cells_for):
    """The first ``count`` streams solved in full by decide: its figures agree with G(truth)."""
    for i in range(count):
        decisions, boundary = replay(design_, cells_for(i), None)
        # replay stops at the stop look; decide's after_stop is on the last Decision.
        b = new_boundary(design_)
        last_fraction = 0.0
        after = None
        for cells in cells_for(i):
            evidence = weigh(LookInputs(design_, cells, None, 0, last_fraction))
            decision = decide(evidence, b if evidence.tests else None)
            if decision.boundary is not None:
                last_fraction = decision.boundary.fraction
            if decision.stopped:
                after = decision.after_stop
                break
        if after is None or "median_unbiased_estimate" not in after:
            raise SystemExit(f"stream {i}: no adjusted inference at the stop ({after})")
        below = after["median_unbiased_estimate"] <= truth
        low, high = after["adjusted_ci"]
        covered = (low is None or low <= truth) and (high is None or truth <= high)
        if below != (g[i] >= 0.5) or covered != (ALPHA / 2 <= g[i] <= 1 - ALPHA / 2):
            raise SystemExit(f"stream {i}: decide's adjusted figures disagree with the pivot at the truth "
                             f"({after}, G = {g[i]})")


def inference_welch(rng, streams, null_difference, truth=1.2, full=3):
    sizes = [(4 * k, 8 * k) for k in range(1, 5)]
    d = design("welch", planned=min(sizes[-1]), spending="obrien-fleming", null_difference=null_difference)
    tree = BoundaryTree(d)
    x = truth + rng.standard_normal((streams, sizes[-1][0]))
    y = 2.0 * rng.standard_normal((streams, sizes[-1][1]))
    stats = [two_sample(x[:, :a], y[:, :b], False) for a, b in sizes]
    dfs = np.column_stack([s[2] for s in stats])
    models = np.array([model_df(row) for row in dfs])
    g = []
    for i in range(streams):
        prefix = ()
        stop_k = len(sizes) - 1
        for k, (a, b) in enumerate(sizes):
            prefix = prefix + ((min(a, b) / min(sizes[-1]), float(models[i, k])),)
            look = tree.look(prefix)
            est, se, df = stats[k][0][i], stats[k][1][i], stats[k][2][i]
            if t_crosses(np.array([(est - null_difference) / se]), df, look.nominal_p, "two-sided")[0]:
                stop_k = k
                break
        boundary = tree.boundary(prefix)
        est, se = stats[stop_k][0][i], stats[stop_k][1][i]
        g.append(pivot_at_truth(boundary, stop_k, est, se, truth, null_difference,
                                [stats[j][2][i] for j in range(stop_k + 1)]))
    _check_full(d, g, truth, full, lambda i: [
        {("total", 0, ""): _moments(x[i, :a]), ("total", 1, ""): _moments(y[i, :b])} for a, b in sizes])
    return summarise_pivots(g)


def inference_crews(rng, streams, null_difference, truth=0.6, crews=(5, 5), per_look=20, looks=4, icc=0.1, full=3):
    c1, c2 = crews
    planned = looks * per_look * min(crews)
    d = design("welch", planned=planned, spending="obrien-fleming", null_difference=null_difference,
               clustering={"cluster_by": None, "cluster_column": "crew"}, min_clusters=2 * min(crews))
    tree = BoundaryTree(d)
    sb, sw = math.sqrt(icc), math.sqrt(1 - icc)
    e1 = truth + sb * rng.standard_normal((streams, c1))
    e2 = sb * rng.standard_normal((streams, c2))
    inc1 = per_look * e1[:, :, None] + sw * math.sqrt(per_look) * rng.standard_normal((streams, c1, looks))
    inc2 = per_look * e2[:, :, None] + sw * math.sqrt(per_look) * rng.standard_normal((streams, c2, looks))
    s1, s2 = np.cumsum(inc1, axis=2), np.cumsum(inc2, axis=2)
    per = []
    prefix = ()
    crossed = np.zeros((streams, looks), bool)
    dfs = []
    for k in range(looks):
        size = per_look * (k + 1)
        est, se = cr2_nested(s1[:, :, k], s2[:, :, k], size)
        df = _bm_df(c1, c2, size)
        dfs.append(df)
        prefix = prefix + ((size * min(crews) / planned, float(df)),)
        look = tree.look(prefix)
        crossed[:, k] = t_crosses((est - null_difference) / se, df, look.nominal_p, "two-sided")
        per.append((est, se))
    stop = first_stop(crossed)
    stop = np.where(stop < 0, looks - 1, stop)
    boundary = tree.boundary(prefix)
    g = [pivot_at_truth(boundary, int(stop[i]), per[int(stop[i])][0][i], per[int(stop[i])][1][i], truth,
                        null_difference, dfs) for i in range(streams)]

    def cells_for(i):
        out = []
        for k in range(looks):
            size = per_look * (k + 1)
            cells = {("total", 0, ""): (c1 * size, float(s1[i, :, k].sum()), 0.0),
                     ("total", 1, ""): (c2 * size, float(s2[i, :, k].sum()), 0.0)}
            for j in range(c1):
                cells[("cluster", 0, f"a{j}")] = (size, float(s1[i, j, k]), 0.0)
            for j in range(c2):
                cells[("cluster", 1, f"b{j}")] = (size, float(s2[i, j, k]), 0.0)
            out.append(cells)
        return out

    _check_full(d, g, truth, full, cells_for)
    return summarise_pivots(g)


def inference_rates(rng, streams, null_difference, rates_=(0.30, 0.20), full=3):
    sizes = [(60 * k, 60 * k) for k in range(1, 6)]
    truth = rates_[0] - rates_[1]
    d = design("proportions", planned=sizes[-1][0], spending="obrien-fleming", null_difference=null_difference)
    tree = BoundaryTree(d)
    a = rng.random((streams, sizes[-1][0])) < rates_[0]
    b = rng.random((streams, sizes[-1][1])) < rates_[1]
    ca, cb = np.cumsum(a, axis=1), np.cumsum(b, axis=1)
    crossed = np.zeros((streams, len(sizes)), bool)
    for k, (n1, n2) in enumerate(sizes):
        look = tree.look(tuple(p / sizes[-1][0] for p, _ in sizes[:k + 1]))
        z = score_statistics(ca[:, n1 - 1], n1, cb[:, n2 - 1], n2, null_difference)
        crossed[:, k] = z_crosses(np.nan_to_num(z, nan=0.0), look.z, "two-sided")
    stop = first_stop(crossed)
    stop = np.where(stop < 0, len(sizes) - 1, stop)
    boundary = tree.boundary(tuple(p / sizes[-1][0] for p, _ in sizes))
    g = []
    for i in range(streams):
        k = int(stop[i])
        n1, n2 = sizes[k]
        x1, x2 = int(ca[i, n1 - 1]), int(cb[i, n2 - 1])
        p1, p2 = x1 / n1, x2 / n2
        se = math.sqrt(p1 * (1 - p1) / n1 + p2 * (1 - p2) / n2)

        def at(delta, x1=x1, x2=x2, n1=n1, n2=n2):
            return score_statistic(x1, n1, x2, n2, min(max(delta, -1 + 1e-9), 1 - 1e-9))[0]

        g.append(pivot_at_truth(boundary, k, p1 - p2, se, truth, null_difference, statistic_at=at))
    _check_full(d, g, truth, full, lambda i: [
        {("total", 0, ""): _moments(a[i, :n1]), ("total", 1, ""): _moments(b[i, :n2])} for n1, n2 in sizes])
    return summarise_pivots(g)


def rci_rates(rng, streams, spending="obrien-fleming", rates_=(0.10, 0.20)):
    """Simultaneous coverage of the repeated score intervals at 3:1 group sizes (75/25 … 375/125)."""
    sizes = [(75 * k, 25 * k) for k in range(1, 6)]
    d = design("proportions", planned=sizes[-1][1], spending=spending)
    tree = BoundaryTree(d)
    truth = rates_[0] - rates_[1]
    a = rng.random((streams, sizes[-1][0])) < rates_[0]
    b = rng.random((streams, sizes[-1][1])) < rates_[1]
    ca, cb = np.cumsum(a, axis=1), np.cumsum(b, axis=1)
    covered = np.ones(streams, bool)
    for k, (n1, n2) in enumerate(sizes):
        look = tree.look(tuple(q / sizes[-1][1] for _, q in sizes[:k + 1]))
        # The score interval holds the truth exactly when the score test of the truth does not reject.
        z = score_statistics(ca[:, n1 - 1], n1, cb[:, n2 - 1], n2, truth)
        covered &= ~(np.abs(np.nan_to_num(z, nan=0.0)) >= look.z)
    p, se = rate(covered)
    return {"streams": streams, "coverage": p, "se": se}


# --------------------------------------------------------------------------- main


def null_rows(streams, seed, check):
    rng = np.random.default_rng(seed)
    rows = []

    def add(name, stop, reference=None):
        p, se = rate(stop >= 0)
        rows.append({"row": name, "streams": int(stop.size), "false_alarms": p, "se": se,
                     "within": p <= ALPHA + 3 * se, "reference": reference})

    for spending in ("pocock", "obrien-fleming"):
        stop, _, _ = paired_row(rng, streams, spending, check)
        old = nominal_paired(rng, streams, spending)
        add(f"paired 3…15 pairs, {spending}", stop, rate(old)[0])
    for spending in ("pocock", "obrien-fleming"):
        stop, _, _ = two_sample_row(rng, streams, spending, check, [(n, n) for n in range(5, 26, 5)])
        add(f"pooled 5…25 per group, {spending}", stop)
    for spending in ("pocock", "obrien-fleming"):
        stop, _, _ = two_sample_row(rng, streams, spending, check, [(2 * k, 6 * k) for k in range(1, 6)],
                                    sds=(1.0, 3.0), pooled=False)
        add(f"Welch 10 vs 30, sd 1 and 3, {spending}", stop)
    for spending in ("pocock", "obrien-fleming"):
        stop, _, _ = rates_row(rng, streams, spending, check, [(100 * k, 100 * k) for k in range(1, 6)],
                               (0.05, 0.05))
        add(f"rates 0.05 vs 0.05, 100…500 per group, {spending}", stop)
    stop, _, _ = rates_row(rng, streams, "obrien-fleming", check, [(100 * k, 100 * k) for k in range(1, 6)],
                           (0.02, 0.05), null_difference=-0.03, alternative="greater", alpha=0.025)
    p, se = rate(stop >= 0)
    rows.append({"row": "rates 0.02 vs 0.05, margin −0.03, one-sided 0.025", "streams": int(stop.size),
                 "false_alarms": p, "se": se, "within": p <= 0.025 + 3 * se, "reference": None, "alpha": 0.025})
    for crews in ((3, 7), (5, 5)):
        stop, _, _ = crews_row(rng, streams, "obrien-fleming", check, crews)
        add(f"crews {crews[0]} vs {crews[1]} (CR2), O'Brien–Fleming", stop)
    for spending in ("pocock", "obrien-fleming"):
        stop = days_row(rng, streams, spending, check)
        add(f"shared days 10…20 (CR1), {spending}", stop)
    return rows


def inference_rows(streams, seed, full=2):
    rng = np.random.default_rng(seed + 1000)
    rows = []
    for label, fn, nulls in (("paired, truth 0.8", inference_paired, (0.0, 0.5)),
                             ("Welch, truth 1.2", inference_welch, (0.0, 0.6)),
                             ("crews 5 vs 5, truth 0.6", inference_crews, (0.0, 0.3)),
                             ("rates 0.30 vs 0.20", inference_rates, (0.0, 0.05))):
        for null in nulls:
            out = fn(rng, streams, null, full=full)
            out["row"] = f"{label}, null difference {null:g}"
            rows.append(out)
    cov = rci_rates(rng, streams * 10)
    cov["row"] = "rates 0.10 vs 0.20 at 3:1, repeated score intervals"
    return rows, cov


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--streams", type=int, default=100_000)
    parser.add_argument("--inference-streams", type=int, default=300)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--check", type=int, default=20, help="streams replayed through weigh/decide per row")
    parser.add_argument("--check-inference", type=int, default=2,
                        help="stopped streams per inference row solved in full by decide")
    parser.add_argument("--skip-null", action="store_true")
    parser.add_argument("--skip-inference", action="store_true")
    args = parser.parse_args(argv)
    started = time.perf_counter()
    if not args.skip_null:
        print(f"False alarms, {args.streams:,} streams per row, seed {args.seed} (alpha 0.05 unless said)")
        print(f"{'design':<56} {'false alarms':>12} {'MC s.e.':>8} {'<= a+3se':>9} {'old rule':>9}")
        for r in null_rows(args.streams, args.seed, args.check):
            ref = "" if r["reference"] is None else f"{r['reference']:.4f}"
            print(f"{r['row']:<56} {r['false_alarms']:>12.4f} {r['se']:>8.4f} {str(r['within']):>9} {ref:>9}",
                  flush=True)
    if not args.skip_inference:
        print(f"\nAdjusted inference after a stop, {args.inference_streams:,} streams per row "
              f"(O'Brien–Fleming, two-sided 0.05)")
        print(f"{'design':<52} {'P(est <= truth)':>15} {'s.e.':>6} {'coverage':>9} {'s.e.':>6}")
        rows, cov = inference_rows(args.inference_streams, args.seed, args.check_inference)
        for r in rows:
            print(f"{r['row']:<52} {r['estimate_at_or_below_truth']:>15.3f} {r['se_below']:>6.3f} "
                  f"{r['coverage']:>9.3f} {r['se_coverage']:>6.3f}", flush=True)
        print(f"{cov['row']:<52} simultaneous coverage {cov['coverage']:.4f} (s.e. {cov['se']:.4f}, "
              f"{cov['streams']:,} streams)")
    print(f"\n{time.perf_counter() - started:.0f} s")


if __name__ == "__main__":
    main()
