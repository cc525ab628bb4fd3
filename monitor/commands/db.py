"""``gapwatch db upgrade [REV]|downgrade REV|current``: the history store's schema.

A downgrade that would drop rows asks first (``--yes``); a SQLite store is then copied
beside itself before anything is dropped, and the output names the copy.
"""

from __future__ import annotations

import sys
from datetime import datetime, timezone

from . import SUMMARIES
from ._common import add_config_option, program


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "db", help=SUMMARIES["db"],
        description="Manage the history store's schema with the migrations shipped in gapwatch.")
    p.add_argument("action", choices=["upgrade", "downgrade", "current"],
                   help="upgrade: to the newest revision (or to REV); downgrade: to REV; "
                        "current: show the revision")
    p.add_argument("revision", nargs="?", default=None, metavar="REV",
                   help="target revision (downgrade needs one, e.g. base; upgrade defaults to head)")
    add_config_option(p)
    p.add_argument("--store", default=None, metavar="URL", help="store URL instead of the configuration's [store] url")
    p.add_argument("--yes", action="store_true",
                   help="downgrade even though it drops recorded history (a SQLite store is copied beside itself first)")
    p.set_defaults(func=run)


def store_url(args) -> str:
    if args.store:
        return args.store
    # lazy: start-up time of the command line (the configuration stack).
    from ..config import load_config

    return load_config(args.config).store_url


def run(args) -> int:
    # lazy: start-up time of the command line (the store stack is SQLAlchemy and Alembic).
    from ..store import engine as store

    url = store_url(args)
    if args.action == "downgrade" and not args.revision:
        print("gapwatch db: downgrade needs a revision (e.g. 'base'); got none", file=sys.stderr)
        return 2
    if args.action == "upgrade":
        store.upgrade(url, args.revision or "head")
    elif args.action == "downgrade":
        store.check_revision(args.revision)
        engine = store.make_engine(url)
        try:
            at_risk = store.rows_at_risk(engine, args.revision)
        finally:
            engine.dispose()
        if at_risk:
            held = ", ".join(f"{table} {rows}" for table, rows in sorted(at_risk.items()))
            if not args.yes:
                print(f"gapwatch db: downgrade to {args.revision} would drop recorded history (rows: {held}); "
                      f"run again with --yes to go ahead", file=sys.stderr)
                return 2
            stamp = datetime.now(timezone.utc).strftime("%Y%m%dT%H%M%SZ")
            copy = store.backup_sqlite(url, f"before-downgrade-{stamp}")
            if copy is not None:
                print(f"backup of the store before the downgrade: {copy}")
        store.downgrade(url, args.revision)
    engine = store.make_engine(url)
    try:
        state = store.migration_state(engine)
    finally:
        engine.dispose()
    current = state["current"] or "none (empty store)"
    upgrade = f"`{program()} db upgrade`"
    note = "up to date" if state["up_to_date"] else f"run {upgrade}"
    if state["current"] and not state["up_to_date"] and args.action == "downgrade":
        note = f"behind: {upgrade} brings it back"
    print(f"store revision: {current}; newest: {state['head']} ({note})")
    return 0
