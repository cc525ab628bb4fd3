"""Does a clustered plan from ``gapwatch plan --cluster-size …`` deliver its power?

``monitor.stats.clustered.plan_clusters`` allows for the look's t on few clusters with the
single-analysis correction at the plan's final degrees of freedom; the looks themselves use
exact sequential t boundaries (``monitor.stats.sequential_t``) at the df each look has, and
decide only from ``min_clusters`` clusters. This script simulates the plan's comparison with
those boundaries, under the planned difference (power) and under no difference (false
alarms), and prints each rate with its Monte Carlo standard error.

Scenarios (invented):

* shared days: two desks, a look at the end of each planned look's day, every day holding
  both groups; each desk has its own daily shock (intra-day correlation ``icc``), so the
  day's difference of means has variance ``2σ²(icc + (1 − icc)/m)``; the CR1 t with equal
  days is the t of the days' differences on ``days − 1`` df. Looks with fewer than
  ``min_clusters`` days spend nothing.
* nested crews: ``k`` crews per group from the start, each crew's events accruing evenly;
  at fraction f a crew has ``f·m`` events, its mean varies by ``σ²(icc + (1 − icc)/(f·m))``;
  the CR2 t with equal crews is the two-sample t of the crew means on ``2(k − 1)`` df.

    .venv/bin/python tests/benchmarks/clustered_plan_power.py --streams 40000
"""

from __future__ import annotations

import argparse
import math

import numpy as np

from monitor.stats.clustered import plan_clusters
from monitor.stats.planning import plan_mean
from monitor.stats.sequential_t import SequentialTBoundary


def _rate(hits):
    p = float(np.mean(hits))
    return p, math.sqrt(p * (1 - p) / hits.size)


def shared_days(difference, sd, m, icc, looks, streams, rng, *, min_clusters=10, true_difference=None):
    plan = plan_mean(difference, sd, looks=looks)
    c = plan_clusters(plan.max_per_group, m, icc=icc, minimum_clusters=min_clusters)
    days = c.clusters_per_group
    look_days = sorted({max(1, round(days * j / looks)) for j in range(1, looks + 1)})
    boundary = SequentialTBoundary(0.05, "obrien-fleming", "two-sided")
    testing = []
    for d in look_days:
        if d < min_clusters:
            continue  # awaiting clusters: recorded, spends nothing
        boundary.add_look(min(d * m / c.events_per_group, 1.0) if d < days else 1.0, d - 1)
        testing.append((d, boundary.t_boundaries[-1]))
    delta = difference if true_difference is None else true_difference
    spread = math.sqrt(2 * sd * sd * (icc + (1 - icc) / m))
    daily = rng.normal(delta, spread, size=(streams, days))
    stopped = np.zeros(streams, bool)
    for d, bound in testing:
        x = daily[:, :d]
        t = x.mean(axis=1) / (x.std(axis=1, ddof=1) / math.sqrt(d))
        stopped |= np.abs(t) >= bound
    return c, stopped


def nested_crews(difference, sd, m, icc, looks, streams, rng, *, min_clusters=10, true_difference=None):
    plan = plan_mean(difference, sd, looks=looks)
    per_group = max(3, math.ceil(min_clusters / 2))
    c = plan_clusters(plan.max_per_group, m, icc=icc, shared=False, minimum_clusters=per_group)
    k = c.clusters_per_group
    boundary = SequentialTBoundary(0.05, "obrien-fleming", "two-sided")
    delta = difference if true_difference is None else true_difference
    crew = rng.normal(0.0, sd * math.sqrt(icc), size=(2, streams, k))
    # Each crew's running mean of its own events: the within-crew part shrinks as events accrue,
    # with independent increments (a running mean of a Brownian path).
    within = sd * math.sqrt(1 - icc)
    stopped = np.zeros(streams, bool)
    total = np.zeros((2, streams, k))
    seen = 0.0
    for j in range(1, looks + 1):
        events = m * j / looks
        total += rng.normal(0.0, within * math.sqrt(events - seen), size=total.shape)
        seen = events
        means = crew + total / events
        means[0] += delta
        boundary.add_look(j / looks, 2 * (k - 1))
        diff = means[0].mean(axis=1) - means[1].mean(axis=1)
        se = np.sqrt(means[0].var(axis=1, ddof=1) / k + means[1].var(axis=1, ddof=1) / k)
        stopped |= np.abs(diff / se) >= boundary.t_boundaries[-1]
    return c, stopped


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n", 1)[0])
    parser.add_argument("--streams", type=int, default=40000)
    parser.add_argument("--seed", type=int, default=7)
    args = parser.parse_args(argv)
    rng = np.random.default_rng(args.seed)
    scenarios = [
        ("shared days (README example)", shared_days, dict(difference=30, sd=120, m=60, icc=0.03, looks=5)),
        ("shared days, many", shared_days, dict(difference=10, sd=120, m=60, icc=0.01, looks=5)),
        ("nested crews, few", nested_crews, dict(difference=60, sd=120, m=100, icc=0.05, looks=5)),
        ("nested crews, some", nested_crews, dict(difference=30, sd=120, m=40, icc=0.05, looks=5)),
    ]
    print(f"{'scenario':<30} {'clusters/group':>14} {'df':>5} {'power':>15} {'false alarms':>15}")
    for name, simulate, kwargs in scenarios:
        c, hits = simulate(**kwargs, streams=args.streams, rng=rng)
        _, nulls = simulate(**kwargs, streams=args.streams, rng=rng, true_difference=0.0)
        (p, p_se), (a, a_se) = _rate(hits), _rate(nulls)
        print(f"{name:<30} {c.clusters_per_group:>14} {c.df:>5.0f} {p:>8.4f} ± {p_se:.4f} {a:>8.4f} ± {a_se:.4f}")


if __name__ == "__main__":
    main()
