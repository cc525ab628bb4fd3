"""How long the command line takes to start, as whole processes, against a bare interpreter.

Runs each command as a fresh process several times, alternating the commands so
machine load falls on all of them alike, and measures each run twice: the wall
time seen by the caller (``time.perf_counter``) and the CPU time the process used
(user + system, from ``resource.getrusage(RUSAGE_CHILDREN)``). CPU time is the
figure the targets are judged on: on a shared machine it moves far less with
other people's load than the wall time, which is printed beside it.

Commands measured:

    bare          python -c pass                         (the interpreter alone)
    --help        gapwatch --help
    test welch    gapwatch test welch --group1 40,12.5,3.1 --group2 38,11.2,2.7
    bounds        gapwatch bounds --fractions 0.5,1      (loads scipy; for comparison)

Targets: ``--help`` within 0.25 s of the bare interpreter, ``test`` within 0.5 s.

Usage::

    .venv/bin/python tests/benchmarks/bench_startup.py               # 15 runs of each
    .venv/bin/python tests/benchmarks/bench_startup.py --repeats 5
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import subprocess
import sys
import time
from pathlib import Path

TARGETS = {"--help": 0.25, "test welch": 0.5}


def commands(gapwatch: str) -> dict:
    return {
        "bare": [sys.executable, "-c", "pass"],
        "--help": [gapwatch, "--help"],
        "test welch": [gapwatch, "test", "welch", "--group1", "40,12.5,3.1", "--group2", "38,11.2,2.7"],
        "bounds": [gapwatch, "bounds", "--fractions", "0.5,1"],
    }


def run_once(argv) -> tuple[float, float]:
    """(wall seconds, CPU seconds) of one whole process running ``argv``."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    started = time.perf_counter()
    subprocess.run(argv, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=True)
    wall = time.perf_counter() - started
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return wall, cpu


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=15, help="runs of each command (default 15)")
    parser.add_argument("--gapwatch", default=str(Path(sys.executable).with_name("gapwatch")),
                        help="the gapwatch program to time (default: the one beside this interpreter)")
    args = parser.parse_args(argv)
    if not os.access(args.gapwatch, os.X_OK):
        parser.error(f"--gapwatch {args.gapwatch!r} is not an executable program")

    todo = commands(args.gapwatch)
    for argv_ in todo.values():  # one unmeasured run each: byte-code compiled, files in the page cache
        run_once(argv_)
    walls = {name: [] for name in todo}
    cpus = {name: [] for name in todo}
    for _ in range(args.repeats):
        for name, argv_ in todo.items():
            wall, cpu = run_once(argv_)
            walls[name].append(wall)
            cpus[name].append(cpu)

    bare_wall = statistics.median(walls["bare"])
    bare_cpu = statistics.median(cpus["bare"])
    print(f"{args.repeats} runs of each command, medians; load average {os.getloadavg()[0]:.2f}")
    print(f"{'command':12} {'wall s':>8} {'cpu s':>8} {'cpu - bare':>11} {'cpu / bare':>11} "
          f"{'wall - bare':>12}  target (cpu - bare)")
    failed = False
    for name in todo:
        wall, cpu = statistics.median(walls[name]), statistics.median(cpus[name])
        target = TARGETS.get(name)
        verdict = ""
        if target is not None:
            met = cpu - bare_cpu <= target
            failed |= not met
            verdict = f"<= {target:.2f} s {'met' if met else 'MISSED'}"
        print(f"{name:12} {wall:8.3f} {cpu:8.3f} {cpu - bare_cpu:11.3f} {cpu / bare_cpu:11.1f} "
              f"{wall - bare_wall:12.3f}  {verdict}")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
