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
    "OPEN_END",
    "MISSING",
    "figure",
    "interval_width",
    "quantity",
    "end_text",
    "interval_words",
    "relative_change",
    "evidence_count",
    "design_effect_warning",
    "estimate_words",
    "method_words",
    "spending_words",
    "design_words",
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
    bounded = low is not None and high is not None and math.isfinite(low) and math.isfinite(high)
    width = (high - low) * scale if bounded else None
    if gap == 0:
        sentence = f"before the change, {first} and {second} did not differ"
    else:
        sentence = (f"before the change, {first} was {figure(abs(gap) * scale, width)}{unit} "
                    f"{more if gap > 0 else less} than {second}{after}")
    if bounded:
        sentence += f" (interval {figure(low * scale, width)} to {figure(high * scale, width)})"
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


# ---------------------------------------------------------------------------
# Figures: one number format for every surface (command line, dashboard, alerts, review).

# How an interval's open end is written (a one-sided design's interval has one).
OPEN_END = "open"
# A figure that does not exist (no look yet, a look that tested nothing).
MISSING = "—"
# Places of decimals a figure is never written beyond: past them a figure reads as noise.
_MAX_DECIMALS = 12


def _finite(value) -> float | None:
    if value is None or isinstance(value, bool):
        return None
    try:
        value = float(value)
    except (TypeError, ValueError):
        return None
    return value if math.isfinite(value) else None


def _plain(value: float, decimals: int) -> str:
    text = f"{value:.{max(0, min(decimals, _MAX_DECIMALS))}f}"
    if text.lstrip("-").strip("0.") == "":
        text = text.lstrip("-")  # never "-0" or "-0.00"
    return text


def figure(value, width=None, *, digits: int = 4, missing: str = MISSING) -> str:
    """A figure as every surface writes it: plain decimals, never an exponent, ``nan`` or ``inf``.

    With ``width`` (the width of the interval the figure belongs to, in the same units) the
    decimals are chosen so that the width reads with two significant figures: a figure is
    shown as precisely as the data know it, no more. Without a width, ``digits`` significant
    figures (trailing zeros dropped). Whole numbers stay whole; a missing or non-finite value
    is ``missing``.

    >>> figure(431.27381, 22.3), figure(0.0058761, 0.021), figure(0.05), figure(1234567.8), figure(None)
    ('431', '0.006', '0.05', '1234568', '—')
    """
    if isinstance(value, int) and not isinstance(value, bool):
        return str(value)
    value = _finite(value)
    if value is None:
        return missing
    width = _finite(width)
    if width is not None and width > 0:
        return _plain(value, 1 - math.floor(math.log10(width)))
    if value == 0:
        return "0"
    magnitude = math.floor(math.log10(abs(value)))
    if magnitude >= digits - 1:
        return _plain(value, 0)
    text = _plain(value, digits - 1 - magnitude)
    return text.rstrip("0").rstrip(".") if "." in text else text


def interval_width(low, high) -> float | None:
    """The width of an interval with both ends, else None (an open end has no width)."""
    low, high = _finite(low), _finite(high)
    return None if low is None or high is None or high <= low else high - low


def _scale(metric) -> float:
    # Differences of rates are written in percentage points.
    return 100.0 if metric == "proportion" else 1.0


def quantity(value, *, metric="mean", unit="", width=None, missing: str = MISSING, signed=False) -> str:
    """A difference (or a bound of one) in the operation's units: ``"4.2 s"``, ``"0.59 pp"``.

    Rates are written in percentage points (``pp``); a mean carries its configured ``unit``
    (``""``: none). ``width`` is the interval's width on the same scale as ``value``.
    """
    value = _finite(value)
    if value is None:
        return missing
    scale = _scale(metric)
    width = _finite(width)
    text = figure(value * scale, None if width is None else width * scale)
    if signed and value > 0:
        text = "+" + text
    suffix = "pp" if metric == "proportion" else (unit or "")
    return f"{text} {suffix}" if suffix else text


def end_text(value, *, metric="mean", width=None) -> str:
    """One end of an interval: its figure, or ``open`` (the one way every surface writes it)."""
    value = _finite(value)
    if value is None:
        return OPEN_END
    width = _finite(width)
    return figure(value * _scale(metric), None if width is None else width * _scale(metric))


def interval_words(low, high, *, metric="mean", unit="", missing="none") -> str:
    """``"[420, 442] s"``; an open end written ``open``; ``missing`` when neither end exists."""
    if _finite(low) is None and _finite(high) is None:
        return missing
    width = interval_width(low, high)
    suffix = "pp" if metric == "proportion" else (unit or "")
    text = f"[{end_text(low, metric=metric, width=width)}, {end_text(high, metric=metric, width=width)}]"
    return f"{text} {suffix}" if suffix else text


