"""``gapwatch history NAME``: every look of one comparison, as recorded."""

from __future__ import annotations

import argparse
import csv
import json
import sys

from .. import readback
from .status import engine_from_args, fmt

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
        help="list every look of one comparison",
        description="List every recorded look of one comparison: events, estimate, statistic, "
                    "boundary, alpha spent, decision and excluded rows.",
    )
    p.add_argument("name", metavar="NAME", help="comparison name")
    p.add_argument("--config", metavar="FILE",
                   help="configuration file (default $GAPWATCH_CONFIG, else ./gapwatch.toml)")
    p.add_argument("--format", choices=["table", "json", "csv"], default="table",
                   help="table (default), json (a list of looks) or csv")
    p.add_argument("--version", type=_version, default=None, metavar="V",
                   help="a stored version (default: the live one)")
    p.set_defaults(func=run)


def _version(text):
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a whole number; got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be 1 or more; got {text!r}")
    return value


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


def table_lines(history):
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
    widths = [max(len(hd), *(len(b[i]) for b in body)) for i, hd in enumerate(headers)]
    lines = ["  ".join(hd.ljust(w) for hd, w in zip(headers, widths)).rstrip()]
    lines += ["  ".join(c.ljust(w) for c, w in zip(b, widths)).rstrip() for b in body]
    last = history[-1]
    figures = []
    if last["clusters"] is not None:
        figures.append(f"{last['clusters']} clusters")
    if last["design_effect"] is not None:
        figures.append(f"design effect {fmt(last['design_effect'], 3)}")
    if last["effective_n"] is not None:
        figures.append(f"effective n {last['effective_n']:.0f}")
    if figures:
        lines.append("latest look: " + ", ".join(figures))
    for warning in last["warnings"]:
        lines.append(f"warning: {warning}")
    return lines


def run(args) -> int:
    engine = engine_from_args(args)
    try:
        history = readback.look_history(engine, args.name, version=args.version)
    finally:
        engine.dispose()
    if args.format == "json":
        json.dump(history, sys.stdout, indent=2, allow_nan=False)
        sys.stdout.write("\n")
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
