"""``gapwatch check``: validate the configuration, reach every source, report the store's state."""

from __future__ import annotations

from datetime import datetime, timezone

from ..errors import InvalidArgumentError, SourceUnavailableError, StoreBehindError, StoreUnavailableError
from . import SUMMARIES
from ._common import add_config_option, counted, program


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "check", help=SUMMARIES["check"],
        description="Validate the configuration file, connect to each source and confirm the tables and "
                    "columns exist with usable types, and report the history store's migration state.")
    add_config_option(p)
    p.set_defaults(func=run)


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
                print(f"comparison {c.name!r}: {exc}")
                failed = True
                continue
            errors = [p for p in problems if not p.startswith("warning:")]
            for p in problems:
                print(f"comparison {c.name!r}: {p}")
            if errors:
                failed = True
            else:
                print(f"comparison {c.name!r}: source {c.source!r} table {c.table!r} ok")
            if not c.notify:
                print(f"comparison {c.name!r}: warning: no alert channel configured (notify is empty); "
                      f"its alerts are recorded and nobody is told")
    finally:
        for s in sources.values():
            s.dispose()
    try:
        engine = make_engine(config.store_url, create=False)
    except (StoreBehindError, StoreUnavailableError) as exc:
        print(f"store: {exc}")
        return 1
    try:
        state = migration_state(engine)
    except Exception as exc:  # noqa: BLE001 - any store failure is reported, not raised
        print(f"store: cannot be read ({exc})")
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
            print(f"service: warning: {liveness['message']}")
        elif liveness["last_beat_at"] is not None:
            print(f"service: {liveness['workers_alive']} worker(s) alive; last check {liveness['last_check_at'] or 'none yet'}")
    else:
        print(f"store: at revision {state['current'] or 'none (empty)'}, newest {state['head']}; "
              f"run `{program()} db upgrade`")
        failed = True
    return 1 if failed else 0
