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

Both decide by the nominal-level approach. The look's fraction counts events
over planned events per day where the simulation counts days; they differ only
by the Poisson wobble of the daily counts.

The validation the before/after design must meet:

(a) no change: the before/after false-alarm rate within alpha + 3 Monte Carlo
    s.e. (the after-only rate beside it, expected near 1 with a gap);
(b) the planned change: power within 0.02 of the plan's;
(c) the reported estimate (the median-unbiased estimate the look gives after
    a stop, for efficacy or at the planned last day) has its median within Monte Carlo error of
    the change put in: the change lies inside the 99 % distribution-free
    interval for the median (order statistics), whose half-width / 2.576 is
    the Monte Carlo s.e. quoted.

Run:  python tests/benchmarks/before_after.py --streams 20000 --seed 1
      python tests/benchmarks/before_after.py --streams 20000 --seed 1 --metric rate
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

import numpy as np
from scipy import special, stats

# Run as a script from anywhere in the checkout.
sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from monitor.config import DEFAULT_MIN_CLUSTERS  # noqa: E402
from monitor.stats.before_after import information_fraction, plan_before_after  # noqa: E402
from monitor.stats.site_pairs import daily_boundaries, draw_site_pairs, monitor_site_pairs  # noqa: E402

# Pick seconds at two depots, and a first-contact resolution rate at two desks.
SCENARIOS = {
    "mean": dict(level=90.0, sd=50.0, events_per_day=400, day_sd=4.0, shared_day_sd=6.0, gap=8.0,
                 difference=-6.0, unit="s"),
    "rate": dict(level=0.70, events_per_day=300, day_sd=0.015, shared_day_sd=0.02, gap=0.05,
                 difference=0.03, unit=""),
}
BASELINE_DAYS = 28


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


def run(metric, change, streams, seed, plan, spending, first_look_day, alpha, chunk=2000):
    """Monitor ``streams`` site pairs with ``change`` put in; per-stream outcomes concatenated."""
    s = SCENARIOS[metric]
    rng = np.random.default_rng(seed)
    draw = dict(sd=s["sd"], level=s["level"]) if metric == "mean" else dict(rate=s["level"])
    parts = []
    done = 0
    while done < streams:
        size = min(chunk, streams - done)
        data = draw_site_pairs(size, baseline_days=BASELINE_DAYS, after_days=plan.after_days,
                               events_per_day=s["events_per_day"], gap=s["gap"], change=change,
                               day_sd=s["day_sd"], shared_day_sd=s["shared_day_sd"], rng=rng, **draw)
        spreads = dict(sd=s["sd"], day_sd=s["day_sd"]) if metric == "mean" else {}
        parts.append(monitor_site_pairs(data, planned_after_days=plan.after_days_exact,
                                        first_look_day=first_look_day, alpha=alpha, spending=spending,
                                        **spreads).to_dict())
        done += size
    return {key: np.concatenate([p[key] for p in parts]) for key in parts[0] if parts[0][key] is not None}


