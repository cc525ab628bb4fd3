"""``gapwatch status``: one line per comparison, read from the history store."""

from __future__ import annotations

from datetime import datetime, timezone

from . import SUMMARIES
from ._common import add_config_option, aligned_lines, as_typed, open_store, print_json, readback

__all__ = ["register", "run", "fmt"]


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "status",
        help=SUMMARIES["status"],
        description="Show one line per comparison from the history store: state, looks, events "
                    "per group, the latest estimate with its repeated confidence interval, the "
                    "fraction of the plan reached, clustering figures and warnings.",
    )
    add_config_option(p)
    p.add_argument("--format", choices=["table", "json"], default="table",
                   help="table (default) or json (a list of objects)")
    p.add_argument("--all", action="store_true", help="include archived versions")
    p.set_defaults(func=run)


def __getattr__(name):
    # ``fmt`` was defined here before the store's read side had a home; it stays importable.
    if name == "fmt":
        return readback().format_number
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def _interval(row):
    fmt = readback().format_number
    if row["estimate"] is None:
        return "-"
    if row["ci_low"] is None and row["ci_high"] is None:
        # a look that tested nothing (no new information) records no interval
        return f"{fmt(row['estimate'])} [no interval]"
    # A one-sided design's interval has an open end: said in words, as the report says it.
    low = "open" if row["ci_low"] is None else fmt(row["ci_low"])
    high = "open" if row["ci_high"] is None else fmt(row["ci_high"])
    return f"{fmt(row['estimate'])} [{low}, {high}]"


def _fraction(row):
    return "-" if row["fraction"] is None else f"{100 * row['fraction']:.0f}%"


# Short forms: the status table has one line per comparison.
_CLUSTER_TEXT = {"clusters": "{} clusters".format, "design_effect": "deff {:.2f}".format,
                 "effective_n": "eff n {:.0f}".format}


def _clusters(row):
    return ", ".join(readback().clustering_figures(row, _CLUSTER_TEXT)) or "-"


def _when(row, now):
    if row["stopped"]:
        return "stopped"
    if row["next_look_at"] is None:
        return "-"
    return readback().describe_wait((datetime.fromisoformat(row["next_look_at"]) - now).total_seconds())


def volume_lines(row) -> list:
    """The volume check's warnings in words, under the comparison's row."""
    volume = row.get("volume")
    if not volume:
        return []
    if volume["state"] == "warning":
        # lazy: start-up time of `gapwatch status`; the wording is needed only when a volume warns.
        from ..alerts.wording import volume_warnings

        return [f"    volume: {line}" for line in volume_warnings(volume)]
    return []


_VOLUME_WORDS = {"ok": "ok", "warning": "warning", "not_yet_measurable": "not yet measurable"}


def table_lines(rows, now):
    headers = ["comparison", "state", "looks", "n per group", "estimate [repeated CI]", "plan",
               "to plan", "clustering", "volume", "next look"]
    body = []
    for r in rows:
        name = r["name"] if r["version"] == 1 and not r["archived"] else f"{r['name']} v{r['version']}"
        if r["archived"]:
            name += " (archived)"
        to_plan = "-" if r["seconds_to_plan"] is None else readback().describe_seconds(r["seconds_to_plan"])
        body.append([name, r["state_label"], str(r["looks"]), f"{r['n1']} / {r['n2']}", _interval(r),
                     _fraction(r), to_plan, _clusters(r), _VOLUME_WORDS.get(r.get("volume_state"), "-"),
                     _when(r, now)])
    header, *row_lines = aligned_lines(headers, body)
    lines = [header]
    for r, line in zip(rows, row_lines):
        lines.append(line)
        if r.get("baseline"):
            lines.append(f"    {r['baseline']}")
        if r.get("outlook_words"):
            lines.append(f"    {r['outlook_words']}")
        lines.extend(f"    warning: {as_typed(warning)}" for warning in r["warnings"])
        lines.extend(volume_lines(r))
    return lines


def run(args) -> int:
    engine = open_store(args.config)
    try:
        now, note = readback().reference_time(engine, datetime.now(timezone.utc))
        rows = readback().comparison_status(engine, include_archived=args.all, now=now)
        liveness = readback().monitor_liveness(engine, now=datetime.now(timezone.utc))
    finally:
        engine.dispose()
    if args.format == "json":
        print_json(rows)
        return 0
    if not rows:
        print("no comparisons in the store yet (the first look records one)")
        return 0
    if liveness["quiet"]:
        # First, so a dead monitor is never read as "next look in 3 s".
        print(f"warning: {as_typed(liveness['message'])}")
    print("\n".join(table_lines(rows, now)))
    if note:
        print(f"note: {note}")
    return 0
