"""``gapwatch verify NAME``: recompute every recorded look from the raw source rows (see ``monitor.verify``)."""

from __future__ import annotations

from ._common import add_config_option, whole_number_type


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "verify", help="recompute every recorded look from raw source rows and report mismatches",
        description="Recompute every recorded look of a comparison from the raw source rows (same cutoffs "
                    "and arrival watermarks) and report any look whose figures differ. Exit 1 on a mismatch.")
    p.add_argument("name", metavar="NAME", help="comparison name")
    p.add_argument("--version", type=whole_number_type(1), default=None, metavar="V",
                   help="comparison version (default: the newest)")
    add_config_option(p)
    p.set_defaults(func=run)


def run(args) -> int:
    # Imported here: the parser loads every command module, and the replay needs pandas,
    # SQLAlchemy and the statistics, which no other command's start should pay for.
    # lazy: start-up time of the command line.
    from ..config import load_config
    from ..store.engine import make_engine
    from ..verify import verify_looks

    config = load_config(args.config)
    engine = make_engine(config.store_url)
    try:
        results = verify_looks(config, args.name, engine, version=args.version)
    finally:
        engine.dispose()
    bad = [r for r in results if not r["ok"]]
    for r in bad:
        parts = ", ".join(f"{m['field']} recorded {m['recorded']!r} recomputed {m['recomputed']!r}"
                          for m in r["mismatches"])
        print(f"{args.name} look {r['look']}: MISMATCH: {parts}")
    print(f"{args.name}: {len(results) - len(bad)} of {len(results)} looks match the raw rows")
    return 1 if bad else 0
