"""``gapwatch status``: one line per comparison, read from the history store."""

from __future__ import annotations

import json
import math
import sys
from datetime import datetime, timezone

from .. import readback

__all__ = ["register", "run", "engine_from_args", "fmt"]


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "status",
        help="show every comparison's state, looks, estimate and progress",
        description="Show one line per comparison from the history store: state, looks, events "
                    "per group, the latest estimate with its repeated confidence interval, the "
                    "fraction of the plan reached, clustering figures and warnings.",
    )
    p.add_argument("--config", metavar="FILE",
                   help="configuration file (default $GAPWATCH_CONFIG, else ./gapwatch.toml)")
    p.add_argument("--format", choices=["table", "json"], default="table",
                   help="table (default) or json (a list of objects)")
    p.add_argument("--all", action="store_true", help="include archived versions")
    p.set_defaults(func=run)


def engine_from_args(args):
    """The store engine named by ``--config`` (shared by the read-side commands)."""
    return readback.open_store(readback.store_url_from_config(getattr(args, "config", None)))


def fmt(value, digits=4):
    """A number with ``digits`` significant digits, never in exponent form above 1e-3; ``-`` if missing."""
    if value is None:
        return "-"
    if isinstance(value, int):
        return str(value)
    value = float(value)
    if not math.isfinite(value):
        return "-"
    if value != 0 and abs(value) < 1e-3:
        return f"{value:.{max(digits - 2, 1)}e}"
    if abs(value) >= 10 ** digits:
        return f"{value:.0f}"
    return f"{value:.{digits}g}"


def _interval(row):
    if row["estimate"] is None:
        return "-"
    if row["ci_low"] is None and row["ci_high"] is None:
        # a look that tested nothing (no new information) records no interval
        return f"{fmt(row['estimate'])} [no interval]"
    low = "-inf" if row["ci_low"] is None else fmt(row["ci_low"])
    high = "inf" if row["ci_high"] is None else fmt(row["ci_high"])
    return f"{fmt(row['estimate'])} [{low}, {high}]"


def _fraction(row):
    return "-" if row["fraction"] is None else f"{100 * row['fraction']:.0f}%"


def _clusters(row):
    parts = []
    if row["clusters"] is not None:
        parts.append(f"{row['clusters']} clusters")
    if row["design_effect"] is not None:
        parts.append(f"deff {row['design_effect']:.2f}")
    if row["effective_n"] is not None:
        parts.append(f"eff n {row['effective_n']:.0f}")
    return ", ".join(parts) or "-"


def _when(row, now):
    if row["stopped"]:
        return "stopped"
    if row["next_look_at"] is None:
        return "-"
    delta = (datetime.fromisoformat(row["next_look_at"]) - now).total_seconds()
    return "due now" if delta <= 0 else f"in {readback.describe_seconds(delta)}"


def table_lines(rows, now):
    headers = ["comparison", "state", "looks", "n per group", "estimate [repeated CI]", "plan",
               "to plan", "clustering", "next look"]
    body = []
    for r in rows:
        name = r["name"] if r["version"] == 1 and not r["archived"] else f"{r['name']} v{r['version']}"
        if r["archived"]:
            name += " (archived)"
        to_plan = "-" if r["seconds_to_plan"] is None else readback.describe_seconds(r["seconds_to_plan"])
        body.append([name, r["state_label"], str(r["looks"]), f"{r['n1']} / {r['n2']}", _interval(r),
                     _fraction(r), to_plan, _clusters(r), _when(r, now)])
    widths = [max(len(h), *(len(b[i]) for b in body)) if body else len(h) for i, h in enumerate(headers)]
    lines = ["  ".join(h.ljust(w) for h, w in zip(headers, widths)).rstrip()]
    for r, b in zip(rows, body):
        lines.append("  ".join(c.ljust(w) for c, w in zip(b, widths)).rstrip())
        for warning in r["warnings"]:
            lines.append(f"    warning: {warning}")
    return lines


def run(args) -> int:
    engine = engine_from_args(args)
    try:
        now, note = readback.reference_time(engine, datetime.now(timezone.utc))
        rows = readback.comparison_status(engine, include_archived=args.all, now=now)
    finally:
        engine.dispose()
    if args.format == "json":
        json.dump(rows, sys.stdout, indent=2, allow_nan=False)
        sys.stdout.write("\n")
        return 0
    if not rows:
        print("no comparisons in the store yet (the first look records one)")
        return 0
    print("\n".join(table_lines(rows, now)))
    if note:
        print(f"note: {note}")
    return 0
