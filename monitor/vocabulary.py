"""Shared meaning, said once: states and their words, thresholds, durations, JSON-safe values, UTC.

Every layer reads these from here (the import contracts allow any module to import this one,
and this one imports nothing of gapwatch but the errors), so a word, a threshold or a rule can
never disagree between the look, the command line, the alerts and the dashboard.
"""

from __future__ import annotations

import math
import re
from datetime import datetime, timezone

__all__ = [
    "outlook_words",
    "UTC",
    "STATES",
    "STOPPED_STATES",
    "QUIET_STATES",
    "STATE_ORDER",
    "ALERT_STATES",
    "DESIGN_EFFECT_WARNING",
    "NULL_KEY",
    "state_label",
    "state_words",
    "parse_duration",
    "json_safe",
    "as_utc",
    "parse_moment",
    "baseline_gap_words",
]

UTC = timezone.utc

# state -> (symbol, words). The symbol lets a reader tell states apart without colour.
STATES = {
    "collecting": ("◷", "collecting"),
    "awaiting_clusters": ("◌", "waiting for clusters"),
    "difference_found": ("◆", "difference found"),
    "no_material_difference": ("≈", "no material difference"),
    "plan_complete": ("■", "plan complete"),
    "data_problem": ("⚠", "data problem"),
}
STATE_ORDER = tuple(STATES)
# The decisions that end a comparison; data_problem keeps looking.
STOPPED_STATES = frozenset({"difference_found", "no_material_difference", "plan_complete"})
# Moving between these raises no alert.
QUIET_STATES = frozenset({"collecting", "awaiting_clusters"})
ALERT_STATES = ("pending", "delivered", "failed", "acknowledged")

# A day-level design effect above this, on a comparison that is not clustered, means the
# event-level standard error is materially too small (the comparison should be clustered).
DESIGN_EFFECT_WARNING = 1.5

# The exclusion reason for an event whose pair or cluster key is NULL.
NULL_KEY = "null_key"


def state_words(state) -> str:
    """The plain words for a state (an unknown state is shown as it is)."""
    return STATES.get(state, ("?", str(state)))[1]


def state_label(state) -> str:
    """``"SYMBOL words"`` for a state (unknown states are shown as they are)."""
    symbol, words = STATES.get(state, ("?", str(state)))
    return f"{symbol} {words}"


_DURATION = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*(s|m|h|d)\s*$")
_DURATION_UNITS = {"s": 1, "m": 60, "h": 3600, "d": 86400}
_DURATION_HINT = "a duration like 30s, 10m, 1h or 1d"


def parse_duration(text) -> float:
    """Seconds in ``"30s"``, ``"10m"``, ``"1h"``, ``"1d"``; a number (not text) is seconds.

    The one duration rule of gapwatch: text must carry a unit (``"600"`` and ``"2w"`` are
    refused), a number is taken as seconds. Raises ValueError naming the value.
    """
    if isinstance(text, bool):
        raise ValueError(f"{text!r} is not {_DURATION_HINT}")
    if isinstance(text, (int, float)):
        if not math.isfinite(text) or text < 0:
            raise ValueError(f"{text!r} is not a non-negative number of seconds")
        return float(text)
    if not isinstance(text, str):
        raise ValueError(f"{text!r} is not {_DURATION_HINT}")
    match = _DURATION.match(text)
    if not match:
        raise ValueError(f"{text!r} is not {_DURATION_HINT}")
    return float(match.group(1)) * _DURATION_UNITS[match.group(2)]


def json_safe(value):
    """A value JSON can carry and every reader understands: non-finite floats become None.

    Dict keys become text, tuples lists, numpy scalars Python numbers, datetimes ISO-8601
    text, anything else its ``str``. The one JSON rule of gapwatch (store, CLI, alerts).
    """
    if isinstance(value, bool) or value is None or isinstance(value, (str, int)):
        return value
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {str(k): json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_safe(v) for v in value]
    if isinstance(value, datetime):
        return value.isoformat()
    if hasattr(value, "item"):  # numpy scalars
        return json_safe(value.item())
    return str(value)


def as_utc(moment, name: str = "time", *, naive_zone=UTC) -> datetime:
    """An aware UTC datetime: the one time-zone rule of gapwatch.

    A time with a zone is converted to UTC; a time without one is read in ``naive_zone``
    (UTC unless the caller passes the comparison's own zone). Anything that is not a
    datetime raises ValueError naming ``name`` and the value.
    """
    if not isinstance(moment, datetime):
        raise ValueError(f"{name} must be a date-time; got {moment!r}")
    if moment.tzinfo is None or moment.utcoffset() is None:
        moment = moment.replace(tzinfo=naive_zone)
    return moment.astimezone(UTC)