def reported_estimates(out, plan, spending, first_look_day, alpha, sample, rng):
    """The estimate a user is given at the end: the median-unbiased estimate at the stop.

    The median-unbiased estimate on the t scale
    (:func:`monitor.stats.before_after.estimate_after_stop`) is solved for a
    random ``sample`` of the streams.
    """
    last = plan.after_days
    first = min(first_look_day, last)
    days = np.arange(first, last + 1, dtype=float)
    fractions = np.atleast_1d(information_fraction(days, plan.after_days_exact, BASELINE_DAYS))
    fractions[-1] = max(1.0, fractions[-1])
    nominal = daily_boundaries(fractions, alpha, spending)
    upper = -special.ndtri(nominal)
    chosen = rng.choice(out["did_stop_day"].size, size=min(sample, out["did_stop_day"].size), replace=False)
    estimates = np.empty(chosen.size)
    naive = np.empty(chosen.size)
    for i, s in enumerate(chosen):
        # Stopped for efficacy, or the plan complete at the last day: the look reports
        # the median-unbiased estimate after either stop.
        day = int(out["did_stop_day"][s]) or last
        naive[i] = out["did_estimate"][s]
        look = day - first + 1
        est = estimate_after_stop(fractions[:look], upper[:look], look, float(out["did_estimate"][s]),
                                  float(out["did_standard_error"][s]), float(out["did_df"][s]), alpha=alpha)
        estimates[i] = est.estimate
    return estimates, naive


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
                        help="streams whose median-unbiased estimate is solved for (c) (default 2000)")
    args = parser.parse_args(argv)
    s = SCENARIOS[args.metric]
    unit = f" {s['unit']}" if s["unit"] else ""
    started = time.perf_counter()
    plan = plan_for(args.metric, args.alpha, args.power, args.spending, args.first_look_day)
    print(f"{args.metric}: gap {s['gap']:g}{unit} before the change, events/site/day {s['events_per_day']}, "
          f"own day sd {s['day_sd']:g}, shared day sd {s['shared_day_sd']:g}; baseline {BASELINE_DAYS} days")
    print(f"plan: change {plan.difference:g}{unit}, power {plan.power:g}, {plan.spending}, daily looks from day "
          f"{args.first_look_day}: {plan.after_days_exact:.2f} days after the start (last look day "
          f"{plan.after_days}), inflation {plan.inflation:.3f} (t part {plan.t_inflation:.3f}, planned df "
          f"{plan.planned_df:.1f}); expected days at decision {plan.expected_days_null:.1f} (no change), "
          f"{plan.expected_days_alternative:.1f} (planned change)")
    null = run(args.metric, 0.0, args.streams, args.seed, plan, args.spending, args.first_look_day, args.alpha)
    alt = run(args.metric, plan.difference, args.streams, args.seed + 1000, plan, args.spending,
              args.first_look_day, args.alpha)
    n = args.streams

    def rate(out, key):
        r = float(np.mean(out[key] > 0)) if out[key].dtype != bool else float(np.mean(out[key]))
        return r, monte_carlo_se(r, n)

    print(f"\n{n} streams per row, seed {args.seed}; rates with Monte Carlo s.e.")
    print(f"{'':34}{'after-only':>18}{'before/after':>18}{'b/a with CR1':>18}")
    rows = [("(a) no change: false alarms", null, ("after_only_stop_day", "did_stop_day", "did_cr1_stop_day")),
            ("    one test at the last day", null, ("after_only_fixed", "did_fixed", "did_cr1_fixed")),
            ("(b) planned change: power", alt, ("after_only_stop_day", "did_stop_day", "did_cr1_stop_day")),
            ("    one test at the last day", alt, ("after_only_fixed", "did_fixed", "did_cr1_fixed"))]
    for label, out, keys in rows:
        cells = [f"{r:.4f} ({se:.4f})" for r, se in (rate(out, k) for k in keys)]
        print(f"{label:34}" + "".join(f"{c:>18}" for c in cells))
    if "did_known_variance_stop_day" in null:
        known_null, known_alt = rate(null, "did_known_variance_stop_day"), rate(alt, "did_known_variance_stop_day")
        print(f"    same looks, true variance, z: no change {known_null[0]:.4f} ({known_null[1]:.4f}), "
              f"planned change {known_alt[0]:.4f} ({known_alt[1]:.4f})")
    stopped = alt["did_stop_day"][alt["did_stop_day"] > 0]
    print(f"    mean day of an efficacy stop under the planned change: {np.mean(stopped):.2f} "
          f"(plan's expected days at decision {plan.expected_days_alternative:.2f})")

    fa, fa_se = rate(null, "did_stop_day")
    power, power_se = rate(alt, "did_stop_day")
    verdicts = [
        ("(a) before/after false alarms <= alpha + 3 s.e.", fa <= args.alpha + 3 * fa_se,
         f"{fa:.4f} vs {args.alpha + 3 * fa_se:.4f}"),
        ("(b) |power - planned| <= 0.02", abs(power - plan.power) <= 0.02,
         f"{power:.4f} vs {plan.power:.2f} (s.e. {power_se:.4f})"),
    ]
    rng = np.random.default_rng(args.seed + 7)
    print(f"\n(c) estimates (median and 99 % order-statistic interval; Monte Carlo s.e. = half-width / 2.576)")
    for label, out, change in (("no change", null, 0.0), ("planned change", alt, plan.difference)):
        reported, naive = reported_estimates(out, plan, args.spending, args.first_look_day, args.alpha,
                                             args.estimate_sample, rng)
        for name, values in (("reported (median-unbiased at the stop)", reported),
                             ("naive DiD at the stop", naive),
                             ("DiD at the last planned day", out["did_final_estimate"])):
            med, low, high, z = median_interval(values)
            mc = (high - low) / 2 / z
            print(f"    {label:15} {name:40} median {med:+.4f} [{low:+.4f}, {high:+.4f}] "
                  f"(s.e. {mc:.4f}, {values.size} streams); change put in {change:+g}")
            if name.startswith("reported"):
                verdicts.append((f"(c) {label}: change inside the median's interval", low <= change <= high,
                                 f"{med:+.4f} [{low:+.4f}, {high:+.4f}]"))
    after_only_fa, after_only_se = rate(null, "after_only_stop_day")
    print(f"\nside by side, no change: after-only {after_only_fa:.4f} (s.e. {after_only_se:.4f}) against "
          f"before/after {fa:.4f} (s.e. {fa_se:.4f})")
    for label, ok, figures in verdicts:
        print(f"{label:56} {figures:38} {'met' if ok else 'NOT MET'}")
    print(f"\n{time.perf_counter() - started:.1f} s")
    return 0 if all(ok for _, ok, _ in verdicts) else 1


if __name__ == "__main__":
    sys.exit(main())
