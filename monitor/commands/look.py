"""``gapwatch look [NAME ...] [--as-of TIMESTAMP]``: take one look now (or as of a given time)."""

from __future__ import annotations

import json
import sys
from datetime import datetime, timezone

from ..errors import (DesignChangedError, InvalidArgumentError, LookAlreadyRecordedError,
                      SourceSchemaError, SourceUnavailableError)
from ..vocabulary import as_utc, json_safe
from . import SUMMARIES
from ._common import add_config_option, as_typed, program


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "look", help=SUMMARIES["look"],
        description="Take one look at each named comparison (default: all) and record it in the store. "
                    "Prints one line per comparison: look number, decision, estimate and interval.")
    p.add_argument("names", nargs="*", metavar="NAME", help="comparisons to look at (default: all)")
    p.add_argument("--as-of", default=None, metavar="TIMESTAMP",
                   help="ISO time of the look, e.g. 2026-03-02T08:00:00+00:00 (no offset = UTC; default: now)")
    add_config_option(p)
    p.add_argument("--json", action="store_true", help="print one JSON object per comparison")
    p.set_defaults(func=run)


def parse_as_of(text) -> datetime:
    """``--as-of`` value → aware UTC datetime (naive times are UTC)."""
    if text is None:
        return datetime.now(timezone.utc)
    try:
        moment = datetime.fromisoformat(text.strip().replace("Z", "+00:00"))
    except ValueError:
        raise InvalidArgumentError(f"--as-of must be an ISO timestamp like 2026-03-02T08:00:00+00:00; got {text!r}") from None
    return as_utc(moment, "--as-of")


def run(args) -> int:
    # lazy: start-up time of the command line (configuration, look and store stacks).
    from ..config import load_config
    from ..look import take_look
    from ..store.engine import ensure_current, make_engine

    as_of = parse_as_of(args.as_of)
    config = load_config(args.config)
    names = args.names or [c.name for c in config.comparisons]
    comparisons = [config.comparison(name) for name in names]  # unknown names stop here (exit 2)
    engine = make_engine(config.store_url)
    status = 0
    try:
        ensure_current(engine)
        for c in comparisons:
            try:
                record = take_look(config, c, as_of=as_of, engine=engine)
            except (SourceUnavailableError, SourceSchemaError) as exc:
                print(f"gapwatch look: {c.name}: {exc} (nothing recorded)", file=sys.stderr)
                status = max(status, 1)
                continue
            except (DesignChangedError, LookAlreadyRecordedError) as exc:
                print(f"gapwatch look: {as_typed(exc)}", file=sys.stderr)
                status = max(status, 1)
                continue
            if record is None:
                print(f"{c.name}: stopped; no look taken (see `{program()} history {c.name}`)")
            elif args.json:
                print(json.dumps(json_safe(record.to_dict()), allow_nan=False))
            else:
                print(record.line())
                for warning in record.warnings:
                    print(f"  warning: {warning}")
    finally:
        engine.dispose()
    return status
