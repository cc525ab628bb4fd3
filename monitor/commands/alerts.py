"""``gapwatch alerts [--state S] [--format table|json]`` and ``gapwatch alerts ack ID [--by NAME]``."""

from __future__ import annotations

import argparse
import getpass
import json
import sys
from datetime import datetime, timezone

from ..errors import UnknownComparisonError
from ..vocabulary import ALERT_STATES as STATES
from . import SUMMARIES
from ._common import add_config_option, open_store, readback

__all__ = ["register", "run"]


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "alerts",
        help=SUMMARIES["alerts"],
        description="List alerts from the history store, newest first, with the state of each "
                    "delivery; 'gapwatch alerts ack ID' records that someone has seen an alert.",
    )
    add_config_option(p)
    p.add_argument("--state", action="append", choices=STATES,
                   help="only alerts in this state (repeat for several)")
    p.add_argument("--comparison", metavar="NAME", help="only alerts of this comparison")
    p.add_argument("--format", choices=["table", "json"], default="table",
                   help="table (default) or json (a list of objects)")
    actions = p.add_subparsers(dest="alerts_action", metavar="ACTION")
    ack = actions.add_parser("ack", help="acknowledge an alert",
                             description="Mark an alert acknowledged (by whom, and when).")
    ack.add_argument("alert_id", metavar="ID", help="the alert's id (as listed)")
    ack.add_argument("--by", default=None, metavar="NAME", help="who acknowledges (default: the login name)")
    ack.add_argument("--config", metavar="FILE", dest="ack_config", help=argparse.SUPPRESS)
    ack.add_argument("--format", choices=["table", "json"], dest="ack_format", help=argparse.SUPPRESS)
    p.set_defaults(func=run)


def _engine(args):
    # "alerts ack ID --config F" is accepted too, where users tend to put it.
    return open_store(getattr(args, "ack_config", None) or args.config)


def _short(text, width):
    text = "-" if text is None else str(text)
    return text if len(text) <= width else text[: width - 1] + "~"


def _table(alerts) -> str:
    if not alerts:
        return "no alerts"
    header = f"{'id':36}  {'created (UTC)':19}  {'comparison':24}  {'kind / decision':28}  {'look':>4}  {'state':12}  deliveries"
    lines = [header]
    for a in alerts:
        what = a["decision"] or a["kind"]
        created = (a["created_at"] or "-")[:19].replace("T", " ")
        deliveries = ", ".join(
            f"{d['channel']}:{d['state']}" + (f"({d['attempts']})" if d["state"] != "delivered" and d["attempts"] else "")
            for d in a["deliveries"]
        ) or "-"
        look = "-" if a["look"] is None else str(a["look"])
        lines.append(f"{a['id']:36}  {created:19}  {_short(a['comparison'], 24):24}  {_short(what, 28):28}  "
                     f"{look:>4}  {a['state']:12}  {deliveries}")
        if a["state"] == "acknowledged" and a.get("acknowledged_by"):
            lines.append(f"{'':36}  acknowledged by {a['acknowledged_by']} at {_moment(a['acknowledged_at'])}")
    return "\n".join(lines)


def _login_name() -> str:
    try:
        return getpass.getuser()
    except Exception:  # noqa: BLE001 - no login name in this environment
        return "unknown"


def _moment(iso) -> str:
    """A stored ISO time as ``2026-03-02 08:00:00 UTC``."""
    return "-" if iso is None else f"{iso[:19].replace('T', ' ')} UTC"


def _acknowledge(engine, args, fmt) -> int:
    by = (args.by or _login_name()).strip()
    now = datetime.now(timezone.utc)
    alert = readback().acknowledge_alert(engine, args.alert_id, by=by, now=now)
    if fmt == "json":
        print(json.dumps(alert, indent=2, sort_keys=True))
    if alert["acknowledged_by"] != by[:200]:  # the store keeps the first 200 characters of a name
        # The first acknowledgement is history; a second person is told, not silently ignored.
        print(f"gapwatch alerts ack: alert {alert['id']} was already acknowledged by "
              f"{alert['acknowledged_by']} at {_moment(alert['acknowledged_at'])}; that record is kept",
              file=sys.stderr)
        return 1
    if fmt != "json":
        again = "" if alert["acknowledged_at"] == now.isoformat() else "already "
        print(f"alert {alert['id']} {again}acknowledged by {alert['acknowledged_by']} "
              f"at {_moment(alert['acknowledged_at'])}")
    return 0


def _no_alerts_text(engine, comparison) -> str:
    """What to print when the listing is empty; an unknown comparison name is an error."""
    if comparison is None:
        return "no alerts"
    known = sorted({row["name"] for row in readback().list_comparisons(engine, archived=None)})
    if comparison not in known:
        hint = f"; known: {', '.join(known)}" if known else "; the store holds no comparisons yet"
        raise UnknownComparisonError(f"no comparison {comparison!r} in the store{hint}")
    return f"no alerts for comparison {comparison!r}"


def run(args) -> int:
    fmt = getattr(args, "ack_format", None) or args.format
    engine = _engine(args)
    try:
        if args.alerts_action == "ack":
            return _acknowledge(engine, args, fmt)
        alerts = readback().list_alerts(engine, states=args.state, comparison=args.comparison)
        if not alerts and args.comparison is not None:
            text = _no_alerts_text(engine, args.comparison)
            if fmt != "json":
                print(text)
                return 0
        if fmt == "json":
            print(json.dumps(alerts, indent=2, sort_keys=True))
        else:
            print(_table(alerts))
        return 0
    finally:
        engine.dispose()
