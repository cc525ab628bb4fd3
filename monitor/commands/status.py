"""``gapwatch status``: one line per comparison, read from the history store."""

from __future__ import annotations

from datetime import datetime, timezone

from ..vocabulary import estimate_words, figure, relative_change
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


# ``fmt`` was defined here before figures had one rule for every surface; it stays importable.
fmt = figure


def _interval(row):
    """The estimate and its interval in the comparison's units; after a stop the adjusted ones.

    Figures to the interval's width, an open end (one-sided designs) written ``open``, as every
    surface writes it; a look that tested nothing says it has no interval.
    """
    adjusted = row.get("adjusted") or {}
    if row["stopped"] and adjusted.get("estimate") is not None:
        return estimate_words(adjusted["estimate"], adjusted.get("ci_low"), adjusted.get("ci_high"),
                              metric=row.get("metric"), unit=row.get("unit"), no_interval="no interval") + " adjusted"
    if row["estimate"] is None:
        return "-"
    text = estimate_words(row["estimate"], row["ci_low"], row["ci_high"], metric=row.get("metric"),
                          unit=row.get("unit"))
    # Beside the absolute figure, the change relative to group 2's level (not for a before/after
    # comparison, whose relative change is against group 1 without the change: see history).
    relative = None if row.get("baseline") else relative_change(row["estimate"], row.get("mean2"))
    return f"{text} ({relative})" if relative else text


def _counts(row):
    """Events per group, after the count the evidence rests on (pairs, clusters) where it is not events."""
    events = f"{row['n1']} / {row['n2']}"
    evidence = row.get("evidence")
    if not evidence:
        return events
    count = "-" if evidence.get("count") is None else evidence["count"]
    return f"{count} {evidence['noun']}, {events}"


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
    headers = ["comparison", "state", "looks", "evidence, n per group", "estimate [repeated CI]", "plan",
               "to plan", "clustering", "volume", "next look"]
    body = []
    for r in rows:
        name = r["name"] if r["version"] == 1 and not r["archived"] else f"{r['name']} v{r['version']}"
        if r["archived"]:
            name += " (archived)"
        to_plan = "-" if r["seconds_to_plan"] is None else readback().describe_seconds(r["seconds_to_plan"])
        body.append([name, r["state_label"], str(r["looks"]), _counts(r), _interval(r),
                     _fraction(r), to_plan, _clusters(r), _VOLUME_WORDS.get(r.get("volume_state"), "-"),
                     _when(r, now)])
    header, *row_lines = aligned_lines(headers, body)
    lines = [header]
    for r, line in zip(rows, row_lines):
        lines.append(line)
        names = r.get("labels") or r.get("groups") or []
        if len(names) == 2 and r.get("design_words"):
            lines.append(f"    {names[0]} minus {names[1]}: {r['design_words']}")
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
