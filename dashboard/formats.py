"""How the dashboard writes times, intervals, fractions and names: pure text, no Streamlit.

Numbers go through ``readback.format_number``, the same rule the command line prints with.
Every function that speaks of "now" takes the reference moment as an argument, so the text
can be checked without a clock.
"""

from __future__ import annotations

import math
from datetime import datetime
from urllib.parse import quote
from zoneinfo import ZoneInfo

from monitor.store.readback import describe_seconds
from monitor.store.readback import format_number as fmt

__all__ = [
    "fmt",
    "when",
    "relative",
    "clock",
    "ago",
    "next_look_text",
    "plan_eta_text",
    "bounds_text",
    "interval_text",
    "fraction_text",
    "groups_text",
    "group_names",
    "confidence_percent",
    "comparison_link",
    "zone_name",
    "p_text",
]


def relative(seconds_ahead, present):
    """``"in 12 min"`` ahead, ``"12 min ago"`` behind, ``present`` within a second."""
    if abs(seconds_ahead) < 1:
        return present
    if seconds_ahead < 0:
        return f"{describe_seconds(-seconds_ahead)} ago"
    return f"in {describe_seconds(seconds_ahead)}"


def when(iso, ref):
    """``"2026-03-02 12:40 UTC (8 min ago)"`` for an ISO time, read against ``ref``."""
    if not iso:
        return "—"
    moment = datetime.fromisoformat(iso)
    rel = relative((moment - ref).total_seconds(), "now")
    return f"{moment.strftime('%Y-%m-%d %H:%M UTC')} ({rel})"


def clock(iso, ref):
    """``22:49 UTC`` on the reference day, ``2026-03-02 22:49 UTC`` on another."""
    moment = datetime.fromisoformat(iso)
    if moment.date() == ref.date():
        return moment.strftime("%H:%M UTC")
    return moment.strftime("%Y-%m-%d %H:%M UTC")


def ago(iso, ref):
    return relative((datetime.fromisoformat(iso) - ref).total_seconds(), "just now")


def next_look_text(row, ref):
    if row["stopped"]:
        return "stopped"
    if row["archived"]:
        return "archived"
    if not row["next_look_at"]:
        return "—"
    moment = datetime.fromisoformat(row["next_look_at"])
    delta = (moment - ref).total_seconds()
    if delta <= 0:
        return f"due ({moment.strftime('%H:%M UTC')})"
    return f"{moment.strftime('%H:%M UTC')} (in {describe_seconds(delta)})"


def plan_eta_text(row):
    if row["stopped"]:
        return "stopped"
    if row["seconds_to_plan"] is None:
        return "unknown yet"
    if row["seconds_to_plan"] <= 0:
        return "reached"
    return f"about {describe_seconds(row['seconds_to_plan'])}"


def bounds_text(low, high):
    """``[low, high]`` with an open end (one-sided designs) shown as infinity."""
    if low is None and high is None:
        return "none at this look"
    return f"[{'−∞' if low is None else fmt(low)}, {'∞' if high is None else fmt(high)}]"


def interval_text(row):
    if row.get("estimate") is None:
        return "—"
    if row.get("ci_low") is None and row.get("ci_high") is None:
        # a look that tested nothing (no new information) records no interval
        return f"{fmt(row['estimate'])} (no interval at this look)"
    return f"{fmt(row['estimate'])} {bounds_text(row['ci_low'], row['ci_high'])}"


def fraction_text(row):
    return "—" if row.get("fraction") is None else f"{100 * row['fraction']:.0f}%"


def group_names(row):
    """The two groups' names as stored (placeholders when the design names none)."""
    return row.get("groups") or ["group 1", "group 2"]


def groups_text(row):
    groups = group_names(row)
    return f"{groups[0]} − {groups[1]}" if len(groups) == 2 else " / ".join(groups)


def confidence_percent(row):
    alpha = row.get("alpha") or 0.05
    return f"{100 * (1 - alpha):g}%"


def comparison_link(row):
    """The comparison page's address for a status row (the version pinned when it is archived)."""
    query = f"name={quote(row['name'])}"
    if row.get("archived"):
        query += f"&version={row['version']}"
    return f"comparison?{query}"


def zone_name(row):
    """The comparison's own time zone (its settings, else its design), UTC when none is known."""
    name = (row.get("settings") or {}).get("timezone") or (row.get("design") or {}).get("timezone") or "UTC"
    try:
        ZoneInfo(str(name))
    except (KeyError, ValueError):  # an unknown or malformed zone name
        return "UTC"
    return str(name)


def p_text(p):
    """A p-value or a level in plain decimals with two significant digits: ``0.0041``, ``0.00010``.

    Below one in a million it reads ``below 0.000001`` (no exponent a lead has to decode).
    """
    if p is None or not math.isfinite(p):
        return "—"
    if p == 0:
        return "0"
    if p >= 0.01:
        return f"{p:.2f}" if p >= 0.1 else f"{p:.3f}"
    if p < 1e-6:
        return "below 0.000001"
    decimals = -math.floor(math.log10(p)) + 1
    return f"{p:.{decimals}f}"
