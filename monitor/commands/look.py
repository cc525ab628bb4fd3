"""``gapwatch look [NAME ...] [--as-of TIMESTAMP] [--replay-from TIMESTAMP --replay-step DURATION]``.

Takes one look now (or as of a given time). A look's as-of never goes back: one before the
comparison's last look is refused, and so is one beyond now plus ``FUTURE_TOLERANCE_SECONDS``
(a typo'd year would otherwise set the cutoff of every later live look). ``--replay-from``
builds history on a fresh comparison: looks at FROM, FROM + step, ... up to the as-of.
"""

from __future__ import annotations

import json
import sys
from datetime import datetime, timedelta, timezone

from ..errors import (AsOfBeforeLastLookError, DesignChangedError, InvalidArgumentError, LookAlreadyRecordedError,
                      SourceSchemaError, SourceUnavailableError)
from ..vocabulary import as_utc, json_safe, parse_duration
from . import SUMMARIES
from ._common import add_config_option, as_typed, program

# How far ahead of this machine's clock an --as-of may be (clocks differ a little between machines).
FUTURE_TOLERANCE_SECONDS = 300.0
# A replay takes at most this many looks per comparison (a step typo must not run for days).
REPLAY_MAX_LOOKS = 10000


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "look", help=SUMMARIES["look"],
        description="Take one look at each named comparison (default: all) and record it in the store. "
                    "Prints one line per comparison: look number, decision, estimate and interval.")
    p.add_argument("names", nargs="*", metavar="NAME", help="comparisons to look at (default: all)")
    p.add_argument("--as-of", default=None, metavar="TIMESTAMP",
                   help="ISO time of the look, e.g. 2026-03-02T08:00:00+00:00 (no offset = UTC; default: now)")
    p.add_argument("--replay-from", default=None, metavar="TIMESTAMP",
                   help="build history: look at TIMESTAMP, then every --replay-step until the as-of "
                        "(for a fresh comparison; never before its last look)")
    p.add_argument("--replay-step", default=None, metavar="DURATION",
                   help="time between replayed looks, e.g. 1h or 1d (default: the comparison's every)")
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


def _not_in_future(moment: datetime, option: str, now: datetime) -> datetime:
    if (moment - now).total_seconds() > FUTURE_TOLERANCE_SECONDS:
        raise InvalidArgumentError(
            f"{option} {moment.isoformat()} is in the future (now {now.replace(microsecond=0).isoformat()}); "
            f"a look cannot read data that has not arrived")
    return moment


def look_times(c, as_of: datetime, replay_from, replay_step) -> list[datetime]:
    """The as-of of every look to take for comparison ``c``: one, or a replayed series ending at ``as_of``."""
    if replay_from is None:
        if replay_step is not None:
            raise InvalidArgumentError("--replay-step needs --replay-from")
        return [as_of]
    if replay_step is not None:
        step = parse_duration(replay_step)
    elif isinstance(c.schedule, (int, float)):
        step = float(c.schedule)
    else:
        raise InvalidArgumentError(f"comparison {c.name!r} looks on a cron schedule; give --replay-step")
    if not step > 0:
        raise InvalidArgumentError(f"--replay-step must be positive; got {replay_step!r}")
    if replay_from > as_of:
        raise InvalidArgumentError(f"--replay-from {replay_from.isoformat()} is after the as-of {as_of.isoformat()}")
    count = int((as_of - replay_from).total_seconds() // step) + 1
    if count > REPLAY_MAX_LOOKS:
        raise InvalidArgumentError(f"--replay-from/--replay-step would take {count} looks of {c.name!r} "
                                   f"(at most {REPLAY_MAX_LOOKS}); give a longer step")
    times = [replay_from + timedelta(seconds=step * i) for i in range(count)]
    return times if times[-1] == as_of else times + [as_of]


def _print_record(c, record, as_json: bool) -> None:
    if record is None:
        message = f"stopped; no look taken (see `{program()} history {c.name}`)"
        if as_json:
            print(json.dumps({"comparison": c.name, "state": "stopped", "look": None, "message": message}))
        else:
            print(f"{c.name}: {message}")
    elif as_json:
        print(json.dumps(json_safe(record.to_dict()), allow_nan=False))
    else:
        print(record.line())
        for warning in record.warnings:
            print(f"  warning: {as_typed(warning)}")


def run(args) -> int:
    # lazy: start-up time of the command line (configuration, look and store stacks).
    from ..config import load_config
    from ..look import take_look
    from ..store.engine import ensure_current, make_engine

    now = datetime.now(timezone.utc)
    as_of = _not_in_future(parse_as_of(args.as_of), "--as-of", now)
    replay_from = None
    if args.replay_from is not None:
        replay_from = _not_in_future(parse_as_of(args.replay_from), "--replay-from", now)
    config = load_config(args.config)
    names = args.names or [c.name for c in config.comparisons]
    comparisons = [config.comparison(name) for name in names]  # unknown names stop here (exit 2)
    plans = {c.name: look_times(c, as_of, replay_from, args.replay_step) for c in comparisons}
    engine = make_engine(config.store_url)
    status = 0
    try:
        ensure_current(engine)
        for c in comparisons:
            for moment in plans[c.name]:
                try:
                    record = take_look(config, c, as_of=moment, engine=engine)
                except (SourceUnavailableError, SourceSchemaError) as exc:
                    print(f"gapwatch look: {c.name}: {as_typed(exc)} (nothing recorded)", file=sys.stderr)
                    status = max(status, 1)
                    break
                except AsOfBeforeLastLookError as exc:
                    print(f"gapwatch look: {as_typed(exc)} (nothing recorded)", file=sys.stderr)
                    status = 2
                    break
                except (DesignChangedError, LookAlreadyRecordedError) as exc:
                    print(f"gapwatch look: {as_typed(exc)}", file=sys.stderr)
                    status = max(status, 1)
                    break
                _print_record(c, record, args.json)
                if record is None:
                    break
    finally:
        engine.dispose()
    return status
