"""Rates per unit of work and the volume check, simulated: false alarms, false warnings, delays.

Part 1 — ratio comparisons under daily looks, through the look's own decision step
(``monitor.look.decision.weigh`` and ``decide`` on the running cells a ratio look keeps; see
tests/ratio_simulation.py). Two packing lines (the groups) pack 30 batches a day each; a row per
batch holds ``defects`` and ``units`` (gamma, mean 800, coefficient of variation 0.6, so a big
batch weighs many small ones), defects Poisson at 4 per 1,000 units. No true difference, one
look a day, two-sided α = 0.05. Two cases: independent batches over 20 days (unclustered,
Welch–Satterthwaite df), and a day shock shared by a line's batches (log-normal, sd 0.10) over
30 days, clustered by day (``cluster_by = "day"``, ``min_clusters`` = 10).
Part 1b keeps the earlier vectorised run of the pure statistic (20 to 60 batches a day,
clustered by day from day 5) for comparison.

Part 2 — the volume check (monitor.stats.volume) over comparison-months of normal variation:
each group's quarter-hour counts follow a weekday pattern (quiet weekends), a day shock
(log-normal, sd 0.12) and bursty arrivals (negative binomial, variance twice the mean); the
history is the previous four same weekdays. A look every quarter hour runs both checks:
own volume for each group and the share between them. Reported: days with a false warning per
comparison-month (30 days), then the delay to the first warning after one group loses half its
events from 10:00 on a random weekday.

Part 2b — the same months, checked by the look's own volume step (monitor.look.volume,
``assess_volume``) on the hour cells a look keeps, with a look after every complete hour from
07:00 to 22:00: days with a false warning per comparison-month, and the delay (minutes after
10:00) to the first warning after one group loses half its events.

Run:  python tests/benchmarks/ratio_and_volume.py --streams 20000 --look-streams 10000 --months 500 --look-months 100 --seed 1
      (--parts 1,1b,2,2b picks the parts)
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from ratio_simulation import ratio_false_alarms  # noqa: E402
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


def _look_design():
    from monitor.config import ComparisonConfig
    from monitor.design import Design

    return Design.from_config(ComparisonConfig(
        name="volume", source="ops", table="events", group_column="site", groups=("north", "south"),
        value_column="seconds", time_column="done_at", planned_per_group=10 ** 6))


def volume_month_through_look(rng, design, drop_day=None, weeks=4, drop_to=0.5):
    """As :func:`volume_month`, but hourly looks run the look's own check (monitor.look.volume)
    on the hour cells a look keeps (each group's events per local hour, UTC here)."""
    from datetime import date, datetime, timedelta, timezone

    from monitor.look.volume import assess_volume

    counts, weeks = _month(rng, weeks_history=weeks, drop_day=drop_day, drop_to=drop_to)
    hourly = counts.reshape(counts.shape[0], 2, 24, 4).sum(axis=3)
    first = date(2026, 1, 5)                      # a Monday: day 0 of the weekday pattern
    cells = {}
    for d in range(7 * weeks):                    # the history, already read
        for g in (0, 1):
            for h in range(24):
                if hourly[d, g, h]:
                    cells[("hour", g, f"{first + timedelta(days=d)}T{h:02d}:00+00:00")] = (int(hourly[d, g, h]), 0.0, 0.0)
    warned_days, first_warning = set(), None
    for day in range(counts.shape[0] - 7 * weeks):
        d = 7 * weeks + day
        today = first + timedelta(days=d)
        for h in range(24):
            for g in (0, 1):
                if hourly[d, g, h]:
                    cells[("hour", g, f"{today}T{h:02d}:00+00:00")] = (int(hourly[d, g, h]), 0.0, 0.0)
            look_hour = h + 1                     # the look after this hour closed
            if look_hour < OPEN // 4 + 1 or look_hour > CLOSE // 4 or day in warned_days:
                continue
            cutoff = datetime(today.year, today.month, today.day, tzinfo=timezone.utc) + timedelta(hours=look_hour)
            if assess_volume(design, cells, cutoff)["state"] == "warning":
                warned_days.add(day)
                if first_warning is None and drop_day is not None and (day, look_hour * 60) >= (drop_day, 600):
                    first_warning = (day - drop_day) * 1440 + look_hour * 60 - 600
    return warned_days, first_warning


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--streams", type=int, default=20000)
    ap.add_argument("--months", type=int, default=200)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--look-streams", type=int, default=4000,
                    help="streams per case of Part 1 (through the look's decision step)")
    ap.add_argument("--parts", default="1,1b,2,2b", help="which parts to run (default all: 1,1b,2,2b)")
    ap.add_argument("--look-months", type=int, default=60,
                    help="comparison-months of Part 2b (the look's own hourly check)")
    args = ap.parse_args(argv)
    parts = set(args.parts.split(","))
    if "1" in parts:
        _part_one(args)
    if "1b" in parts:
        _part_one_b(args)
    if "2" in parts:
        _part_two(args)
    if "2b" in parts:
        _part_two_b(args)


