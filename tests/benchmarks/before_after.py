"""Before/after monitoring of two sites with a persistent gap: false alarms, power and estimate.

Scenario (invented, realistic): a change goes live at site 1; site 2 carries on
as before. The two sites never ran alike (group 1 − group 2 = ``--gap`` before
the change, for ever), each has its own day-to-day shocks and both share a day
shock (weather, supply). A comparison is planned with
:func:`monitor.stats.before_after.plan_before_after` for a change worth
detecting, with a 28-day baseline and one look a day from day
``--first-look-day`` after the start (the config's ``min_clusters``) to the
planned last day, two-sided, O'Brien–Fleming spending.

Per (stream, site, day) the count is Poisson, and the day's sum and within-day
sum of squares are drawn exactly (:func:`monitor.stats.site_pairs.draw_site_pairs`).
Each stream is watched by two monitors, look by look
(:func:`monitor.stats.site_pairs.monitor_site_pairs`):

* **after-only**: a day-clustered comparison of the days since the start (CR1,
  t on days − 1, fraction = days / planned days): what a comparison with a
  start and no baseline reports;
* **before/after**: the difference in differences against the baseline, CR2
  standard error with Bell–McCaffrey degrees of freedom (the library default),
  fraction from :func:`monitor.stats.before_after.information_fraction`;
  beside it the same looks with CR1 and t on clusters − 1.

How the look's own decision step is used
----------------------------------------
Every monitor decides as the look does (``monitor.look.decision``): its t
statistic's one-sided p-value at its own df against the nominal level of the
look's exact sequential t boundary, the boundary being the decision step's own
object (``new_boundary`` of a before/after ``Design``: a ``SequentialTBoundary``).
Calling the look once per stream and day would take hours, so the statistics
come vectorised from :func:`monitor.stats.site_pairs.monitor_site_pairs` and the
boundaries from a tree keyed by each look's (fraction, model df) — the whole
number running maximum of the df, which is all the boundary depends on — each
node computed once (a few dozen for 20,000 streams). The reported estimate after
a stop is the look's: ``stats.inference.adjusted_inference`` with the stop look's
estimate, standard error and the looks' df.

``--check`` streams (default 20) are then replayed look by look through
``weigh`` and ``decide`` themselves, from cells built as the look builds them
(baseline cells per day, the marker of a read baseline, cells per day since the
start): the statistic, its df, the decision and the figures after a stop must be
the vectorised ones, or the script stops with an error. One thing differs on
purpose: the look's fraction counts events over planned events per day, the
simulation counts days (they differ by the Poisson wobble of the daily counts),
so the replay is given the simulation's fraction.

Columns beside the before/after one: the same streams decided by the
nominal-level rule on z boundaries (what the look did before exact sequential
t), and CR1 with t on clusters − 1 decided by the look's rule.

The validation the before/after design must meet:

(a) no change: the before/after false-alarm rate within alpha + 3 Monte Carlo
    s.e. (the after-only rate beside it, expected near 1 with a gap);
(b) the planned change: power within 0.02 of the plan's;
(c) the reported estimate (the median-unbiased estimate the look gives after
    a stop, for efficacy or at the planned last day) has its median within Monte Carlo error of
    the change put in: the share of streams whose estimate is at or below the
    change is within 3 s.e. of 1/2 (classified by one evaluation of the pivot
    the look inverts, ``StagewisePivot``, at the change), and the change lies
    inside the 99 % distribution-free interval for the median of the estimates
    solved in full (order statistics; half-width / 2.576 is the s.e. quoted).

Run:  python tests/benchmarks/before_after.py --streams 20000 --seed 1
      python tests/benchmarks/before_after.py --streams 20000 --seed 1 --metric rate
(adjusted inference is about a second a stream: ``--solve-sample`` sets how many are solved in full)
"""

from __future__ import annotations

import argparse
import copy
import math
import sys
import time
from dataclasses import replace
from datetime import date, timedelta
from pathlib import Path

import numpy as np
from scipy import special, stats

