"""``gapwatch history NAME``: every look of one comparison, as recorded."""

from __future__ import annotations

import csv
import sys

from . import SUMMARIES
from ._common import add_config_option, aligned_lines, open_store, print_json, readback, whole_number_type

__all__ = ["register", "run", "CSV_COLUMNS"]

# The flat columns of the CSV export (excluded rows are spread into one column per reason).
CSV_COLUMNS = [
    "look", "as_of", "cutoff", "n1", "n2", "mean1", "mean2", "estimate", "standard_error",
    "statistic", "df", "p_value", "fraction", "boundary_z", "futility_z", "nominal_p",
    "cumulative_alpha", "ci_low", "ci_high", "decision", "late_events", "excluded_total",
    "clusters", "design_effect", "effective_n",
]


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


def csv_rows(history):
    reasons = sorted({reason for look in history for reason in look["excluded"]})
    header = CSV_COLUMNS + [f"excluded_{reason}" for reason in reasons] + ["warnings"]
    rows = []
    for look in history:
        row = [look[c] for c in CSV_COLUMNS]
        row += [look["excluded"].get(reason, 0) for reason in reasons]
        row.append("; ".join(look["warnings"]))
        rows.append(row)
    return header, rows


def _cluster_text(fmt):
    return {"clusters": "{} clusters".format,
            "design_effect": lambda value: f"design effect {fmt(value, 3)}",
            "effective_n": "effective n {:.0f}".format}


def table_lines(history):
    fmt = readback().format_number
    headers = ["look", "as of (UTC)", "n1", "n2", "estimate", "statistic", "boundary", "p-value",
               "plan", "alpha spent", "excluded", "decision"]
    body = []
    for h in history:
        body.append([
            str(h["look"]), h["as_of"][:19].replace("T", " "), str(h["n1"]), str(h["n2"]),
            fmt(h["estimate"]), fmt(h["statistic"]), fmt(h["boundary_z"]), fmt(h["p_value"], 3),
            "-" if h["fraction"] is None else f"{100 * h['fraction']:.0f}%",
            fmt(h["cumulative_alpha"], 3), str(h["excluded_total"]), h["decision"],
        ])
    lines = aligned_lines(headers, body)
    last = history[-1]
    figures = readback().clustering_figures(last, _cluster_text(fmt))
    if figures:
        lines.append("latest look: " + ", ".join(figures))
    if last.get("baseline"):
        lines.append(last["baseline"])
    for warning in last["warnings"]:
        lines.append(f"warning: {warning}")
    return lines


def run(args) -> int:
    engine = open_store(args.config)
    try:
        history = readback().look_history(engine, args.name, version=args.version)
    finally:
        engine.dispose()
    if args.format == "json":
        print_json(history)
    elif args.format == "csv":
        header, rows = csv_rows(history)
        writer = csv.writer(sys.stdout, lineterminator="\n")
        writer.writerow(header)
        writer.writerows(rows)
    elif not history:
        print(f"{args.name}: no looks recorded yet")
    else:
        print("\n".join(table_lines(history)))
    return 0
