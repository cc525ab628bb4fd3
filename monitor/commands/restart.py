"""``gapwatch restart NAME``: archive the comparison's current version; the next look starts anew."""

from __future__ import annotations

from ..config import load_config
from ._common import add_config_option


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "restart", help="archive a comparison's current version so its next look starts a new one",
        description="Archive the current version of a comparison (its looks, cells and alerts stay as "
                    "they are). The next look creates version + 1 with the configured design.")
    p.add_argument("name", metavar="NAME", help="comparison name")
    add_config_option(p)
    p.set_defaults(func=run)


def run(args) -> int:
    from ..look import restart_comparison
    from ..store.engine import make_engine

    config = load_config(args.config)
    engine = make_engine(config.store_url)
    try:
        done = restart_comparison(engine, args.name)
    finally:
        engine.dispose()
    print(f"{done['name']}: version {done['archived_version']} archived; "
          f"the next look starts version {done['next_version']}")
    return 0
