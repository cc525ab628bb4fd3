"""False-alarm rate of daily sequential monitoring when events cluster by day.

Scenario (invented, realistic): two sites (the two groups) handle the same kind
of task. Each site has its own daily shocks -- staffing, weather, backlog --
so events of one site on one day share a random day effect, and the two sites'
day effects are independent. There is no true difference between the sites.
Cluster keys are calendar days, shared by both sites (the way a day-bucketed
comparison is configured), so a day holding events of both sites is one
cluster; with independent shocks per site that is still a valid clustering,
since nothing is correlated across days.

Per stream (one monitored comparison):

* planned days D uniform on 30..90, one look a day;
* mean events per site per day m uniform on 50..500, daily counts Poisson(m);
* intra-day correlation rho uniform on 0.02..0.10 (unit total variance);
* looks from day ``--min-clusters`` on (the look's minimum-clusters rule),
  information fraction = elapsed days / D, the last look at day D spending
  what is left (monitor.boundaries.SequentialBoundary, two-sided).

Two ways of monitoring are compared on the same data:

* event-level: Welch z on all events so far against the efficacy boundary z;
* clustered: CR1 cluster-robust t on G - 1 degrees of freedom (G = days so
  far), nominal-level approach: stop when the t-based one-sided p-value in the
  direction of the estimate is at or below the look's nominal level.

For reference the table also shows one fixed-sample test at day D by each
method (no repeated looks), which separates the cost of ignoring clustering
from the small approximation of the nominal-level approach with t statistics.

The daily sufficient statistics are drawn exactly (day mean and within-day sum
of squares) instead of event by event, so the simulation is fast. The vectorised
CR1 here is checked against monitor.clustered.cluster_robust_difference.

Run:  python tests/benchmarks/clustered_false_alarm.py --streams 4000 --seed 1
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

import numpy as np
from scipy import stats

# Run as a script from anywhere in the checkout.
sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from monitor.boundaries import SequentialBoundary  # noqa: E402
from monitor.clustered import cluster_robust_difference  # noqa: E402
from monitor.spending import parse_spending  # noqa: E402


DAYS = tuple(range(30, 91))


def draw_streams(streams, rng, days_choices=DAYS, events_range=(50, 500), icc_range=(0.02, 0.10)):
    """Per-(stream, site, day) counts, sums and within-day sums of squares (unit total variance)."""
    max_days = max(days_choices)
    planned = rng.choice(np.asarray(days_choices), size=streams)
    mean_events = rng.integers(events_range[0], events_range[1] + 1, size=streams)
    icc = rng.uniform(icc_range[0], icc_range[1], size=streams)
    shape = (streams, 2, max_days)
    counts = np.maximum(rng.poisson(mean_events[:, None, None], size=shape), 2).astype(float)
    rho = icc[:, None, None]
    day_effect = rng.normal(0.0, np.sqrt(rho), size=shape)
    noise_mean = rng.normal(0.0, 1.0, size=shape) * np.sqrt((1.0 - rho) / counts)
    sums = counts * (day_effect + noise_mean)
    within_ss = (1.0 - rho) * rng.chisquare(counts - 1.0)
    return {"planned_days": planned, "mean_events": mean_events, "icc": icc,
            "n": counts, "sum": sums, "within_ss": within_ss}


def boundary_table(planned_days, alpha, spending, min_clusters):
    """z[D, k] = efficacy boundary at day k of a D-day plan (nan where no look)."""
    spend = parse_spending(spending)
    top = int(planned_days.max())
    z = np.full((top + 1, top + 1), np.nan)
    nominal = np.full_like(z, np.nan)
    for d in np.unique(planned_days):
        b = SequentialBoundary(alpha, spend, "two-sided")
        for k in range(min(min_clusters, d), d + 1):
            look = b.add_look(k / d)
            z[d, k] = look.z
            nominal[d, k] = look.nominal_p
    return z, nominal


def monitor_streams(data, z_table, nominal_table, min_clusters, alpha=0.05):
    """Run both monitors look by look, vectorised over streams.

    Returns per-stream stop flags for both monitors, the design effect at the
    final look, and (for reference) rejections of one fixed-sample test at day D
    by each method.
    """
    n, s, w = data["n"], data["sum"], data["within_ss"]
    planned = data["planned_days"]
    streams = n.shape[0]
    stopped_event = np.zeros(streams, bool)
    stopped_cluster = np.zeros(streams, bool)
    final_deff = np.full(streams, np.nan)
    fixed_event = np.zeros(streams, bool)
    fixed_cluster = np.zeros(streams, bool)
    n_tot = np.zeros((streams, 2))
    s_tot = np.zeros((streams, 2))
    ss_within = np.zeros((streams, 2))
    q_tot = np.zeros((streams, 2))          # Σ_d S_gd² / n_gd  (for the between-day part of SS)
    outer = np.zeros((streams, 4, 4))       # Σ_d x_d x_dᵀ with x_d = (S1d, n1d, S2d, n2d)
    rows = np.arange(streams)
    for k in range(1, int(planned.max()) + 1):
        nk, sk = n[:, :, k - 1], s[:, :, k - 1]
        n_tot += nk
        s_tot += sk
        ss_within += w[:, :, k - 1]
        q_tot += sk * sk / nk
        x = np.stack([sk[:, 0], nk[:, 0], sk[:, 1], nk[:, 1]], axis=1)
        outer += x[:, :, None] * x[:, None, :]
        active = k <= planned
        if k < min_clusters:
            continue
        mean = s_tot / n_tot
        ss = ss_within + q_tot - n_tot * mean * mean
        naive_var = ss[:, 0] / (n_tot[:, 0] - 1) / n_tot[:, 0] + ss[:, 1] / (n_tot[:, 1] - 1) / n_tot[:, 1]
        # Cluster score a_d = r1d/n1 − r2d/n2 = c·x_d, so Σ a_d² = cᵀ (Σ x xᵀ) c.
        c = np.stack([1 / n_tot[:, 0], -mean[:, 0] / n_tot[:, 0], -1 / n_tot[:, 1], mean[:, 1] / n_tot[:, 1]],
                     axis=1)
        score_ss = np.einsum("si,sij,sj->s", c, outer, c)
        g = float(k)
        total = n_tot.sum(axis=1)
        cr1_var = g / (g - 1) * (total - 1) / (total - 2) * score_ss
        estimate = mean[:, 0] - mean[:, 1]
        z_bound = z_table[planned, np.minimum(k, planned)]
        nominal = nominal_table[planned, np.minimum(k, planned)]
        z_event = estimate / np.sqrt(naive_var)
        t_cluster = estimate / np.sqrt(cr1_var)
        t_bound = stats.t.isf(nominal, g - 1)
        look = active & ~np.isnan(z_bound)
        stopped_event |= look & (np.abs(z_event) >= z_bound)
        stopped_cluster |= look & (np.abs(t_cluster) >= t_bound)
        final = active & (k == planned)
        final_deff[final] = (cr1_var / naive_var)[final]
        fixed_event |= final & (np.abs(z_event) >= stats.norm.isf(alpha / 2))
        fixed_cluster |= final & (np.abs(t_cluster) >= stats.t.isf(alpha / 2, g - 1))
    return stopped_event, stopped_cluster, final_deff, fixed_event, fixed_cluster



def check_against_library(data, streams=3, days=12):
    """Largest relative gap between the vectorised CR1 SE and the library's, on a few streams."""
    worst = 0.0
    for i in range(min(streams, data["n"].shape[0])):
        n = data["n"][i, :, :days]
        s = data["sum"][i, :, :days]
        w = data["within_ss"][i, :, :days]
        groups = np.repeat([0, 1], days)
        keys = np.tile(np.arange(days), 2)
        dev2 = (w + s * s / n).ravel()
        lib = cluster_robust_difference(groups, keys, n.ravel(), s.ravel(), 0.0, sum_dev2=dev2)
        # One stream cut to `days` planned days; boundaries that never stop it.
        sub = {key: value[i:i + 1, ..., :days] if value.ndim == 3 else value[i:i + 1]
               for key, value in data.items()}
        sub["planned_days"] = np.array([days])
        z = np.full((days + 1, days + 1), np.inf)
        nominal = np.zeros_like(z)
        deff = monitor_streams(sub, z, nominal, 2)[2]
        worst = max(worst, abs(deff[0] - lib.design_effect) / lib.design_effect)
    return worst


