"""How the dashboard writes times, intervals, fractions and names: pure text, no Streamlit.

Numbers go through ``monitor.vocabulary.figure`` (and the interval, unit and open-end rules
beside it), the same rules the command line, the alerts and the printed review write with.
Every function that speaks of "now" takes the reference moment as an argument, so the text
can be checked without a clock.
"""

from __future__ import annotations

import math
from datetime import datetime
from urllib.parse import quote
from zoneinfo import ZoneInfo

from monitor.store.readback import describe_seconds
from monitor.vocabulary import end_text, estimate_words, figure, interval_width, quantity, relative_change

__all__ = [
    "figure",
    "amount",
    "relative_text",
    "evidence_text",
    "headline_text",
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


def bounds_text(low, high, row=None):
    """``[low, high]`` (with the row's unit) figures to the interval's width; an open end ``open``."""
    if low is None and high is None:
        return "none at this look"
    metric, unit = _measure(row)
    width = interval_width(low, high)
    text = f"[{end_text(low, metric=metric, width=width)}, {end_text(high, metric=metric, width=width)}]"
    suffix = "pp" if metric == "proportion" else unit
    return f"{text} {suffix}" if suffix else text


def _measure(row):
    row = row or {}
    return row.get("metric") or "mean", row.get("unit") or ""


def amount(value, row=None, width=None, *, signed=False):
    """A difference in the row's units: ``"4.2 s"``, rates in percentage points (``"0.6 pp"``)."""
    metric, unit = _measure(row)
    return quantity(value, metric=metric, unit=unit, width=width, signed=signed)


def relative_text(row, estimate=None):
    """The difference relative to group 2's level (``"+2.3 % of Saltmarsh Lane"``), or None."""
    estimate = row.get("estimate") if estimate is None else estimate
    change = relative_change(estimate, row.get("mean2"))
    if change is None:
        return None
    return f"{change} of {group_names(row)[1]}"


def evidence_text(row):
    """The count the evidence is made of beside events: ``"14 pairs"``, ``"9 clusters"``; None for events."""
    evidence = row.get("evidence")
    if not evidence:
        return None
    count = evidence.get("count")
    return f"{'—' if count is None else f'{count:,}'} {evidence['noun']}"


def headline_text(row):
    """The figure a row is read by: after a stop the adjusted estimate and interval, else the estimate's."""
    adjusted = row.get("adjusted") or {}
    if row.get("stopped") and adjusted.get("estimate") is not None:
        metric, unit = _measure(row)
        return estimate_words(adjusted["estimate"], adjusted.get("ci_low"), adjusted.get("ci_high"), metric=metric,
                              unit=unit, no_interval="no adjusted interval")
    return interval_text(row)


def interval_text(row):
    """The estimate and its interval in the row's units (``"4.2 [1.1, 7.3] s"``)."""
    if row.get("estimate") is None:
        return "—"
    metric, unit = _measure(row)
    # a look that tested nothing (no new information) records no interval
    return estimate_words(row["estimate"], row.get("ci_low"), row.get("ci_high"), metric=metric, unit=unit,
                          no_interval="no interval at this look")


def fraction_text(row):
    return "—" if row.get("fraction") is None else f"{100 * row['fraction']:.0f}%"


def group_names(row):
    """The two groups as shown: their configured labels, else their values (placeholders when none)."""
    return row.get("labels") or row.get("groups") or ["group 1", "group 2"]


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
