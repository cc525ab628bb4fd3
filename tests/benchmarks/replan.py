"""Changed plans and the choice of fraction: false-alarm rate and power, by simulation.

Part 1 — data-driven changes of plan (monitor.stats.replan_simulate.simulate_replanning).
A two-sided comparison at alpha 0.05, O'Brien-Fleming-type spending, planned for
power 0.8 at four equally spaced looks. The first look comes at 0.4 of the plan;
there a rule decides from the data:

* none                 — keep the plan (the reference);
* promising-doubles    — double the plan when the conditional power under the
                         interim estimate is 0.3 to 0.8;
* falling-rate-halves  — halve the plan in half of the comparisons, whatever the data say;
* double-or-halve      — double when promising, halve when already strong
                         (conditional power 0.8 or more): the rule most likely to
                         turn a lucky early lead into a claim.

A changed plan continues with three equally spaced looks over its remainder,
either by the conditional error principle (what `gapwatch replan` does) or by
restarting and spending a fresh alpha on all data (what a restart that re-reads
every row does). Both continue the same simulated data.

Part 2 — events- against information-based fractions when the planning sd is
off by ±30 % (simulate_fraction_choice): difference 0.25 at true sd 1, power
0.8, five looks.

Run:  python tests/benchmarks/replan.py --streams 100000 --power-streams 40000 --seed 1
      python tests/benchmarks/replan.py --part 1 --spending pocock
      python tests/benchmarks/replan.py --streams 4000 --power-streams 2000   # quick

Prints Markdown tables with Monte Carlo standard errors; every false-alarm row
says whether it lies within alpha + 3 s.e.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from monitor.stats.replan_simulate import RULES, simulate_fraction_choice, simulate_replanning  # noqa: E402

ALPHA = 0.05


def part_one(streams, power_streams, seed, spending):
    print(f"## Data-driven changes of plan, {spending} spending ({streams:,} streams per false-alarm row, "
          f"{power_streams:,} per power row)\n")
    print("| rule | continued by | plans changed | false-alarm rate (s.e.) | within alpha + 3 s.e. "
          "| power at the planned difference (s.e.) | power at 0.75 of it (s.e.) | mean information, planned difference |")
    print("| --- | --- | --- | --- | --- | --- | --- | --- |")
    for k, rule in enumerate(RULES):
        null = simulate_replanning(rule=rule, streams=streams, seed=seed + 10 * k, drift_ratios=(0.0,),
                                   spending=spending)
        alt = simulate_replanning(rule=rule, streams=power_streams, seed=seed + 10 * k + 1,
                                  drift_ratios=(1.0, 0.75), spending=spending)
        for m, row in enumerate(null):
            full = [r for r in alt if r.method == row.method]
            ok = "yes" if row.rejection <= ALPHA + 3 * row.rejection_se else "NO"
            method = "plan kept" if rule == "none" else row.method
            print(f"| {rule} | {method} | {row.changed:.3f} | {row.rejection:.4f} ({row.rejection_se:.4f}) "
                  f"| {ok} | {full[0].rejection:.4f} ({full[0].rejection_se:.4f}) "
                  f"| {full[1].rejection:.4f} ({full[1].rejection_se:.4f}) "
                  f"| {full[0].information:.3f} ({full[0].information_se:.3f}) |")
            if rule == "none":
                break  # both methods are the unchanged plan
        sys.stdout.flush()


def part_two(power_streams, seed):
    print(f"\n## Events- against information-based fraction, planning sd off ({power_streams:,} streams per row)\n")
    print("| fraction | planning sd / true sd | power (s.e.) | power - 0.8 | false-alarm rate (s.e.) "
          "| mean events per group at decision (s.e.) | planned events per group |")
    print("| --- | --- | --- | --- | --- | --- | --- |")
    for k, ratio in enumerate((0.7, 1.0, 1.3)):
        for j, kind in enumerate(("events", "information")):
            row = simulate_fraction_choice(fraction=kind, sd_ratio=ratio, streams=power_streams,
                                           seed=seed + 100 + 10 * k + j)
            null = simulate_fraction_choice(fraction=kind, sd_ratio=ratio, drift_ratio=0.0,
                                            streams=power_streams, seed=seed + 200 + 10 * k + j)
            print(f"| {kind} | {ratio:.1f} | {row.rejection:.4f} ({row.rejection_se:.4f}) "
                  f"| {row.rejection - 0.8:+.4f} | {null.rejection:.4f} ({null.rejection_se:.4f}) "
                  f"| {row.events:.1f} ({row.events_se:.1f}) | {row.planned_events} |")
            sys.stdout.flush()


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--streams", type=int, default=100_000, help="streams per false-alarm row")
    parser.add_argument("--power-streams", type=int, default=40_000, help="streams per power row")
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--part", choices=("1", "2", "both"), default="both")
    parser.add_argument("--spending", default="obrien-fleming", help="spending of part 1 (e.g. pocock)")
    args = parser.parse_args(argv)
    started = time.perf_counter()
    if args.part in ("1", "both"):
        part_one(args.streams, args.power_streams, args.seed, args.spending)
    if args.part in ("2", "both"):
        part_two(args.power_streams, args.seed)
    print(f"\n({time.perf_counter() - started:.0f} s)")


if __name__ == "__main__":
    main()
