"""``gapwatch restart NAME``: archive the comparison's current version; the next look starts anew."""

from __future__ import annotations

import getpass
import sys
from datetime import datetime, timezone

from ..config import load_config
from ._common import add_config_option


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "restart", help="archive a comparison's current version so its next look starts a new one",
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


def _who(given):
    if given:
        return given
    try:
        return getpass.getuser()
    except (KeyError, OSError):  # no login name in this environment
        return "unknown"


def run(args) -> int:
    from ..look.restart import restart_comparison
    from ..store.engine import make_engine

    config = load_config(args.config)
    engine = make_engine(config.store_url)
    try:
        done = restart_comparison(engine, args.name, made_at=datetime.now(timezone.utc), made_by=_who(args.by),
                                  reason=args.reason.strip(), from_start=args.from_start)
    finally:
        engine.dispose()
    old, new = done["archived_version"], done["next_version"]
    print(f"{done['name']}: version {old} archived; the next look starts version {new}")
    cutoff = (done["watermark"] or {}).get("cutoff")
    if args.from_start:
        print(f"  version {new} reads all data from the start: the data version {old} already tested will be "
              f"tested again (its false alarms add to version {old}'s); the history marks it", file=sys.stdout)
    elif cutoff:
        print(f"  version {new} reads only data after {cutoff} (where version {old} stopped reading): "
              f"nothing version {old} tested is tested again")
    return 0