# Run as a script from anywhere in the checkout.
sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from monitor.config import DEFAULT_MIN_CLUSTERS  # noqa: E402
from monitor.design import Design  # noqa: E402
from monitor.look.cells import BASELINE_READ  # noqa: E402
from monitor.look.decision import LookInputs, decide, new_boundary, weigh  # noqa: E402
from monitor.stats.before_after import information_fraction, plan_before_after  # noqa: E402
from monitor.stats.inference import StagewisePivot, adjusted_inference  # noqa: E402
from monitor.stats.site_pairs import draw_site_pairs, monitor_site_pairs  # noqa: E402

# Pick seconds at two depots, and a first-contact resolution rate at two desks.
SCENARIOS = {
    "mean": dict(level=90.0, sd=50.0, events_per_day=400, day_sd=4.0, shared_day_sd=6.0, gap=8.0,
                 difference=-6.0, unit="s"),
    "rate": dict(level=0.70, events_per_day=300, day_sd=0.015, shared_day_sd=0.02, gap=0.05,
                 difference=0.03, unit=""),
}
BASELINE_DAYS = 28
FIRST_DAY = date(2026, 1, 1)   # the baseline's first day (the cells' day keys; any date serves)


def monte_carlo_se(rate, streams):
    return math.sqrt(rate * (1.0 - rate) / streams)


def median_interval(values, level=0.99):
    """Distribution-free interval for the median from order statistics (binomial, n/2 ± z·√n/2)."""
    values = np.sort(values[np.isfinite(values)])
    n = values.size
    z = stats.norm.isf((1 - level) / 2)
    low = max(0, int(math.floor(n / 2 - z * math.sqrt(n) / 2)))
    high = min(n - 1, int(math.ceil(n / 2 + z * math.sqrt(n) / 2)))
    return float(np.median(values)), float(values[low]), float(values[high]), z


def plan_for(metric, alpha, power, spending, first_look_day):
    s = SCENARIOS[metric]
    spread = dict(sd=s["sd"]) if metric == "mean" else dict(rate=s["level"] + s["gap"])
    return plan_before_after(s["difference"], **spread, day_sd=s["day_sd"], events_per_day=s["events_per_day"],
                             baseline_days=BASELINE_DAYS, alpha=alpha, power=power, spending=spending,
                             first_look_day=first_look_day)


def design_for(metric, plan, alpha, spending, first_look_day):
    """The frozen before/after design the look would hold for this plan (its stored form read back)."""
    start = FIRST_DAY + timedelta(days=BASELINE_DAYS)
    s = SCENARIOS[metric]
    return Design.from_stored({
        "method": "proportions" if metric == "rate" else "welch",
        "metric": "proportion" if metric == "rate" else "mean",
        "plan": {"planned_per_group": int(plan.planned_per_group)}, "spending": spending,
        "alternative": "two-sided", "alpha": alpha, "null_difference": 0.0, "shift": 0.0,
        "groups": ["site1", "site2"], "futility": False, "sigmas": None, "pairing": None, "clustering": None,
        "min_clusters": first_look_day, "table": "events", "group_column": "site", "value_column": "value",
        "time_column": "done_at", "timezone": "UTC",
        "start": f"{start.isoformat()}T00:00:00+00:00",
        "before_after": {"baseline_from": f"{FIRST_DAY.isoformat()}T00:00:00+00:00",
                         "baseline_to": f"{start.isoformat()}T00:00:00+00:00",
                         "baseline_days": float(BASELINE_DAYS), "events_per_day": float(s["events_per_day"])}})


class BoundaryTree:
    """The decision step's boundary after every distinct sequence of (fraction, model df), each computed once."""

    def __init__(self, design):
        self.root = new_boundary(design)
        self.nodes = {(): self.root}

    def boundary(self, prefix):
        node = self.nodes.get(prefix)
        if node is None:
            node = copy.deepcopy(self.boundary(prefix[:-1]))
            node.add_look(*prefix[-1])
            self.nodes[prefix] = node
        return node


def model_df(dfs):
    """Per stream and look, the whole-number running maximum of the df (what the boundary depends on)."""
    return np.maximum.accumulate(np.floor(np.minimum(dfs, 1e6)), axis=1)


def fractions_for(days, plan, before_after):
    """The looks' fractions as the simulation counts them (days); the last look spends what is left."""
    days = np.asarray(days, dtype=float)
    if before_after:
        out = np.atleast_1d(information_fraction(days, plan.after_days_exact, BASELINE_DAYS)).astype(float)
    else:
        out = days / plan.after_days_exact
    out[-1] = max(1.0, out[-1])
    return out


