"""``gapwatch history NAME``: every look of one comparison, as recorded."""

from __future__ import annotations

import csv
import sys

from ..vocabulary import end_text, figure, interval_width
from . import SUMMARIES
from ._common import add_config_option, aligned_lines, open_store, print_json, readback, whole_number_type

__all__ = ["register", "run", "CSV_COLUMNS"]

# The CSV's columns and rows live on the store's read side (``monitor.store.export``), which the
# dashboard uses too; they stay importable from here, looked up on first use.
_FROM_EXPORT = ("CSV_COLUMNS", "csv_rows")


def __getattr__(name):
    if name in _FROM_EXPORT:
        # lazy: start-up time of the command line (the store package loads SQLAlchemy).
        from ..store import export

        return getattr(export, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "history",
        help=SUMMARIES["history"],
        description="List every recorded look of one comparison: events, estimate, statistic, "
                    "boundary, alpha spent, decision and excluded rows.",
    )
    p.add_argument("name", metavar="NAME", help="comparison name")
    add_config_option(p)
    p.add_argument("--format", choices=["table", "json", "csv"], default="table",
                   help="table (default), json (a list of looks) or csv")
    p.add_argument("--version", type=whole_number_type(1), default=None, metavar="V",
                   help="a stored version (default: the live one)")
    p.set_defaults(func=run)


def _cluster_text(fmt):
    return {"clusters": "{} clusters".format,
            "design_effect": lambda value: f"design effect {fmt(value, digits=3)}",
            "effective_n": "effective n {:.0f}".format}


def _fmt(value, digits=4):
    return figure(value, digits=digits, missing="-")


def table_lines(history, row=None):
    """The looks as a table; ``row`` (the comparison's status row) names the groups, the unit and
    the count the evidence rests on (pairs, clusters)."""
    row = row or {}
    names = row.get("labels") or row.get("groups") or ["n1", "n2"]
    metric = row.get("metric") or "mean"
    unit = "pp" if metric == "proportion" else (row.get("unit") or "")
    noun = (row.get("evidence") or {}).get("noun")
    counted = noun if noun in ("pairs", "clusters") else None
    headers = (["look", "as of (UTC)", f"n {names[0]}", f"n {names[1]}"] + ([counted] if counted else [])
               + [f"estimate ({unit})" if unit else "estimate", "statistic", "boundary", "p-value",
                  "plan", "alpha spent", "excluded", "decision"])
    body = []
    for h in history:
        width = interval_width(h["ci_low"], h["ci_high"])
        estimate = "-" if h["estimate"] is None else end_text(h["estimate"], metric=metric, width=width)
        count = [("-" if h.get(counted) is None else str(h[counted]))] if counted else []
        body.append([
            str(h["look"]), h["as_of"][:19].replace("T", " "), str(h["n1"]), str(h["n2"]), *count,
            estimate, _fmt(h["statistic"]), _fmt(h["boundary_z"]), _fmt(h["p_value"], 3),
            "-" if h["plan_share"] is None else f"{100 * h['plan_share']:.0f}%",
            _fmt(h["cumulative_alpha"], 3), str(h["excluded_total"]), h["decision"],
        ])
    lines = aligned_lines(headers, body)
    last = history[-1]
    figures = readback().clustering_figures(last, _cluster_text(_fmt))
    if figures:
        lines.append("latest look: " + ", ".join(figures))
    if last.get("baseline"):
        lines.append(last["baseline"])
    for warning in last["warnings"]:
        lines.append(f"warning: {warning}")
    return lines


def change_lines(history, changes):
    """How the version began (after a restart) and every replan, in words."""
    fmt = _fmt
    lines = []
    first = history[0]["detail"].get("restart") if history else None
    if first:
        if first.get("from_start"):
            lines.append(f"began after a restart of version {first['after_version']} --from-start: the data "
                         f"version {first['after_version']} tested were tested again")
        else:
            lines.append(f"began after a restart of version {first['after_version']}, on the data after "
                         f"{first.get('starts_after', 'its last look')} only")
    for c in changes:
        if c["kind"] != "replan":
            continue
        old = c["old_plan"].get("planned_per_group")
        new = c["new_plan"].get("planned_per_group")
        lines.append(f"replan {c['number']} after look {c['after_look']}, {c['made_at'][:16].replace('T', ' ')} "
                     f"by {c['made_by']}: {old:,} -> {new:,} per group ({c['reason']}); alpha left "
                     f"{fmt(c['conditional_error'], 3)}, spent on the data after the change")
    return lines


def run(args) -> int:
    engine = open_store(args.config)
    try:
        history = readback().look_history(engine, args.name, version=args.version)
        changes = readback().plan_change_history(engine, args.name, version=args.version) if history else []
        row = readback().get_comparison(engine, args.name, version=args.version) if history else None
    finally:
        engine.dispose()
    if args.format == "json":
        print_json(history)
    elif args.format == "csv":
        # lazy: start-up time of the command line (the store package loads SQLAlchemy).
        from ..store.export import csv_rows

        header, rows = csv_rows(history)
        writer = csv.writer(sys.stdout, lineterminator="\n")
        writer.writerow(header)
        writer.writerows(rows)
    elif not history:
        print(f"{args.name}: no looks recorded yet")
    else:
        print("\n".join(table_lines(history, row) + change_lines(history, changes)))
    return 0