def run(streams, seed, alpha=0.05, spending="obrien-fleming", min_clusters=5, chunk=2000, days_choices=DAYS):
    rng = np.random.default_rng(seed)
    flags_event, flags_cluster, deffs, fixed_e, fixed_c = [], [], [], [], []
    z_table = nominal_table = None
    start = time.perf_counter()
    library_gap = None
    done = 0
    while done < streams:
        size = min(chunk, streams - done)
        data = draw_streams(size, rng, days_choices)
        if z_table is None:
            z_table, nominal_table = boundary_table(np.asarray(days_choices), alpha, spending, min_clusters)
            library_gap = check_against_library(data)
        e, c, d, fe, fc = monitor_streams(data, z_table, nominal_table, min_clusters, alpha)
        flags_event.append(e)
        flags_cluster.append(c)
        deffs.append(d)
        fixed_e.append(fe)
        fixed_c.append(fc)
        done += size
    return {
        "streams": streams, "seed": seed, "alpha": alpha, "spending": spending,
        "min_clusters": min_clusters,
        "event_level": float(np.mean(np.concatenate(flags_event))),
        "clustered": float(np.mean(np.concatenate(flags_cluster))),
        "fixed_event_level": float(np.mean(np.concatenate(fixed_e))),
        "fixed_clustered": float(np.mean(np.concatenate(fixed_c))),
        "median_design_effect": float(np.nanmedian(np.concatenate(deffs))),
        "design_effect_range": (float(np.nanmin(np.concatenate(deffs))), float(np.nanmax(np.concatenate(deffs)))),
        "library_gap": library_gap,
        "seconds": time.perf_counter() - start,
    }


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--streams", type=int, default=4000, help="simulated comparisons (default 4000)")
    parser.add_argument("--seed", type=int, default=1, help="random seed (default 1)")
    parser.add_argument("--alpha", type=float, default=0.05, help="two-sided level (default 0.05)")
    parser.add_argument("--spending", default="obrien-fleming", help="spending function (default obrien-fleming)")
    parser.add_argument("--min-clusters", type=int, default=5, help="first look at this many days (default 5)")
    args = parser.parse_args(argv)
    r = run(args.streams, args.seed, args.alpha, args.spending, args.min_clusters)
    mc = math.sqrt(args.alpha * (1 - args.alpha) / args.streams)
    print(f"{r['streams']} streams, seed {r['seed']}, two-sided alpha {r['alpha']}, {r['spending']} spending, "
          f"daily looks from day {r['min_clusters']}; no true difference")
    print(f"design effect at the final look: median {r['median_design_effect']:.1f}, "
          f"range {r['design_effect_range'][0]:.1f} to {r['design_effect_range'][1]:.1f}")
    print()
    print(f"{'monitor':<38}{'false-alarm rate':>18}{'MC s.e.':>10}")
    print(f"{'event-level Welch z':<38}{r['event_level']:>18.4f}"
          f"{math.sqrt(r['event_level'] * (1 - r['event_level']) / r['streams']):>10.4f}")
    print(f"{'clustered CR1 t on G-1 df (by day)':<38}{r['clustered']:>18.4f}"
          f"{math.sqrt(r['clustered'] * (1 - r['clustered']) / r['streams']):>10.4f}")
    for label, key in (("one look at day D: event-level z", "fixed_event_level"),
                       ("one look at day D: clustered t", "fixed_clustered")):
        print(f"{label:<38}{r[key]:>18.4f}{math.sqrt(r[key] * (1 - r[key]) / r['streams']):>10.4f}")
    print(f"{'target':<38}{r['alpha']:>18.4f}{mc:>10.4f}")
    print()
    print(f"vectorised CR1 vs library: largest relative gap {r['library_gap']:.1e}; {r['seconds']:.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
