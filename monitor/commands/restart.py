"""``gapwatch restart NAME``: archive the comparison's current version; the next look starts anew."""

from __future__ import annotations

from datetime import datetime, timezone

from ..errors import UnknownComparisonError
from . import SUMMARIES
from ._common import add_config_option, operator, readback


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "restart", help=SUMMARIES["restart"],
        description="Archive the current version of a comparison (its looks, cells and alerts stay as "
                    "they are). The next look creates version + 1 with the configured design and reads "
                    "only the data after the archived version's last look, so nothing is tested twice; "
                    "--from-start makes it read everything again.")
    p.add_argument("name", metavar="NAME", help="comparison name")
    p.add_argument("--from-start", action="store_true",
                   help="the new version reads all data again, including what the archived version tested")
    p.add_argument("--reason", default="", help="why the comparison restarts (kept in the history)")
    p.add_argument("--by", default=None, help="who restarts it (default: the operating-system user)")
    add_config_option(p)
    p.set_defaults(func=run)


def _known_active(engine) -> str:
    names = sorted({row["name"] for row in readback().list_comparisons(engine, archived=False)})
    return f"; known: {', '.join(names)}" if names else "; the store holds no active comparison"


def run(args) -> int:
    # lazy: start-up time of the command line (configuration, look and store stacks).
    from ..config import load_config
    from ..look import restart_comparison
    from ..store.engine import make_engine

    config = load_config(args.config)
    engine = make_engine(config.store_url)
    try:
        try:
            done = restart_comparison(engine, args.name, made_at=datetime.now(timezone.utc),
                                      made_by=operator(args.by), reason=args.reason.strip(),
                                      from_start=args.from_start)
        except UnknownComparisonError as exc:
            raise UnknownComparisonError(f"{exc}{_known_active(engine)}") from None
    finally:
        engine.dispose()
    old, new = done["archived_version"], done["next_version"]
    print(f"{done['name']}: version {old} archived; the next look starts version {new}")
    cutoff = (done["watermark"] or {}).get("cutoff")
    if args.from_start:
        print(f"  version {new} reads all data from the start: the data version {old} already tested will be "
              f"tested again (its false alarms add to version {old}'s); the history marks it")
    elif cutoff:
        print(f"  version {new} reads only data after {cutoff} (where version {old} stopped reading): "
              f"nothing version {old} tested is tested again")
    return 0