def _part_one(args):
    t0 = time.perf_counter()
    print("Part 1: ratio comparisons through weigh/decide, daily looks, no true difference, alpha 0.05")
    print(f"{'case':34} {'streams':>8} {'looks':>6} {'false alarms':>13} {'MC s.e.':>8}")
    for label, day_sd, days in (("independent batches, 20 days", 0.0, 20),
                                ("day shocks, clustered by day, 30", 0.10, 30)):
        rate, se, looks = ratio_false_alarms(args.look_streams, args.seed, day_sd=day_sd, days=days)
        print(f"{label:34} {args.look_streams:8d} {looks:6d} {rate:13.4f} {se:8.4f}", flush=True)
    print(f"  ({time.perf_counter() - t0:.1f} s)")


def _part_one_b(args):
    t0 = time.perf_counter()
    print("Part 1b: the pure statistic vectorised, clustered by day from day 5")
    print(f"{'spending':18} {'streams':>8} {'false alarms':>13} {'MC s.e.':>8}")
    for spending in ("obrien-fleming", "pocock"):
        rate = ratio_false_alarm(args.streams, args.seed, spending=spending)
        se = math.sqrt(0.05 * 0.95 / args.streams)
        print(f"{spending:18} {args.streams:8d} {rate:13.4f} {se:8.4f}")
    print(f"  ({time.perf_counter() - t0:.1f} s)")


def _part_two(args):
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


def _part_two_b(args):
    t0 = time.perf_counter()
    design = _look_design()
    rng = np.random.default_rng(args.seed + 1)
    false_days = [len(volume_month_through_look(rng, design)[0]) for _ in range(args.look_months)]
    per_month = float(np.mean(false_days))
    se = float(np.std(false_days, ddof=1) / math.sqrt(args.look_months))
    print("Part 2b: the look's own volume check (hour cells, hourly looks 07:00-22:00, up to 8 weeks of history)")
    print(f"  days with a false warning per comparison-month: {per_month:.3f} (MC s.e. {se:.3f}; "
          f"{args.look_months} months)")
    delays = []
    for _ in range(args.look_months):
        _, first = volume_month_through_look(rng, design, drop_day=int(rng.integers(7, 21)))
        delays.append(first if first is not None else math.inf)
    _print_delays("one group loses half its events from 10:00", delays, rng)
    delays = [volume_month_through_look(rng, design, drop_day=int(rng.integers(7, 21)), drop_to=0.0)[1]
              for _ in range(max(args.look_months // 3, 10))]
    _print_delays("one group's events stop at 10:00", [math.inf if d is None else d for d in delays], rng)
    print(f"  ({time.perf_counter() - t0:.1f} s)")


def _print_delays(what, delays, rng):
    found = np.array([d for d in delays if math.isfinite(d)], dtype=float)
    if found.size:
        boot = [np.median(rng.choice(found, found.size)) for _ in range(2000)]
        print(f"  {what}: found in {found.size}/{len(delays)} months; "
              f"delay median {np.median(found):.0f} min (bootstrap s.e. {np.std(boot):.0f}), "
              f"mean {found.mean():.0f} min (s.e. {found.std(ddof=1) / math.sqrt(found.size):.0f}), "
              f"90th percentile {np.percentile(found, 90):.0f} min")


if __name__ == "__main__":
    main()
