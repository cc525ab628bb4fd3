"""Rates per unit of work and the volume check, simulated: false alarms, false warnings, delays.

Part 1 — ratio comparisons under daily looks. Two packing lines (the groups) pack batches; a
row per batch holds ``defects`` and ``units``. Units per batch are gamma-distributed (mean 800,
coefficient of variation 0.6, so a big batch weighs many small ones), defects Poisson at the
line's rate per unit, 20 to 60 batches per line per day, and each day's rate is shaken by a
day shock shared by the line's batches (log-normal, sd 0.10) — so the monitor clusters by day.
No true difference. One look a day for the planned days, the comparison's own boundary
(monitor.stats.boundaries.SequentialBoundary, two-sided α = 0.05) with the nominal-level
approach on the cluster-robust ratio t (monitor.stats.ratio.ratio_difference, clustered by day,
t on days − 1), deciding from day ``min_days``.

Part 2 — the volume check (monitor.stats.volume) over comparison-months of normal variation:
each group's quarter-hour counts follow a weekday pattern (quiet weekends), a day shock
(log-normal, sd 0.12) and bursty arrivals (negative binomial, variance twice the mean); the
history is the previous four same weekdays. A look every quarter hour runs both checks:
own volume for each group and the share between them. Reported: days with a false warning per
comparison-month (30 days), then the delay to the first warning after one group loses half its
events from 10:00 on a random weekday.

Run:  python tests/benchmarks/ratio_and_volume.py --streams 20000 --months 500 --seed 1
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from monitor.stats.boundaries import SequentialBoundary  # noqa: E402
from monitor.stats.ratio import RatioCells, ratio_difference  # noqa: E402
from monitor.stats.volume import check_own_volume, check_share, usual_volume  # noqa: E402
from scipy import special  # noqa: E402

SLOTS = 96
OPEN, CLOSE = 24, 88  # 06:00 to 22:00
WEEKDAY_LEVEL = np.array([1.0, 1.05, 1.0, 0.95, 1.1, 0.45, 0.25])


def _one_sided_p(t, df):
    return special.stdtr(df, -np.abs(t))


def ratio_false_alarm(streams, seed, days=30, min_days=5, alpha=0.05, spending="obrien-fleming"):
    rng = np.random.default_rng(seed)
    boundary = SequentialBoundary(alpha, spending, "two-sided")
    looks = [boundary.add_look(d / days) for d in range(min_days, days + 1)]
    nominal = np.array([lk.nominal_p for lk in looks])
    # per stream, group, day: the cluster totals Σy, Σx and the row count
    rate = 0.004
    batches = rng.integers(20, 61, size=(streams, 2, days))
    shock = np.exp(rng.normal(0, 0.10, size=(streams, 2, days)))
    shape = 1 / 0.6 ** 2
    units = rng.gamma(shape * batches, 800 / shape) + batches  # sum of gammas is gamma
    defects = rng.poisson(rate * shock * units)
    y, x = defects.cumsum(axis=2), units.cumsum(axis=2)
    stopped = np.zeros(streams, dtype=bool)
    for i, d in enumerate(range(min_days, days + 1)):
        r = y[:, :, d - 1] / x[:, :, d - 1]                                 # streams × 2
        e = defects[:, :, :d] - r[:, :, None] * units[:, :, :d]             # cluster residual totals
        score = e[:, 0, :] / x[:, 0, d - 1, None] - e[:, 1, :] / x[:, 1, d - 1, None]
        n_rows = batches[:, :, :d].sum(axis=(1, 2))
        g = d  # each day one cluster shared by both lines
        var = g / (g - 1) * (n_rows - 1) / (n_rows - 2) * (score ** 2).sum(axis=1)
        t = (r[:, 0] - r[:, 1]) / np.sqrt(var)
        stopped |= _one_sided_p(t, g - 1) <= nominal[i]
    # the vectorised statistic is the module's: check the last day of a few streams
    for s in range(3):
        cells = RatioCells(group=tuple([0] * days + [1] * days), key=tuple(list(range(days)) * 2),
                           n=tuple(batches[s].ravel()), num=tuple(defects[s].ravel().astype(float)),
                           den=tuple(units[s].ravel()), num2=tuple([0.0] * 2 * days),
                           den2=tuple([0.0] * 2 * days), cross=tuple([0.0] * 2 * days))
        ref = ratio_difference(cells, clustered=True)
        r = y[s, :, -1] / x[s, :, -1]
        e = defects[s] - r[:, None] * units[s]
        sc = e[0] / x[s, 0, -1] - e[1] / x[s, 1, -1]
        n_rows = batches[s].sum()
        mine = math.sqrt(days / (days - 1) * (n_rows - 1) / (n_rows - 2) * (sc ** 2).sum())
        assert abs(mine / ref.standard_error - 1) < 1e-9
    return stopped.mean()


def _month(rng, weeks_history=4, days=30, drop_day=None, drop_slot=40, drop_to=0.5):
    """Quarter-hour counts per group for history + the month: array days_total × 2 × SLOTS."""
    total_days = 7 * weeks_history + days
    base = np.zeros(SLOTS)
    base[OPEN:CLOSE] = 6.0 * np.sin(np.linspace(0.3, math.pi - 0.3, CLOSE - OPEN)) + 2.0
    weekday = np.arange(total_days) % 7
    shock = np.exp(rng.normal(0, 0.12, size=(total_days, 2)))
    mean = WEEKDAY_LEVEL[weekday][:, None, None] * shock[:, :, None] * base[None, None, :]
    mean = np.broadcast_to(mean, (total_days, 2, SLOTS)).copy()
    if drop_day is not None:
        d = 7 * weeks_history + drop_day
        mean[d, 1, drop_slot:] *= drop_to
        mean[d + 1:, 1, :] *= drop_to
    # negative binomial with variance 2 × mean: size = mean
    size = np.maximum(mean, 1e-9)
    counts = rng.negative_binomial(size, size / (size + mean))
    return counts, weeks_history


def volume_month(rng, drop_day=None, level=0.001):
    counts, weeks = _month(rng, drop_day=drop_day)
    warned_days = set()
    first_warning = None
    for day in range(counts.shape[0] - 7 * weeks):
        d = 7 * weeks + day
        hist_idx = [d - 7 * k for k in range(1, weeks + 1)]
        usual = [usual_volume(counts[hist_idx, g, :]) for g in (0, 1)]
        shares = counts[hist_idx, 0, :].sum(axis=1) / counts[hist_idx].sum(axis=(1, 2))
        expected_share = float(shares.mean())
        tolerance = max(2.326 * float(np.std(shares, ddof=1)), 0.02)
        for slot in range(OPEN + 4, CLOSE + 1, 1):
            warn = False
            for g in (0, 1):
                warn |= check_own_volume(counts[d, g, :slot], usual[g], level=level).warn
            e1, e2 = counts[d, 0, :slot].sum(), counts[d, 1, :slot].sum()
            warn |= check_share(e1, e2, expected_share, tolerance=tolerance,
                                dispersion=max(usual[0].dispersion, usual[1].dispersion), level=level).warn
            if warn:
                warned_days.add(day)
                if first_warning is None and drop_day is not None and (day, slot) >= (drop_day, 40):
                    first_warning = (day - drop_day) * SLOTS + slot - 40
                break
    return warned_days, first_warning


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--streams", type=int, default=20000)
    ap.add_argument("--months", type=int, default=200)
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args(argv)
    t0 = time.perf_counter()
    print("Part 1: ratio comparisons (defects per unit), daily looks, no true difference, alpha 0.05")
    print(f"{'spending':18} {'streams':>8} {'false alarms':>13} {'MC s.e.':>8}")
    for spending in ("obrien-fleming", "pocock"):
        rate = ratio_false_alarm(args.streams, args.seed, spending=spending)
        se = math.sqrt(0.05 * 0.95 / args.streams)
        print(f"{spending:18} {args.streams:8d} {rate:13.4f} {se:8.4f}")
    print(f"  ({time.perf_counter() - t0:.1f} s)")
    t0 = time.perf_counter()
    rng = np.random.default_rng(args.seed)
    false_days = [len(volume_month(rng)[0]) for _ in range(args.months)]
    per_month = float(np.mean(false_days))
    se = float(np.std(false_days, ddof=1) / math.sqrt(args.months))
    print("Part 2: volume check, normal variation (weekday pattern, day shocks, bursty arrivals)")
    print(f"  false-warning days per comparison-month: {per_month:.3f} (MC s.e. {se:.3f}; {args.months} months)")
    delays = []
    for _ in range(max(args.months // 4, 20)):
        _, first = volume_month(rng, drop_day=int(rng.integers(7, 21)))
        delays.append(first if first is not None else math.inf)
    found = [d for d in delays if math.isfinite(d)]
    print(f"  one group loses half its events from 10:00: found in {len(found)}/{len(delays)} months;"
          f" delay median {np.median(found) * 15 if found else float('nan'):.0f} min, "
          f"90th percentile {np.percentile(found, 90) * 15 if found else float('nan'):.0f} min")
    print(f"  ({time.perf_counter() - t0:.1f} s)")


if __name__ == "__main__":
    main()