def sequential_t_stops(tree, fractions, statistics, dfs):
    """Look index of the first crossing per stream (-1: none) and each stream's tree prefix at its stop.

    The look's rule: the one-sided p-value at the look's own df against the nominal level of
    the exact sequential t boundary at this look (two-sided: either direction).
    """
    streams, looks = statistics.shape
    models = model_df(dfs)
    stop = np.full(streams, -1)
    keys = [()] * streams
    for j in range(looks):
        open_ = np.flatnonzero(stop < 0)
        if open_.size == 0:
            break
        groups = {}
        for i in open_:
            keys[i] = keys[i] + ((float(fractions[j]), float(models[i, j])),)
            groups.setdefault(keys[i], []).append(i)
        for key, members in groups.items():
            nominal = tree.boundary(key).looks[-1].nominal_p
            members = np.asarray(members)
            t = statistics[members, j]
            p = np.minimum(special.stdtr(dfs[members, j], -t), special.stdtr(dfs[members, j], t))
            stop[members[p <= nominal]] = j
    return stop, keys


def nominal_level_stops(fractions, statistics, dfs, alpha, spending):
    """The old rule: z boundaries (recursive integration) read as a nominal level for t."""
    from monitor.stats.site_pairs import daily_boundaries

    nominal = daily_boundaries(fractions, alpha, spending)
    p = np.minimum(special.stdtr(dfs, -statistics), special.stdtr(dfs, statistics))
    crossed = p <= nominal[None, :]
    return np.where(crossed.any(axis=1), crossed.argmax(axis=1), -1)


def run(metric, change, streams, seed, plan, spending, first_look_day, alpha, chunk=2000):
    """Draw and monitor ``streams`` site pairs with ``change`` put in.

    Returns the per-stream outcomes of ``monitor_site_pairs`` (concatenated) with every look's
    figures, and the data of the first ``keep`` streams for the replay.
    """
    s = SCENARIOS[metric]
    rng = np.random.default_rng(seed)
    draw = dict(sd=s["sd"], level=s["level"]) if metric == "mean" else dict(rate=s["level"])
    parts, first_data = [], None
    done = 0
    while done < streams:
        size = min(chunk, streams - done)
        data = draw_site_pairs(size, baseline_days=BASELINE_DAYS, after_days=plan.after_days,
                               events_per_day=s["events_per_day"], gap=s["gap"], change=change,
                               day_sd=s["day_sd"], shared_day_sd=s["shared_day_sd"], rng=rng, **draw)
        if first_data is None:
            first_data = data
        spreads = dict(sd=s["sd"], day_sd=s["day_sd"]) if metric == "mean" else {}
        out = monitor_site_pairs(data, planned_after_days=plan.after_days_exact, first_look_day=first_look_day,
                                 alpha=alpha, spending=spending, keep_looks=True, **spreads)
        parts.append(out)
        done += size
    merged = {}
    for key, value in parts[0].to_dict().items():
        if isinstance(value, np.ndarray):
            merged[key] = np.concatenate([p.to_dict()[key] for p in parts])
    for key in ("estimate", "standard_error", "df", "statistic", "after_statistic", "after_df",
                "cr1_statistic", "cr1_df"):
        merged[key] = np.concatenate([p.did_looks[key] for p in parts])
    merged["days"] = parts[0].did_looks["days"]
    return merged, first_data


def decide_all(out, plan, design, alpha, spending):
    """Stops of every monitor by the look's rule, and the before/after tree for the figures after a stop."""
    days = out["days"]
    did_fractions = fractions_for(days, plan, True)
    after_fractions = fractions_for(days, plan, False)
    did_tree = BoundaryTree(design)
    stops = {}
    stops["did"], keys = sequential_t_stops(did_tree, did_fractions, out["statistic"], out["df"])
    stops["after_only"], _ = sequential_t_stops(BoundaryTree(design), after_fractions, out["after_statistic"],
                                                out["after_df"])
    stops["did_cr1"], _ = sequential_t_stops(BoundaryTree(design), did_fractions, out["cr1_statistic"],
                                             out["cr1_df"])
    stops["did_nominal"] = nominal_level_stops(did_fractions, out["statistic"], out["df"], alpha, spending)
    return stops, did_tree, keys, did_fractions


