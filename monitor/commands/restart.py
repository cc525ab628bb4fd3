"""``gapwatch restart NAME``: archive the comparison's current version; the next look starts anew."""

from __future__ import annotations

from ..errors import UnknownComparisonError
from . import SUMMARIES
from ._common import add_config_option, readback


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "restart", help=SUMMARIES["restart"],
        description="Archive the current version of a comparison (its looks, cells and alerts stay as "
                    "they are). The next look creates version + 1 with the configured design.")
    p.add_argument("name", metavar="NAME", help="comparison name")
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
            done = restart_comparison(engine, args.name)
        except UnknownComparisonError as exc:
            raise UnknownComparisonError(f"{exc}{_known_active(engine)}") from None
    finally:
        engine.dispose()
    print(f"{done['name']}: version {done['archived_version']} archived; "
          f"the next look starts version {done['next_version']}")
    return 0