def parse_moment(text, name: str = "time", zone=UTC) -> datetime:
    """An ISO-8601 date-time as aware UTC; one without a zone is read in ``zone``.

    ``"2026-03-04T06:00:00+01:00"`` carries its own zone; ``"2026-03-04 06:00"`` is local
    time in ``zone`` (the comparison's ``timezone``). A TOML date-time value (a datetime)
    is taken the same way. Raises ValueError naming ``name`` and the value.
    """
    if isinstance(text, datetime):
        return as_utc(text, name, naive_zone=zone)
    if not isinstance(text, str):
        raise ValueError(f"{name} must be an ISO-8601 date-time like \"2026-03-04T06:00:00+01:00\"; "
                         f"got {text!r}")
    try:
        moment = datetime.fromisoformat(text.strip().replace("Z", "+00:00"))
    except ValueError:
        raise ValueError(f"{name} must be an ISO-8601 date-time like \"2026-03-04T06:00:00+01:00\"; "
                         f"got {text!r}") from None
    return as_utc(moment, name, naive_zone=zone)


# Value columns whose name says they hold a duration: a higher value is slower.
_DURATION_WORDS = ("second", "minute", "hour", "duration", "time", "_ms", "millis")


def baseline_gap_words(groups, gap, low, high, *, value_column: str = "", metric: str = "mean") -> str:
    """The baseline gap of a before/after comparison in one sentence.

    ``"before the change, hollin was 7.1 seconds slower than saltmarsh (95% interval 5.3 to
    8.9)"``. Durations (the value column names seconds, minutes, hours …) read slower /
    faster, rates read percentage points higher / lower, anything else higher / lower in
    the column's unit. ``low``/``high`` may be None (no interval yet).
    """
    first, second = groups[0], groups[1]
    if gap is None or not math.isfinite(gap):
        return f"before the change, {first} against {second}: not measured yet"
    column = (value_column or "").lower()
    words = column.replace("_", " ")
    scale, more, less, unit, after = 1.0, "higher", "lower", "", f" in {words}" if words else ""
    if metric == "proportion":
        scale, unit, after = 100.0, " percentage points", f" in {words}" if words else ""
    elif any(w in column for w in _DURATION_WORDS) and "late" not in column:
        more, less, unit, after = "slower", "faster", f" {words}", ""
    if gap == 0:
        sentence = f"before the change, {first} and {second} did not differ"
    else:
        sentence = (f"before the change, {first} was {abs(gap) * scale:.3g}{unit} "
                    f"{more if gap > 0 else less} than {second}{after}")
    if low is not None and high is not None and math.isfinite(low) and math.isfinite(high):
        sentence += f" (interval {low * scale:.3g} to {high * scale:.3g})"
    return sentence
def outlook_words(outlook) -> str | None:
    """When a comparison will decide, in plain words, from a look's recorded outlook.

    ``outlook`` holds ``completes_on`` (ISO local date, or absent when the rate is zero),
    ``days_left`` and the conditional powers ``planned_difference`` / ``current_estimate``
    (each the chance of finding that difference by the plan's end). None when there is
    nothing to say.

    >>> outlook_words({"completes_on": "2026-03-12", "days_left": 9.2, "planned_difference": 0.83})
    'at the current rate the plan completes around Thu 12 Mar; if the planned difference is real, the chance of finding it by then is 83 %'
    """
    if not outlook:
        return None
    parts = []
    when = outlook.get("completes_on")
    if when:
        day = datetime.fromisoformat(when)
        parts.append(f"at the current rate the plan completes around {day:%a} {day.day} {day:%b}")
    elif "days_left" in outlook and outlook.get("days_left") is None:
        parts.append("at the current rate the plan does not complete (a group has no recent events)")
    then = "by then" if when else "by the plan's end"
    chance = outlook.get("planned_difference")
    if chance is not None:
        parts.append(f"if the planned difference is real, the chance of finding it {then} is {_percent(chance)}")
    else:
        chance = outlook.get("current_estimate")
        if chance is not None:
            parts.append(f"if the difference seen so far is real, the chance of finding it {then} is "
                         f"{_percent(chance)}")
    return "; ".join(parts) or None


def _percent(p) -> str:
    p = 100.0 * float(p)
    if p < 1:
        return "under 1 %"
    if p > 99:
        return "over 99 %"
    return f"{p:.0f} %"