def reported_estimate(out, stops, tree, keys, i, design):
    """The look's figures after the stop of stream ``i`` (efficacy, or the plan complete at the last day)."""
    j = int(stops["did"][i]) if stops["did"][i] >= 0 else out["days"].size - 1
    boundary = tree.boundary(keys[i][:j + 1])
    looks = boundary.looks[:j + 1]
    return adjusted_inference([b.fraction for b in looks], [b.z for b in looks], j + 1,
                              float(out["estimate"][i, j]), float(out["standard_error"][i, j]),
                              null_difference=design.null_difference, alternative=design.alternative,
                              alpha=design.alpha, dfs=[float(d) for d in out["df"][i, :j + 1]])


def pivot_at_truth(out, stops, tree, keys, i, design, truth):
    """``G(truth)`` of the pivot the look's adjusted figures invert: at least 1/2 exactly when the
    median-unbiased estimate is at or below the truth (one evaluation instead of a root search)."""
    j = int(stops["did"][i]) if stops["did"][i] >= 0 else out["days"].size - 1
    looks = tree.boundary(keys[i][:j + 1]).looks[:j + 1]
    estimate, se = float(out["estimate"][i, j]), float(out["standard_error"][i, j])
    pivot = StagewisePivot([b.fraction for b in looks], [b.z for b in looks], j + 1,
                           lambda delta: (estimate - delta) / se, se, design.null_difference, True,
                           [float(d) for d in out["df"][i, :j + 1]])
    return pivot(truth)


def look_cells(data, i, days_after):
    """The running cells the look holds for stream ``i`` after ``days_after`` days since the start."""
    cells = {BASELINE_READ: (1, 0.0, 0.0)}
    b = data.baseline_days

    def add(kind, gi, key, n, s1, s2):
        old = cells.get((kind, gi, key), (0, 0.0, 0.0))
        cells[(kind, gi, key)] = (old[0] + n, old[1] + s1, old[2] + s2)

    for d in range(b + days_after):
        key = (FIRST_DAY + timedelta(days=d)).isoformat()
        for gi in (0, 1):
            n, s1 = int(data.n[i, gi, d]), float(data.sums[i, gi, d])
            s2 = float(data.within_ss[i, gi, d]) + s1 * s1 / n
            if d < b:
                add("baseline", gi, key, n, s1, s2)
                add("baseline_total", gi, "", n, s1, s2)
            else:
                add("day", gi, key, n, s1, s2)
                add("total", gi, "", n, s1, s2)
    return cells


