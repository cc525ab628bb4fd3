"""Time the boundary engine the way a live monitor uses it.

Prints milliseconds per look for:

* a whole design of ``--looks`` irregular looks (``efficacy_boundaries``);
* ``--updates`` successive looks added one at a time to a running
  ``SequentialBoundary`` (with and without futility), as ``gapwatch run`` does;
* a restart: ``SequentialBoundary.resume`` from ``--resume-at`` recorded looks,
  then the next look;
* ``crossing_probabilities`` for a small design (what planning and inference
  call repeatedly).

The target is a new look's boundary in under 5 ms. Run from the project root:

    python tests/benchmarks/bench_boundaries.py
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from monitor.stats.boundaries import (  # noqa: E402
    FutilitySpec,
    SequentialBoundary,
    crossing_probabilities,
    efficacy_boundaries,
)


def irregular_fractions(count: int, rng: np.random.Generator) -> list[float]:
    """``count`` increasing fractions ending at 1, with gaps varying tenfold."""
    gaps = rng.uniform(0.1, 1.0, size=count)
    return [float(t) for t in np.cumsum(gaps) / gaps.sum()]


def per_look_ms(seconds: list[float]) -> str:
    ms = np.asarray(seconds) * 1e3
    return (
        f"mean {ms.mean():.2f}  median {np.median(ms):.2f}  p95 {np.percentile(ms, 95):.2f}  "
        f"max {ms.max():.2f} ms/look"
    )


def live_updates(fractions, spending, alternative, futility=None):
    """Wall-clock and CPU seconds of each ``add_look`` (CPU time is robust to a busy machine)."""
    boundary = SequentialBoundary(0.05, spending, alternative, futility=futility)
    wall, cpu = [], []
    for t in fractions:
        start, start_cpu = time.perf_counter(), time.process_time()
        boundary.add_look(t)
        wall.append(time.perf_counter() - start)
        cpu.append(time.process_time() - start_cpu)
    return wall, cpu


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--looks", type=int, default=100, help="looks in the whole-design run (default 100)")
    parser.add_argument("--updates", type=int, default=1000, help="one-at-a-time looks (default 1000)")
    parser.add_argument("--resume-at", type=int, default=50, help="recorded looks before a restart (default 50)")
    parser.add_argument("--repeats", type=int, default=5, help="repeats of the short timings (default 5)")
    parser.add_argument("--seed", type=int, default=2026)
    args = parser.parse_args(argv)
    rng = np.random.default_rng(args.seed)

    print(f"whole design, {args.looks} irregular looks (efficacy_boundaries):")
    fractions = irregular_fractions(args.looks, rng)
    for spending, alternative in (("obrien-fleming", "two-sided"), ("pocock", "greater")):
        runs, cpu = [], []
        for _ in range(args.repeats):
            start, start_cpu = time.perf_counter(), time.process_time()
            efficacy_boundaries(fractions, 0.05, spending, alternative)
            runs.append(time.perf_counter() - start)
            cpu.append(time.process_time() - start_cpu)
        best, best_cpu = min(runs), min(cpu)
        print(f"  {spending:>15} {alternative:>9}: {best * 1e3:8.1f} ms total, {best / args.looks * 1e3:.2f} ms/look "
              f"(CPU {best_cpu / args.looks * 1e3:.2f} ms/look)")

    print(f"\nlive monitor, {args.updates} looks added one at a time (SequentialBoundary.add_look):")
    fractions = irregular_fractions(args.updates, rng)
    futility = FutilitySpec("hsd:-2", 0.1, 2.9)
    cases = [
        ("obrien-fleming", "two-sided", None),
        ("hsd:-4", "greater", None),
        ("obrien-fleming", "greater", futility),
    ]
    for spending, alternative, fut in cases:
        wall, cpu = live_updates(fractions, spending, alternative, fut)
        label = f"{spending} {alternative}{' + futility' if fut else ''}"
        print(f"  {label:>36}: wall {per_look_ms(wall)}")
        print(f"  {'':>36}  CPU  {per_look_ms(cpu)}")
        print(f"  {'(last 100 looks, CPU)':>36}: mean {statistics.fmean(cpu[-100:]) * 1e3:.2f} ms/look")

    k = args.resume_at
    print(f"\nrestart after {k} recorded looks (resume, then the next look):")
    for fut in (None, futility):
        live = SequentialBoundary(0.05, "obrien-fleming", "two-sided" if fut is None else "greater", futility=fut)
        recorded = [live.add_look(t) for t in fractions[:k]]
        resume_times, next_times = [], []
        for _ in range(args.repeats):
            start = time.perf_counter()
            resumed = SequentialBoundary.resume(
                live.alpha, live.spending, live.alternative,
                [b.fraction for b in recorded], [b.z for b in recorded],
                futility_z=None if fut is None else [b.futility_z for b in recorded], futility=fut,
            )
            middle = time.perf_counter()
            resumed.add_look(fractions[k])
            resume_times.append(middle - start)
            next_times.append(time.perf_counter() - middle)
        label = "with futility" if fut else "efficacy only"
        print(
            f"  {label:>14}: resume {min(resume_times) * 1e3:.1f} ms "
            f"({min(resume_times) / k * 1e3:.3f} ms per recorded look), next look {min(next_times) * 1e3:.2f} ms"
        )

    print("\ncrossing_probabilities (planning / inference building block):")
    for looks in (3, 5, 10):
        t = np.arange(1, looks + 1) / looks
        z = np.full(looks, 2.4)
        runs = []
        for _ in range(max(args.repeats, 20)):
            start = time.perf_counter()
            crossing_probabilities(t, z, -z, drift=2.8)
            runs.append(time.perf_counter() - start)
        print(f"  {looks:>2} regular looks, two bounds, drift 2.8: {min(runs) * 1e3:.2f} ms per call")
    return 0


if __name__ == "__main__":
    sys.exit(main())
