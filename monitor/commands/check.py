"""``gapwatch check``: validate the configuration, reach every source, report the store's state."""

from __future__ import annotations

import argparse
import math
from dataclasses import replace
from datetime import datetime, timedelta, timezone

from ..errors import InvalidArgumentError, SourceUnavailableError, StoreBehindError, StoreUnavailableError
from . import SUMMARIES
from ._common import add_config_option, as_typed, counted, program


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "check", help=SUMMARIES["check"],
        description="Validate the configuration file, connect to each source and confirm the tables and "
                    "columns exist with usable types, and report the history store's migration state.")
    add_config_option(p)
    p.add_argument("--before-start", type=_days, nargs="?", const=14.0, default=None, metavar="DAYS",
                   help="for comparisons with a start and no baseline: measure whether the groups "
                        "already differed in the DAYS days before the start (default 14)")
    p.set_defaults(func=run)


def _days(text):
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a number of days: {text!r}") from None
    if not (math.isfinite(value) and value > 0):
        raise argparse.ArgumentTypeError(f"must be a positive number of days: {text!r}")
    return value


def run(args) -> int:
    # lazy: start-up time of the command line (configuration, source and store stacks).
    from ..config import load_config
    from ..design import Design
    from ..source.groups import group_problems
    from ..source.reader import Source, SourceSpec
    from ..store.engine import make_engine, migration_state

    config = load_config(args.config)  # every problem at once, as a ConfigError
    print(f"{config.path}: configuration valid ({counted(len(config.comparisons), 'comparison')}, "
          f"{counted(len(config.sources), 'source')}, {counted(len(config.channels), 'channel')})")
    failed = False
    sources = {}
    try:
        for c in config.comparisons:
            if c.source not in sources:
                sources[c.source] = Source(config.sources[c.source].url, name=c.source)
            try:
                spec = SourceSpec.from_design(Design.from_config(c), shift=0.0, arrival_column=c.arrival_column)
                problems = sources[c.source].check(spec)
                if not [p for p in problems if not p.startswith("warning:")]:
                    problems += group_problems(sources[c.source], spec)
            except (SourceUnavailableError, InvalidArgumentError) as exc:  # unreachable, or no plan possible
                print(f"comparison {c.name!r}: {as_typed(exc)}")
                failed = True
                continue
            errors = [p for p in problems if not p.startswith("warning:")]
            for p in problems:
                print(f"comparison {c.name!r}: {p}")
            if errors:
                failed = True
            else:
                print(f"comparison {c.name!r}: source {c.source!r} table {c.table!r} ok")
                if args.before_start is not None and c.start is not None and not c.before_after:
                    line, differed = gap_before_start(sources[c.source], c, spec, args.before_start)
                    print(f"comparison {c.name!r}: {line}")
            if not c.notify:
                print(f"comparison {c.name!r}: warning: no alert channel configured (notify is empty); "
                      f"its alerts are recorded and nobody is told")
    finally:
        for s in sources.values():
            s.dispose()
    try:
        engine = make_engine(config.store_url, create=False)
    except (StoreBehindError, StoreUnavailableError) as exc:
        print(f"store: {as_typed(exc)}")
        return 1
    try:
        state = migration_state(engine)
    except Exception as exc:  # noqa: BLE001 - any store failure is reported, not raised
        print(f"store: cannot be read ({as_typed(exc)})")
        return 1
    finally:
        engine.dispose()
    if state["up_to_date"]:
        print(f"store: at revision {state['current']} (up to date)")
        # lazy: start-up time of the command line (the read side), as above.
        from ..store.readback import monitor_liveness

        engine = make_engine(config.store_url, create=False)
        try:
            liveness = monitor_liveness(engine, now=datetime.now(timezone.utc))
        finally:
            engine.dispose()
        if liveness["quiet"]:
            print(f"service: warning: {as_typed(liveness['message'])}")
        elif liveness["last_beat_at"] is not None:
            print(f"service: {liveness['workers_alive']} worker(s) alive; last check {liveness['last_check_at'] or 'none yet'}")
    else:
        print(f"store: at revision {state['current'] or 'none (empty)'}, newest {state['head']}; "
              f"run `{program()} db upgrade`")
        failed = True
    return 1 if failed else 0


def gap_before_start(source, c, spec, days):
    """Whether a comparison's groups already differed in the ``days`` before its start.

    Reads per-(group, local day) aggregates of that period (nothing from the start on) and
    compares the groups with a day-clustered (CR1) difference at the comparison's alpha.
    Returns ``(line, differed)``: a warning naming the remedy, or what was found.
    """
    # lazy: start-up time of the command line (the clustered statistics load numpy and scipy).
    from ..calendar import bucket_key
    from ..stats.clustered import cluster_robust_difference
    from ..vocabulary import baseline_gap_words

    start = c.window["start"]
    shift = 0.0 if c.metric == "proportion" else (source.first_value(spec) or 0.0)
    spec = replace(spec, shift=float(shift), start=start - timedelta(days=days), end=start)
    batch = source.read_cells(spec, None, start)
    cells: dict = {}
    for cell in batch.cells:
        key = (cell.group_index, bucket_key(cell.slot, "day", c.zone))
        n, s1 = cells.get(key, (0, 0.0))
        cells[key] = (n + cell.n, s1 + cell.sum_dev)
    keys = sorted(cells)
    counts = [sum(cells[k][0] for k in keys if k[0] == gi) for gi in (0, 1)]
    if min(counts) == 0:
        return (f"no events of both groups in the {days:g} days before the start, so no gap before it "
                f"can be measured"), False
    result = cluster_robust_difference([k[0] for k in keys], [k[1] for k in keys], [cells[k][0] for k in keys],
                                       [cells[k][1] for k in keys], shift, alpha=c.alpha)
    low, high = result.ci
    words = baseline_gap_words([str(g) for g in c.groups], result.estimate, low, high,
                               value_column=c.value_column, metric=c.metric)
    if result.reject:
        return (f"warning: {words}, over the {days:g} days before the start (p = {result.p_value:.3g}, "
                f"{result.clusters} days); a comparison from the start on reports that old gap as the "
                f"change and can alarm on it alone. Add baseline = \"{days:g}d\" so the comparison "
                f"estimates the change itself (the difference in differences)"), True
    if result.degenerate:
        return f"{words} over the {days:g} days before the start ({result.clusters} day(s): too few to test)", False
    return (f"{words} over the {days:g} days before the start (p = {result.p_value:.3g}): no gap found "
            f"before the start"), False