def relative_change(estimate, reference) -> str | None:
    """The difference relative to group 2's level (``"+2.3 %"``), or None where it does not exist.

    None when either figure is missing or group 2's level is zero (nothing to be relative to).
    """
    estimate, reference = _finite(estimate), _finite(reference)
    if estimate is None or reference is None or reference == 0:
        return None
    share = 100.0 * estimate / abs(reference)
    text = figure(share, digits=2)
    return f"+{text} %" if share > 0 and text != "0" else f"{text} %"


def evidence_count(*, method=None, clustered=False, pairs=None, clusters=None, days=None):
    """The count the evidence is really made of, as ``(noun, number)``, or None when events are.

    Pairs for a paired comparison, clusters for a clustered one, days for a before/after one
    (``days``: when a comparison measures its difference in differences by day); events
    otherwise (None). The number is None while it is not known yet.
    """
    if days is not None:
        return "days", days
    if method == "paired":
        return "pairs", pairs
    if clustered:
        return "clusters", clusters
    return None


def design_effect_warning(design_effect, name=None) -> str:
    """The warning for a day-level design effect on a comparison that is not clustered.

    Says what it means for the result (the interval is too narrow by the square root of the
    design effect, a difference found may be a false alarm) and the exact remedy.
    """
    restart = f"`gapwatch restart {name}`" if name else "`gapwatch restart` on it"
    return (f"day-level design effect {design_effect:.2f}: events on the same day move together, so the "
            f"interval is about {math.sqrt(max(design_effect, 1.0)):.1f} times too narrow and the chance of a "
            f"false alarm is above the planned alpha (a difference found may not be real). Remedy: add "
            f"cluster_by = \"day\" to this comparison in the configuration and run {restart}; the next "
            f"version tests day by day")


def estimate_words(estimate, low, high, *, metric="mean", unit="", no_interval="no interval") -> str:
    """An estimate with its interval in the operation's units: ``"4.2 [1.1, 7.3] s"``.

    Figures to the interval's width, an open end ``open``, rates in percentage points;
    ``MISSING`` with no estimate, ``"4.2 s (no interval)"`` when the look recorded none.
    """
    if _finite(estimate) is None:
        return MISSING
    suffix = "pp" if metric == "proportion" else (unit or "")
    if _finite(low) is None and _finite(high) is None:
        return f"{quantity(estimate, metric=metric, unit=unit)} ({no_interval})"
    width = interval_width(low, high)
    text = (f"{end_text(estimate, metric=metric, width=width)} [{end_text(low, metric=metric, width=width)}, "
            f"{end_text(high, metric=metric, width=width)}]")
    return f"{text} {suffix}" if suffix else text


_METHOD_WORDS = {
    "welch": "Welch t",
    "pooled": "pooled-variance t",
    "z": "z with known standard deviations",
    "paired": "paired t",
    "proportions": "score test of two rates",
}


def method_words(method, *, clustered_by=None) -> str:
    """A method as a reader names it; a clustered one says so (its test is cluster-robust)."""
    words = _METHOD_WORDS.get(method, str(method or "unknown method"))
    if clustered_by:
        return f"cluster-robust t (clusters: {clustered_by})"
    return words


def spending_words(spec) -> str:
    """A spending function as words: ``"O'Brien–Fleming-type spending"``, ``"Pocock-type spending"``…"""
    spec = str(spec or "")
    if spec == "obrien-fleming":
        return "O'Brien–Fleming-type spending"
    if spec == "pocock":
        return "Pocock-type spending"
    if spec.startswith("hsd:"):
        return f"Hwang–Shih–DeCani spending (γ = {spec[4:]})"
    if spec.startswith("power:"):
        return f"power-family spending (ρ = {spec[6:]})"
    return f"{spec} spending" if spec else "spending not recorded"


def _alternative_words(alternative, names) -> str:
    if alternative == "greater":
        return f"one-sided ({names[0]} above {names[1]})"
    if alternative == "less":
        return f"one-sided ({names[0]} below {names[1]})"
    return "two-sided"


def design_words(design: dict, names=None) -> str:
    """The design in one line: ``"Welch t, two-sided, alpha 0.05, O'Brien–Fleming-type spending"``.

    ``design`` is a stored design dict (``Design.to_stored()``); ``names`` the groups as shown.
    """
    design = design or {}
    clustering = design.get("clustering") or {}
    clustered_by = clustering.get("cluster_by") or clustering.get("cluster_column")
    names = list(names or design.get("groups") or ["group 1", "group 2"])
    if design.get("before_after"):
        # A before/after comparison tests the change in the gap, day-clustered (CR2).
        tested = "difference in differences against a baseline (t, day-clustered CR2)"
    elif design.get("metric") == "ratio":
        kind = f"cluster-robust, clusters: {clustered_by}" if clustered_by else "delta method"
        tested = f"difference of ratios of sums (t, {kind})"
    else:
        tested = method_words(design.get("method"), clustered_by=clustered_by)
    parts = [tested, _alternative_words(design.get("alternative"), names)]
    if _finite(design.get("alpha")) is not None:
        parts.append(f"alpha {figure(design['alpha'])}")
    parts.append(spending_words(design.get("spending")))
    return ", ".join(parts)
