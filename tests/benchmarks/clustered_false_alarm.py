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

* planned days D uniform on 30..90, one look at the end of each day;
* mean events per site per day m uniform on 50..500, daily counts Poisson(m);
* intra-day correlation rho uniform on 0.02..0.10 (unit total variance);
* information fraction = elapsed days / D, the look at day D final (it spends
  what is left; monitor.stats.boundaries.SequentialBoundary, two-sided).

The monitors, each as the live look (monitor.look) runs it:

* event-level: an unclustered Welch comparison. Every look tests, from day 1:
  Welch t on Welch--Satterthwaite df, nominal-level approach.
* clustered: CR1 cluster-robust t on G - 1 degrees of freedom (G = days so
  far). Looks with fewer than ``min_clusters`` clusters (default: the config's
  default) are recorded but spend no alpha and decide nothing, so the first
  testing look is day ``min_clusters`` and the boundary's first fraction is
  min_clusters / D. Nominal-level approach: stop when the one-sided p-value in
  the direction of the estimate is at or below the look's nominal level.

The look's fraction is events so far over planned events (the smaller group);
here it is days over planned days, which differs only by the Poisson wobble of
the daily counts (well under 1 % of the fraction after ten days of 50 or more
events) and keeps one boundary per plan length.

Two reference rows separate the causes of any gap from alpha:

* the clustered monitor's looks with the true variance of the difference
  (known-variance z against the boundary z): checks the boundary and the data;
* one fixed-sample test at day D by each method (no repeated looks): the
  cost of ignoring clustering, and the size of the CR1 t test alone.

The daily sufficient statistics are drawn exactly (day mean and within-day sum
of squares) instead of event by event, so the simulation is fast. The vectorised
CR1 here is checked against monitor.stats.clustered.cluster_robust_difference.

Run:  python tests/benchmarks/clustered_false_alarm.py --streams 100000 --seed 1 --spending pocock

