"""Rehearse the demo without waiting: feed and look in simulated time only.

The live demo's outcomes depend on real time only through when looks happen.
A rehearsal fixes that too: it advances the simulated clock in equal steps,
feeds what has arrived and takes one look at every comparison per step, with
the real look code and a real store. It answers "does the demo tell its story
for this seed?" in seconds, and across many seeds from the command line::

    .venv/bin/python -m demo_db.rehearsal --seeds 1 2 3 4 5 --hours 144 --step 2
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from dataclasses import dataclass
from datetime import datetime, timedelta
from pathlib import Path

from monitor.config import load_config
from monitor.look import LookMemory, take_look
from monitor.source.reader import Source
from monitor.store.engine import make_engine

from .feed import LiveFeed
from .folder import prepare_folder
from .scenario import DEFAULT_SEED, LIVE_START

__all__ = ["Rehearsal", "rehearse", "main"]


@dataclass(frozen=True)
class Rehearsal:
    """Every look of every comparison, in order, as ``(as_of, decision, LookRecord)``."""

    seed: int
    looks: dict

    def decisions(self, name) -> list[str]:
        return [decision for _, decision, _ in self.looks[name]]

    def stop(self, name):
        """``(hours after the live start, decision)`` of the look that stopped ``name``, or None."""
        for as_of, decision, _ in self.looks[name]:
            if decision in ("difference_found", "no_material_difference", "plan_complete"):
                return (as_of - LIVE_START).total_seconds() / 3600.0, decision
        return None


def rehearse(folder, *, seed: int = DEFAULT_SEED, hours: float = 48.0, step_hours: float = 2.0) -> Rehearsal:
    """Build the demo in the empty ``folder`` and run it for ``hours`` of simulated time."""
    demo = prepare_folder(folder, reset=True, seed=seed)
    config = load_config(demo.config_path)
    now = {"t": demo.start}
    feed = LiveFeed(demo.path, lambda: now["t"], seed=seed)
    engine = make_engine(config.store_url)
    sources = {name: Source(s.url, name=name) for name, s in config.sources.items()}
    looks = {c.name: [] for c in config.comparisons}
    memory = LookMemory()
    try:
        at: datetime = demo.start
        end = demo.start + timedelta(hours=hours)
        while at <= end:
            now["t"] = at
            feed.advance(at)
            for comparison in config.comparisons:
                record = take_look(config, comparison, as_of=at, engine=engine, source=sources[comparison.source],
                                   memory=memory)
                if record is not None and not getattr(record, "quiet", False):  # a quiet check is no look
                    looks[comparison.name].append((at, record.decision, record))
            at += timedelta(hours=step_hours)
    finally:
        feed.close()
        for source in sources.values():
            source.dispose()
        engine.dispose()
    return Rehearsal(seed, looks)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(prog="python -m demo_db.rehearsal", description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, nargs="+", default=[DEFAULT_SEED])
    parser.add_argument("--hours", type=float, default=96.0, help="simulated hours after the live start")
    parser.add_argument("--step", type=float, default=2.0, help="simulated hours between looks")
    args = parser.parse_args(argv)
    for seed in args.seeds:
        with tempfile.TemporaryDirectory(prefix="gapwatch-rehearsal-") as folder:
            result = rehearse(Path(folder), seed=seed, hours=args.hours, step_hours=args.step)
        cells = []
        for name, looks in result.looks.items():
            stop = result.stop(name)
            alarm = any(d == "difference_found" for d in result.decisions(name))
            where = f"{stop[1]} at +{stop[0]:.0f} h" if stop else f"{looks[-1][1] if looks else 'no look'}"
            cells.append(f"{name}: {where}{' (alarm)' if alarm and not stop else ''}")
        print(f"seed {seed}: " + "; ".join(cells), flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