def replay(out, data, stops, tree, keys, fractions, design, streams):
    """Streams decided look by look through weigh and decide; stop on any disagreement."""
    first = int(out["days"][0])
    for i in range(streams):
        boundary = new_boundary(design)
        last_fraction, stopped_at, after = 0.0, -1, None
        for j, day in enumerate(out["days"]):
            evidence = weigh(LookInputs(design, look_cells(data, i, int(day)), None, 0, last_fraction))
            st = evidence.stat
            if not (math.isclose(st.estimate, out["estimate"][i, j], rel_tol=1e-7, abs_tol=1e-9)
                    and math.isclose(st.standard_error, out["standard_error"][i, j], rel_tol=1e-7)
                    and math.isclose(st.df, out["df"][i, j], rel_tol=1e-7)):
                raise SystemExit(f"stream {i}, day {day}: the look's DiD ({st.estimate}, {st.standard_error}, "
                                 f"{st.df}) is not the vectorised one ({out['estimate'][i, j]}, "
                                 f"{out['standard_error'][i, j]}, {out['df'][i, j]})")
            if not evidence.tests:
                raise SystemExit(f"stream {i}, day {day}: the look does not test (first deciding day {first})")
            decision = decide(replace(evidence, fraction=float(fractions[j])), boundary)
            last_fraction = decision.boundary.fraction
            if decision.stopped:
                stopped_at, after = (j if decision.decision == "difference_found" else -1), decision.after_stop
                break
        if stopped_at != stops["did"][i]:
            raise SystemExit(f"stream {i}: weigh/decide stop at look {stopped_at}, the vectorised decision at "
                             f"{stops['did'][i]}")
        if after is not None and "median_unbiased_estimate" in after:
            want = reported_estimate(out, stops, tree, keys, i, design).estimate
            if not math.isclose(after["median_unbiased_estimate"], want, rel_tol=1e-6, abs_tol=1e-9):
                raise SystemExit(f"stream {i}: the look's estimate after the stop {after['median_unbiased_estimate']} "
                                 f"is not the vectorised {want}")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--streams", type=int, default=4000, help="simulated comparisons per row (default 4000)")
    parser.add_argument("--seed", type=int, default=1, help="random seed (default 1)")
    parser.add_argument("--metric", choices=sorted(SCENARIOS), default="mean",
                        help="mean: pick seconds; rate: a 0/1 outcome (default mean)")
    parser.add_argument("--alpha", type=float, default=0.05, help="two-sided level (default 0.05)")
    parser.add_argument("--power", type=float, default=0.8, help="planned power (default 0.8)")
    parser.add_argument("--spending", default="obrien-fleming", help="spending function (default obrien-fleming)")
    parser.add_argument("--first-look-day", type=int, default=DEFAULT_MIN_CLUSTERS,
                        help=f"first deciding day after the start (default {DEFAULT_MIN_CLUSTERS}, "
                             f"the config's min_clusters)")
    parser.add_argument("--estimate-sample", type=int, default=2000,
                        help="streams whose median-unbiased estimate is placed against the change for (c) "
                             "(default 2000)")
    parser.add_argument("--solve-sample", type=int, default=300,
                        help="streams whose median-unbiased estimate is solved in full for its median "
                             "(default 300; about a second each)")
    parser.add_argument("--check", type=int, default=20,
                        help="streams per row replayed through weigh and decide (default 20)")
    args = parser.parse_args(argv)
    s = SCENARIOS[args.metric]
    unit = f" {s['unit']}" if s["unit"] else ""
    started = time.perf_counter()
    plan = plan_for(args.metric, args.alpha, args.power, args.spending, args.first_look_day)
    design = design_for(args.metric, plan, args.alpha, args.spending, args.first_look_day)
    print(f"{args.metric}: gap {s['gap']:g}{unit} before the change, events/site/day {s['events_per_day']}, "
          f"own day sd {s['day_sd']:g}, shared day sd {s['shared_day_sd']:g}; baseline {BASELINE_DAYS} days")
    print(f"plan: change {plan.difference:g}{unit}, power {plan.power:g}, {plan.spending}, daily looks from day "
          f"{args.first_look_day}: {plan.after_days_exact:.2f} days after the start (last look day "
          f"{plan.after_days}), inflation {plan.inflation:.3f} (t part {plan.t_inflation:.3f}, planned df "
          f"{plan.planned_df:.1f}); expected days at decision {plan.expected_days_null:.1f} (no change), "
          f"{plan.expected_days_alternative:.1f} (planned change)")
    rows_out = {}
    for label, change, seed in (("null", 0.0, args.seed), ("alt", plan.difference, args.seed + 1000)):
        out, data = run(args.metric, change, args.streams, seed, plan, args.spending, args.first_look_day,
                        args.alpha)
        stops, tree, keys, fractions = decide_all(out, plan, design, args.alpha, args.spending)
        replay(out, data, stops, tree, keys, fractions, design, min(args.check, data.n.shape[0]))
        rows_out[label] = (out, stops, tree, keys)
        print(f"{label}: {len(tree.nodes) - 1} before/after boundary nodes; {min(args.check, data.n.shape[0])} "
              f"streams replayed through weigh and decide agree")
    n = args.streams
    null, alt = rows_out["null"], rows_out["alt"]

    def rate(stops_or_flags):
        values = stops_or_flags >= 0 if stops_or_flags.dtype != bool else stops_or_flags
        r = float(np.mean(values))
        return r, monte_carlo_se(r, n)

    print(f"\n{n} streams per row, seed {args.seed}; rates with Monte Carlo s.e.; decided as the look decides "
          f"(exact sequential t) unless said")
    print(f"{'':34}{'after-only':>18}{'before/after':>18}{'b/a nominal rule':>18}{'b/a with CR1':>18}")
    for name, (out, stops, _, _) in (("(a) no change: false alarms", null), ("(b) planned change: power", alt)):
        cells = [f"{r:.4f} ({se:.4f})" for r, se in (rate(stops[k]) for k in
                                                       ("after_only", "did", "did_nominal", "did_cr1"))]
        print(f"{name:34}" + "".join(f"{c:>18}" for c in cells))
        fixed = [f"{r:.4f} ({se:.4f})" for r, se in (rate(out[k]) for k in ("after_only_fixed", "did_fixed"))]
        cr1_fixed = "{:.4f} ({:.4f})".format(*rate(out["did_cr1_fixed"]))
        print(f"{'    one test at the last day':34}{fixed[0]:>18}{fixed[1]:>18}{'':>18}{cr1_fixed:>18}")
    stopped_days = alt[0]["days"][alt[1]["did"][alt[1]["did"] >= 0]]
    print(f"    mean day of an efficacy stop under the planned change: {np.mean(stopped_days):.2f} "
          f"(plan's expected days at decision {plan.expected_days_alternative:.2f})")

    fa, fa_se = rate(null[1]["did"])
    power, power_se = rate(alt[1]["did"])
    verdicts = [
        ("(a) before/after false alarms <= alpha + 3 s.e.", fa <= args.alpha + 3 * fa_se,
         f"{fa:.4f} vs {args.alpha + 3 * fa_se:.4f}"),
        ("(b) |power - planned| <= 0.02", abs(power - plan.power) <= 0.02,
         f"{power:.4f} vs {plan.power:.2f} (s.e. {power_se:.4f})"),
    ]
    rng = np.random.default_rng(args.seed + 7)
    print("\n(c) estimates (medians with the 99 % order-statistic interval, Monte Carlo s.e. = half-width / "
          "2.576; the share of reported estimates at or below the change, from the pivot the look inverts)")
    for label, (out, stops, tree, keys), change in (("no change", null, 0.0), ("planned change", alt, plan.difference)):
        chosen = rng.choice(n, size=min(args.estimate_sample, n), replace=False)
        below = np.array([pivot_at_truth(out, stops, tree, keys, int(i), design, change) >= 0.5 for i in chosen])
        share, share_se = float(np.mean(below)), math.sqrt(0.25 / below.size)
        print(f"    {label:15} reported estimate at or below the change: {share:.4f} (s.e. {share_se:.4f}, "
              f"{below.size} streams)")
        verdicts.append((f"(c) {label}: P(reported <= change) within 3 s.e. of 1/2", abs(share - 0.5) <= 3 * share_se,
                         f"{share:.4f} (s.e. {share_se:.4f})"))
        solved = chosen[:min(args.solve_sample, chosen.size)]
        reported = np.array([reported_estimate(out, stops, tree, keys, int(i), design).estimate for i in solved])
        at_stop = np.where(stops["did"][chosen] >= 0, stops["did"][chosen], out["days"].size - 1)
        naive = out["estimate"][chosen, at_stop]
        final = out["estimate"][:, -1]
        for name, values in (("reported (median-unbiased at the stop)", reported),
                             ("naive DiD at the stop", naive),
                             ("DiD at the last planned day", final)):
            med, low, high, z = median_interval(values)
            mc = (high - low) / 2 / z
            print(f"    {label:15} {name:40} median {med:+.4f} [{low:+.4f}, {high:+.4f}] "
                  f"(s.e. {mc:.4f}, {values.size} streams); change put in {change:+g}")
            if name.startswith("reported"):
                verdicts.append((f"(c) {label}: change inside the median's interval", low <= change <= high,
                                 f"{med:+.4f} [{low:+.4f}, {high:+.4f}]"))
    after_only_fa, after_only_se = rate(null[1]["after_only"])
    print(f"\nside by side, no change: after-only {after_only_fa:.4f} (s.e. {after_only_se:.4f}) against "
          f"before/after {fa:.4f} (s.e. {fa_se:.4f})")
    for label, ok, figures in verdicts:
        print(f"{label:56} {figures:38} {'met' if ok else 'NOT MET'}")
    print(f"\n{time.perf_counter() - started:.1f} s")
    return 0 if all(ok for _, ok, _ in verdicts) else 1


if __name__ == "__main__":
    sys.exit(main())