Measured (100,000 streams per row, two-sided alpha 0.05, default min_clusters
10, Monte Carlo s.e. about 0.0007 on a rate near 0.05; event-level rates are
the same streams' unclustered monitor):

    spending         seed  event-level  clustered  same looks, true var.  one look: clustered
    O'Brien-Fleming     1       0.8748     0.0525                 0.0497               0.0497
    O'Brien-Fleming     2       0.8747     0.0516                 0.0498               0.0495
    Pocock              1       0.9538     0.0520                 0.0496               0.0497
    Pocock              2       0.9530     0.0529                 0.0502               0.0495

The clustered monitor runs about 0.002 above alpha (4 to 5 s.e. over the
200,000 streams of each spending function). The boundary and data are not the
cause (true-variance row at alpha) and nor is CR1 (one look at alpha, and CR1
with days of equal size is exactly the paired t on day differences). It is the
nominal-level approach itself: t statistics whose variance estimate is
re-estimated at every look cross the transformed boundary slightly more often
than the z statistics it was built for. The same excess appears with
independent normal day differences and exact t statistics (``--idealised``,
100,000 paths, seed 3, looks at days 10..60: O'Brien-Fleming 0.0517 with t
against 0.0495 with z on the same paths; Pocock 0.0527 against 0.0495), so a
small-sample variance correction (CR2 and the like) cannot remove it. Deciding
from more clusters shrinks Pocock's share, which comes from the early low-df
looks, but not O'Brien-Fleming's (``--min-clusters 20``, seed 1: Pocock 0.0504,
O'Brien-Fleming 0.0522).

Reproduce:  for s in obrien-fleming pocock; do for seed in 1 2; do
            python tests/benchmarks/clustered_false_alarm.py --streams 100000 --seed $seed --spending $s;
            done; done
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

import numpy as np
from scipy import special

# Run as a script from anywhere in the checkout.
sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from monitor.stats.boundaries import SequentialBoundary  # noqa: E402
from monitor.stats.clustered import cluster_robust_difference  # noqa: E402
from monitor.config import DEFAULT_MIN_CLUSTERS  # noqa: E402
from monitor.stats.spending import parse_spending  # noqa: E402


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


def boundary_table(planned_days, alpha, spending, first_look):
    """z[D, k], nominal[D, k]: efficacy boundary at day k of a D-day plan (nan where no testing look).

    Testing looks run daily from day ``first_look`` (or day D if the plan is
    shorter); earlier looks spend nothing, as in the live look.
    """
    spend = parse_spending(spending)
    top = int(np.max(planned_days))
    z = np.full((top + 1, top + 1), np.nan)
    nominal = np.full_like(z, np.nan)
    for d in np.unique(planned_days):
        d = int(d)
        b = SequentialBoundary(alpha, spend, "two-sided")
        for k in range(min(first_look, d), d + 1):
            look = b.add_look(k / d)
            z[d, k] = look.z
            nominal[d, k] = look.nominal_p
    return z, nominal


def _t_critical(nominal_p, df):
    """Upper-tail t quantile of ``nominal_p``, elementwise; inf where no stop is possible.

    The look decides by ``p <= nominal_p``. An early O'Brien--Fleming look has a
    nominal level that underflows to 0 (or to a subnormal) where the quantile
    function returns the wrong infinity, and a look with no boundary has nan:
    both mean "cannot cross", so the critical value is +inf there.
    """
    with np.errstate(invalid="ignore"):
        critical = -special.stdtrit(df, nominal_p)
    return np.where(critical > 0, critical, np.inf)


def monitor_streams(data, cluster_tables, event_tables, min_clusters, alpha=0.05):
    """Run the monitors look by look, vectorised over streams.

    ``cluster_tables`` and ``event_tables`` are ``(z, nominal)`` pairs from
    :func:`boundary_table` (the clustered one starting at ``min_clusters``,
    the event-level one at day 1). Returns a dict of per-stream flags: stops of
    the event-level, clustered and known-variance monitors, one-look
    rejections at day D, and the design effect at the final look.
    """
    n, s, w = data["n"], data["sum"], data["within_ss"]
    planned = data["planned_days"]
    icc = data["icc"][:, None]
    streams = n.shape[0]
    flags = {key: np.zeros(streams, bool) for key in
             ("event_level", "clustered", "clustered_known_variance", "fixed_event_level", "fixed_clustered")}
    final_deff = np.full(streams, np.nan)
    n_tot = np.zeros((streams, 2))
    n_sq = np.zeros((streams, 2))           # Σ_d n_gd²  (for the true variance)
    s_tot = np.zeros((streams, 2))
    ss_within = np.zeros((streams, 2))
    q_tot = np.zeros((streams, 2))          # Σ_d S_gd² / n_gd  (for the between-day part of SS)
    outer = np.zeros((streams, 4, 4))       # Σ_d x_d x_dᵀ with x_d = (S1d, n1d, S2d, n2d)
    z_c, nominal_c = cluster_tables
    z_e, nominal_e = event_tables
    for k in range(1, int(planned.max()) + 1):
        nk, sk = n[:, :, k - 1], s[:, :, k - 1]
        n_tot += nk
        n_sq += nk * nk
        s_tot += sk
        ss_within += w[:, :, k - 1]
        q_tot += sk * sk / nk
        x = np.stack([sk[:, 0], nk[:, 0], sk[:, 1], nk[:, 1]], axis=1)
        outer += x[:, :, None] * x[:, None, :]
        active = k <= planned
        day = np.minimum(k, planned)
        final = active & (k == planned)
        mean = s_tot / n_tot
        estimate = mean[:, 0] - mean[:, 1]

        # Event-level Welch t, nominal-level approach, testing at every look.
        ss = ss_within + q_tot - n_tot * mean * mean
        v = ss / (n_tot - 1) / n_tot
        naive_var = v.sum(axis=1)
        welch_df = naive_var ** 2 / (v[:, 0] ** 2 / (n_tot[:, 0] - 1) + v[:, 1] ** 2 / (n_tot[:, 1] - 1))
        t_event = estimate / np.sqrt(naive_var)
        flags["event_level"] |= active & (np.abs(t_event) >= _t_critical(nominal_e[planned, day], welch_df))
        flags["fixed_event_level"] |= final & (np.abs(t_event) >= _t_critical(alpha / 2, welch_df))
        if k < 2:
            continue

        # Cluster score a_d = r1d/n1 − r2d/n2 = c·x_d, so Σ a_d² = cᵀ (Σ x xᵀ) c.
        c = np.stack([1 / n_tot[:, 0], -mean[:, 0] / n_tot[:, 0], -1 / n_tot[:, 1], mean[:, 1] / n_tot[:, 1]],
                     axis=1)
        score_ss = np.einsum("si,sij,sj->s", c, outer, c)
        g = float(k)
        total = n_tot.sum(axis=1)
        cr1_var = g / (g - 1) * (total - 1) / (total - 2) * score_ss
        t_cluster = estimate / np.sqrt(cr1_var)
        final_deff[final] = (cr1_var / naive_var)[final]
        flags["fixed_clustered"] |= final & (np.abs(t_cluster) >= _t_critical(alpha / 2, g - 1))
        if k < min_clusters:
            continue  # recorded by the look as awaiting_clusters: nothing spent, no decision
        flags["clustered"] |= active & (np.abs(t_cluster) >= _t_critical(nominal_c[planned, day], g - 1))
        # Same looks with the true variance of the difference given the counts.
        true_var = (icc * n_sq / n_tot ** 2 + (1 - icc) / n_tot).sum(axis=1)
        flags["clustered_known_variance"] |= active & (np.abs(estimate) / np.sqrt(true_var) >= z_c[planned, day])
    flags["final_design_effect"] = final_deff
    return flags


def check_against_library(data, streams=3, days=12):
    """Largest relative gap between the vectorised CR1 design effect and the library's, on a few streams."""
    worst = 0.0
    never = (np.full((days + 1, days + 1), np.inf), np.zeros((days + 1, days + 1)))
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
        deff = monitor_streams(sub, never, never, 2)["final_design_effect"]
        worst = max(worst, abs(deff[0] - lib.design_effect) / lib.design_effect)
    return worst


RATES = ("event_level", "clustered", "clustered_known_variance", "fixed_event_level", "fixed_clustered")


def run(streams, seed, alpha=0.05, spending="obrien-fleming", min_clusters=DEFAULT_MIN_CLUSTERS, chunk=2000,
        days_choices=DAYS):
    """Simulate ``streams`` comparisons with no true difference; rates of each monitor."""
    rng = np.random.default_rng(seed)
    collected = {key: [] for key in RATES + ("final_design_effect",)}
    start = time.perf_counter()
    plans = np.asarray(days_choices)
    cluster_tables = boundary_table(plans, alpha, spending, min_clusters)
    event_tables = boundary_table(plans, alpha, spending, 1)
    library_gap = None
    done = 0
    while done < streams:
        size = min(chunk, streams - done)
        data = draw_streams(size, rng, days_choices)
        if library_gap is None:
            library_gap = check_against_library(data)
        for key, value in monitor_streams(data, cluster_tables, event_tables, min_clusters, alpha).items():
            collected[key].append(value)
        done += size
    deffs = np.concatenate(collected["final_design_effect"])
    out = {"streams": streams, "seed": seed, "alpha": alpha, "spending": spending, "min_clusters": min_clusters}
    for key in RATES:
        out[key] = float(np.mean(np.concatenate(collected[key])))
    out.update({
        "median_design_effect": float(np.nanmedian(deffs)),
        "design_effect_range": (float(np.nanmin(deffs)), float(np.nanmax(deffs))),
        "library_gap": library_gap,
        "seconds": time.perf_counter() - start,
    })
    return out


def idealised_nominal_level(streams, seed, alpha=0.05, spending="obrien-fleming", first_look=DEFAULT_MIN_CLUSTERS,
                            days=60):
    """The nominal-level approach on independent N(0, 1) day differences, t against z on the same paths.

    Daily looks from ``first_look`` to ``days`` (fraction k / days); the t
    statistic is the exact one-sample t on k − 1 df, the z statistic uses the
    known variance. Returns ``(t_rate, z_rate)``.
    """
    boundary = SequentialBoundary(alpha, parse_spending(spending), "two-sided")
    looks = [boundary.add_look(k / days) for k in range(first_look, days + 1)]
    rng = np.random.default_rng(seed)
    stopped_t = np.zeros(streams, bool)
    stopped_z = np.zeros(streams, bool)
    total = np.zeros(streams)
    squares = np.zeros(streams)
    for k in range(1, days + 1):
        e = rng.normal(size=streams)
        total += e
        squares += e * e
        if k < first_look:
            continue
        look = looks[k - first_look]
        mean = total / k
        t = mean / np.sqrt((squares - k * mean * mean) / (k - 1) / k)
        stopped_t |= np.abs(t) >= _t_critical(look.nominal_p, k - 1.0)
        stopped_z |= np.abs(mean) * math.sqrt(k) >= look.z
    return float(stopped_t.mean()), float(stopped_z.mean())


def monte_carlo_se(rate, streams):
    return math.sqrt(rate * (1 - rate) / streams)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--streams", type=int, default=4000, help="simulated comparisons (default 4000)")
    parser.add_argument("--seed", type=int, default=1, help="random seed (default 1)")
    parser.add_argument("--alpha", type=float, default=0.05, help="two-sided level (default 0.05)")
    parser.add_argument("--spending", default="obrien-fleming", help="spending function (default obrien-fleming)")
    parser.add_argument("--min-clusters", type=int, default=DEFAULT_MIN_CLUSTERS,
                        help=f"clustered looks decide from this many days on (default {DEFAULT_MIN_CLUSTERS}, "
                             f"the config default)")
    parser.add_argument("--idealised", action="store_true",
                        help="instead: the nominal-level approach on independent normal day differences "
                             "(exact t against known-variance z, looks from day --min-clusters to day 60)")
    args = parser.parse_args(argv)
    if args.idealised:
        t_rate, z_rate = idealised_nominal_level(args.streams, args.seed, args.alpha, args.spending,
                                                 args.min_clusters)
        print(f"{args.streams} streams, seed {args.seed}, {args.spending} spending, independent N(0, 1) day "
              f"differences, daily looks from day {args.min_clusters} to day 60")
        print(f"exact t, nominal-level approach: {t_rate:.4f} (s.e. {monte_carlo_se(t_rate, args.streams):.4f}); "
              f"known-variance z, same paths: {z_rate:.4f}")
        return 0
    r = run(args.streams, args.seed, args.alpha, args.spending, args.min_clusters)
    print(f"{r['streams']} streams, seed {r['seed']}, two-sided alpha {r['alpha']}, {r['spending']} spending, "
          f"daily looks (clustered decisions from day {r['min_clusters']}); no true difference")
    print(f"design effect at the final look: median {r['median_design_effect']:.1f}, "
          f"range {r['design_effect_range'][0]:.1f} to {r['design_effect_range'][1]:.1f}")
    print()
    print(f"{'monitor':<46}{'false-alarm rate':>18}{'MC s.e.':>10}")
    labels = {
        "event_level": "event-level Welch t, daily looks",
        "clustered": "clustered CR1 t on G-1 df, daily looks",
        "clustered_known_variance": "  same looks, true variance (z)",
        "fixed_event_level": "one look at day D: event-level Welch t",
        "fixed_clustered": "one look at day D: clustered CR1 t",
    }
    for key, label in labels.items():
        print(f"{label:<46}{r[key]:>18.4f}{monte_carlo_se(r[key], r['streams']):>10.4f}")
    print(f"{'target':<46}{r['alpha']:>18.4f}{monte_carlo_se(r['alpha'], r['streams']):>10.4f}")
    print()
    print(f"vectorised CR1 vs library: largest relative gap {r['library_gap']:.1e}; {r['seconds']:.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
