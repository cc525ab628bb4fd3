"""Validation of one ``[[comparison]]`` table, part by part (pydantic models).

The flat table is split into the parts of a comparison — what is read, the test, the
plan, pairing, clustering, settings — each a typed model with one validator per key, so
a rule is found under the key it checks. Rules that look across parts (pairing only with
method 'paired', futility only one-sided, …) read the table's raw keys from the
validation context, so every problem in a table is found in one pass even when a key
they depend on is itself wrong.
"""

from __future__ import annotations

import re
from typing import ClassVar

from apscheduler.triggers.cron import CronTrigger
from pydantic import BaseModel, ConfigDict, Field, field_validator
from zoneinfo import ZoneInfo

from ..stats.spending import parse_spending
from ..vocabulary import parse_duration, parse_moment
from .model import (ALTERNATIVES, CLUSTER_BUCKETS, DEFAULT_MIN_CLUSTERS, DEFAULT_MIN_PAIRS, MIN_CLUSTERS_FLOOR,
                    MIN_PAIRS_FLOOR, FILTER_OPS, METHODS, METRICS,
                    PAIR_BUCKETS, TIME_FORMATS, ComparisonConfig)
from .rules import (IDENTIFIER, Context, FromEnvironment, Part, checked, ctx, duration, float_or_none, identifier,
                    is_number, is_whole, keyed, one_of, plain, unknown_keys, validate, whole,
                    zone_or_none)

__all__ = ["ComparisonTable", "check_comparison"]

_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.\-]{0,199}$")
_CLOCK = re.compile(r"^([01]\d|2[0-3]):([0-5]\d)$")


class Reading(Part):
    """What is read: the source's table, columns, groups, and which rows count."""

    source: str
    table: str
    group_column: str
    value_column: str | None = checked(None)
    numerator_column: str | None = checked(None)
    denominator_column: str | None = checked(None)
    time_column: str
    groups: tuple
    schema_: str | None = Field(default=None, alias="schema")
    arrival_column: str | None = None
    valid_range: tuple[float, float] | None = None
    filters: tuple = ()
    time_format: str = "auto"
    timezone: str = "UTC"
    model_config = ConfigDict(populate_by_name=True)

    @field_validator("source", mode="before")
    @classmethod
    def _source(cls, value, info):
        known = ctx(info).sources
        if value not in known:
            raise keyed(f"names no [sources] entry: {value!r} (known: {', '.join(known) or 'none'})")
        return value

    @field_validator("table", "group_column", "time_column", "schema_", "arrival_column", mode="before")
    @classmethod
    def _column(cls, value):
        return identifier(value)

    @field_validator("value_column", mode="before")
    @classmethod
    def _value_column(cls, value, info):
        if ctx(info).metric == "ratio":
            if value is not None:
                raise keyed("is not used by metric 'ratio' (give numerator_column and denominator_column)")
            return None
        if value is None:
            raise keyed("is required")
        return identifier(value)

    @field_validator("numerator_column", "denominator_column", mode="before")
    @classmethod
    def _ratio_column(cls, value, info):
        metric = ctx(info).metric
        if metric != "ratio":
            if value is not None:
                raise keyed(f"is only used by metric 'ratio', not {metric!r}")
            return None
        if value is None:
            raise keyed("is required for metric 'ratio'")
        return identifier(value)

    @field_validator("groups", mode="before")
    @classmethod
    def _groups(cls, value):
        if (not isinstance(value, list) or len(value) != 2
                or not all(isinstance(g, (str, int)) and not isinstance(g, bool) for g in value)):
            raise keyed(f"must be two group values (text or integers); got {value!r}")
        if value[0] == value[1]:
            raise keyed(f"must be two different values; got {value!r}")
        if type(value[0]) is not type(value[1]):
            raise keyed(f"must both be text or both integers; got {value!r}")
        return tuple(value)

    @field_validator("valid_range", mode="before")
    @classmethod
    def _valid_range(cls, value):
        if value is None:
            return None
        if not isinstance(value, list) or len(value) != 2 or not all(is_number(x) for x in value):
            raise keyed(f"must be [low, high] numbers; got {value!r}")
        if value[0] > value[1]:
            raise keyed(f"low must not exceed high; got {value!r}")
        return tuple(float(x) for x in value)

    @field_validator("filters", mode="before")
    @classmethod
    def _filters(cls, value):
        if not isinstance(value, list):
            raise keyed(f"must be a list of [column, op, value]; got {value!r}")
        problems = [p for p in (_filter_problem(i, f) for i, f in enumerate(value)) if p]
        if problems:
            # One line per bad entry: a field raises once, so the entries' lines are joined
            # here and split again when the messages are written.
            raise keyed("\n".join(problems))
        return tuple(_filter(f) for f in value)

    @field_validator("time_format", mode="before")
    @classmethod
    def _time_format(cls, value):
        return one_of(value, TIME_FORMATS)

    @field_validator("timezone", mode="before")
    @classmethod
    def _timezone(cls, value):
        if zone_or_none(value) is None:
            raise keyed(f"{value!r} is not a known time zone (e.g. \"Europe/Lisbon\")")
        return value


def _scalar(x) -> bool:
    return isinstance(x, (str, int, float, bool))


def _filter_problem(i, entry):
    if not isinstance(entry, list) or len(entry) != 3:
        return f"entry {i + 1} must be [column, op, value]; got {entry!r}"
    column, op, value = entry
    if not isinstance(column, str) or not IDENTIFIER.match(column):
        return f"entry {i + 1}: column must be a plain identifier; got {column!r}"
    if op not in FILTER_OPS:
        return f"entry {i + 1}: operator {op!r} is not one of {', '.join(FILTER_OPS)}"
    if op in ("in", "not in"):
        if not isinstance(value, list) or not value or not all(_scalar(x) for x in value):
            return f"entry {i + 1}: '{op}' needs a non-empty list of values; got {value!r}"
    elif not _scalar(value):
        return f"entry {i + 1}: value must be text, a number or a boolean; got {value!r}"
    return None


def _filter(entry):
    column, op, value = entry
    return (column, op, tuple(value) if op in ("in", "not in") else value)


class Inference(Part):
    """How the two groups are compared: metric, method, alternative, error rate, spending."""

    metric: str = checked("mean")
    method: str = checked(None)
    alternative: str = checked("two-sided")
    alpha: float = checked(0.05)
    spending: str = checked("obrien-fleming")
    null_difference: float = checked(0.0)
    futility: bool = checked(False)
    fraction: str = checked("events")
    sigmas: tuple[float, float] | None = checked(None)

    @field_validator("metric", mode="before")
    @classmethod
    def _metric(cls, value):
        return one_of(value, METRICS)

    @field_validator("method", mode="before")
    @classmethod
    def _method(cls, value, info):
        c = ctx(info)
        method = c.method
        if method not in METHODS:
            raise whole(f"method {method!r} is not one of {', '.join(METHODS)}")
        if c.metric == "ratio" and method != "welch":
            raise keyed(f"{method!r} does not fit metric 'ratio': a ratio of sums is tested with its "
                        "delta-method standard error (leave method out, or give 'welch')")
        if c.metric in METRICS and (method == "proportions") != (c.metric == "proportion"):
            raise keyed(f"{method!r} does not fit metric {c.metric!r}: proportions goes with "
                         "metric 'proportion' and the other methods with 'mean'")
        return method

    @field_validator("alternative", mode="before")
    @classmethod
    def _alternative(cls, value):
        return one_of(value, ALTERNATIVES)

    @field_validator("alpha", mode="before")
    @classmethod
    def _alpha(cls, value):
        if not is_number(value) or not 0 < value < 0.5:
            raise keyed(f"must be a number in (0, 0.5); got {value!r}")
        return float(value)

    @field_validator("spending", mode="before")
    @classmethod
    def _spending(cls, value):
        try:
            return parse_spending(value).spec
        except Exception as exc:  # noqa: BLE001 - the spending module's own message is the problem
            raise keyed(f"{exc}") from None

    @field_validator("null_difference", mode="before")
    @classmethod
    def _null_difference(cls, value, info):
        if not is_number(value):
            raise keyed(f"must be a number; got {value!r}")
        if ctx(info).method == "proportions" and not -1 < value < 1:
            raise keyed(f"must be in (-1, 1) for proportions; got {value!r}")
        return float(value)

    @field_validator("futility", mode="before")
    @classmethod
    def _futility(cls, value, info):
        c = ctx(info)
        if not isinstance(value, bool):
            raise keyed(f"must be true or false; got {value!r}")
        if value and c.alternative == "two-sided":
            raise keyed("needs a one-sided alternative ('greater' or 'less')")
        if value and c.raw("planned_per_group") is not None:
            raise keyed("needs the planning inputs (difference + sd, or p1 + p2, and power) "
                         "instead of planned_per_group: the futility boundary is built from the "
                         "planned difference")
        return value

    @field_validator("fraction", mode="before")
    @classmethod
    def _fraction(cls, value, info):
        c = ctx(info)
        if value not in ("events", "information"):
            raise keyed(f"must be 'events' or 'information'; got {value!r}")
        if value == "information" and (c.metric != "mean" or c.raw("difference") is None or c.raw("sd") is None):
            raise keyed("'information' needs a mean comparison planned from difference + sd (the maximum "
                         "information comes from the planned difference and the design)")
        if value == "information" and _has_baseline(c):
            raise keyed("'information' is not used with a baseline: a before/after comparison's fraction "
                         "comes from its days after the start and in the baseline")
        return value

    @field_validator("sigmas", mode="before")
    @classmethod
    def _sigmas(cls, value, info):
        method = ctx(info).method
        if method != "z":
            if value is not None:
                raise keyed(f"is only used by method 'z', not {method!r}")
            return None
        if value is None:
            raise keyed("is required for method 'z' (the two known standard deviations)")
        if not (isinstance(value, list) and len(value) == 2 and all(is_number(s) and s > 0 for s in value)):
            raise keyed(f"must be two positive numbers; got {value!r}")
        return tuple(float(s) for s in value)


_PLANNING_KEYS = ("difference", "sd", "p1", "p2", "power", "looks")


class Planning(Part):
    """How many events: ``planned_per_group``, or the inputs that give it."""

    planned_per_group: int | None = checked(None)
    difference: float | None = checked(None)
    sd: float | None = checked(None)
    p1: float | None = checked(None)
    p2: float | None = checked(None)
    power: float | None = checked(None)
    looks: int = checked(5)

    @staticmethod
    def _mode(c: Context) -> str:
        """``count`` (planned_per_group), ``inputs`` (planning keys alone) or ``none``."""
        if c.raw("planned_per_group") is not None:
            return "count"
        return "inputs" if any(c.raw(k) is not None for k in _PLANNING_KEYS) else "none"

    @staticmethod
    def _needed(metric):
        return ("p1", "p2") if metric == "proportion" else ("difference", "sd")

    @field_validator("planned_per_group", mode="before")
    @classmethod
    def _planned(cls, value, info):
        c = ctx(info)
        if value is None:
            if cls._mode(c) == "none":
                raise keyed("is required, or the planning inputs: difference + sd "
                             "(p1 + p2 for proportions) and power")
            return None
        if not is_whole(value) or value < 2:
            raise keyed(f"must be an integer of at least 2; got {value!r}")
        given = [k for k in _PLANNING_KEYS if c.raw(k) is not None]
        if given:
            raise keyed(f"give planned_per_group or the planning inputs ({', '.join(given)}), not both")
        return value

    @classmethod
    def _wanted(cls, value, info) -> bool:
        """Whether a planning input's own rule applies (its metric's input, planned from inputs)."""
        c, key = ctx(info), info.field_name
        if cls._mode(c) != "inputs":
            return False
        if key not in cls._needed(c.metric):
            if value is not None:
                raise keyed(f"is not a planning input for metric {c.metric!r}")
            return False
        if value is None:
            raise keyed(f"is required to plan a {c.metric} comparison without planned_per_group")
        return True

    @field_validator("p1", "p2", mode="before")
    @classmethod
    def _proportion(cls, value, info):
        if not cls._wanted(value, info):
            return float_or_none(value)
        if not is_number(value) or not 0 < value < 1:
            raise keyed(f"must be a proportion in (0, 1); got {value!r}")
        if info.field_name == "p2" and value == ctx(info).raw("p1"):
            raise keyed("must differ from p1 (the difference worth detecting)")
        return float(value)

    @field_validator("difference", mode="before")
    @classmethod
    def _difference(cls, value, info):
        if not cls._wanted(value, info):
            return float_or_none(value)
        alternative = ctx(info).alternative
        if not is_number(value) or value == 0:
            raise keyed(f"must be a non-zero number; got {value!r}")
        if alternative == "greater" and value < 0:
            raise keyed(f"must be positive for alternative 'greater'; got {value!r}")
        if alternative == "less" and value > 0:
            raise keyed(f"must be negative for alternative 'less'; got {value!r}")
        return float(value)

    @field_validator("sd", mode="before")
    @classmethod
    def _sd(cls, value, info):
        if not cls._wanted(value, info):
            return float_or_none(value)
        if not is_number(value) or value <= 0:
            raise keyed(f"must be a positive number; got {value!r}")
        return float(value)

    @field_validator("power", mode="before")
    @classmethod
    def _power(cls, value, info):
        if cls._mode(ctx(info)) != "inputs":
            return float_or_none(value)
        if value is None:
            raise keyed("is required to plan without planned_per_group")
        if not is_number(value) or not 0 < value < 1:
            raise keyed(f"must be a number in (0, 1); got {value!r}")
        return float(value)

    @field_validator("looks", mode="before")
    @classmethod
    def _looks(cls, value, info):
        if not is_whole(value) or not 1 <= value <= 50:
            if cls._mode(ctx(info)) == "inputs":
                raise keyed(f"must be an integer in 1..50; got {value!r}")
            return 5  # not used without planning inputs
        return value


class Pairing(Part):
    """Paired comparisons: what makes a pair (a calendar bucket or a key column)."""

    pair_by: str | None = checked(None)
    pair_column: str | None = checked(None)
    min_pairs: int = checked(None)
    shift_starts: tuple[str, ...] = checked(None)

    @field_validator("min_pairs", mode="before")
    @classmethod
    def _min_pairs(cls, value, info):
        method = ctx(info).method
        if value is None:
            return DEFAULT_MIN_PAIRS
        if not is_whole(value) or value < MIN_PAIRS_FLOOR:
            raise keyed(f"must be an integer of at least {MIN_PAIRS_FLOOR}; got {value!r}")
        if method != "paired":
            raise keyed(f"is only used by method 'paired', not {method!r}")
        return value

    @field_validator("pair_by", mode="before")
    @classmethod
    def _pair_by(cls, value, info):
        c = ctx(info)
        if c.method != "paired":
            if value is not None:
                raise keyed(f"is only used by method 'paired', not {c.method!r}")
            return None
        if (value is None) == (c.raw("pair_column") is None):
            raise keyed("method 'paired' needs exactly one of pair_by or pair_column")
        return value if value is None else one_of(value, PAIR_BUCKETS)

    @field_validator("pair_column", mode="before")
    @classmethod
    def _pair_column(cls, value, info):
        method = ctx(info).method
        if method != "paired" and value is not None:
            raise keyed(f"is only used by method 'paired', not {method!r}")
        return identifier(value)

    @field_validator("shift_starts", mode="before")
    @classmethod
    def _shift_starts(cls, value, info):
        by_shift = ctx(info).raw("pair_by") == "shift"
        if value is None:
            if by_shift:
                raise keyed("is required with pair_by = \"shift\" (e.g. [\"06:00\", \"14:00\", \"22:00\"])")
            return ()
        if not by_shift:
            raise keyed("is only used with pair_by = \"shift\"")
        clocks = isinstance(value, list) and value and all(isinstance(s, str) and _CLOCK.match(s) for s in value)
        if not clocks:
            raise keyed(f"must be a list of local times \"HH:MM\"; got {value!r}")
        if len(set(value)) != len(value):
            raise keyed(f"has repeated times: {value!r}")
        return tuple(sorted(value))


class Clustering(Part):
    """Clustered comparisons: a calendar bucket or a key column, and the fewest clusters to decide."""

    cluster_by: str | None = checked(None)
    cluster_column: str | None = checked(None)
    min_clusters: int = checked(None)

    @staticmethod
    def _available(c: Context):
        if c.method in ("paired", "z"):
            raise keyed(f"clustering is not available with method {c.method!r} (use welch, pooled or proportions)")

    @field_validator("cluster_by", mode="before")
    @classmethod
    def _cluster_by(cls, value, info):
        c = ctx(info)
        if value is None:
            return None
        if c.raw("cluster_column") is not None:
            raise keyed("give cluster_by or cluster_column, not both")
        one_of(value, CLUSTER_BUCKETS)
        cls._available(c)
        return value

    @field_validator("cluster_column", mode="before")
    @classmethod
    def _cluster_column(cls, value, info):
        c = ctx(info)
        identifier(value)
        if value is not None and c.raw("cluster_by") is None:
            cls._available(c)
        return value

    @field_validator("min_clusters", mode="before")
    @classmethod
    def _min_clusters(cls, value, info):
        c = ctx(info)
        if value is None:
            return DEFAULT_MIN_CLUSTERS
        if not is_whole(value) or value < MIN_CLUSTERS_FLOOR:
            raise keyed(f"must be an integer of at least {MIN_CLUSTERS_FLOOR}; got {value!r}")
        if not c.clustered and not _has_baseline(c):
            raise keyed("is only used with cluster_by or cluster_column (or a baseline)")
        return value


def _has_baseline(c: Context) -> bool:
    return any(c.raw(k) is not None for k in ("baseline", "baseline_from", "baseline_to"))


def _moment(value, key, c: Context):
    """``value`` as aware UTC (ISO-8601 with a zone, or naive in the comparison's timezone)."""
    zone = zone_or_none(c.raw("timezone", "UTC")) or ZoneInfo("UTC")
    try:
        return parse_moment(value, key, zone)
    except ValueError as exc:
        raise keyed(str(exc).removeprefix(f"{key} ")) from None


class BeforeAfter(Part):
    """A start (only events at or after it count) and a baseline before it (the DiD)."""

    start: str | None = checked(None)
    baseline: str | None = checked(None)
    baseline_from: str | None = checked(None)
    baseline_to: str | None = checked(None)
    day_sd: float | None = checked(None)
    events_per_day: float | None = checked(None)

    @field_validator("start", mode="before")
    @classmethod
    def _start(cls, value, info):
        if value is None:
            return None
        _moment(value, "start", ctx(info))
        return value if isinstance(value, str) else value.isoformat()

    @field_validator("baseline", mode="before")
    @classmethod
    def _baseline(cls, value, info):
        c = ctx(info)
        if value is None:
            return None
        if c.raw("start") is None:
            raise keyed("needs a start (the moment the change went live); the baseline is the period before it")
        if c.raw("baseline_from") is not None or c.raw("baseline_to") is not None:
            raise keyed("give baseline (a length before the start) or baseline_from + baseline_to, not both")
        try:
            if not isinstance(value, str) or parse_duration(value) <= 0:
                raise ValueError
        except ValueError:
            raise keyed(f"must be a positive length like \"28d\"; got {value!r}") from None
        cls._fits(c)
        return value

    @field_validator("baseline_from", "baseline_to", mode="before")
    @classmethod
    def _baseline_end(cls, value, info):
        c, key = ctx(info), info.field_name
        other = "baseline_to" if key == "baseline_from" else "baseline_from"
        if value is None:
            if c.raw(other) is not None and c.raw("baseline") is None:
                raise keyed("is required with the other end of the baseline")
            return None
        if c.raw("start") is None:
            raise keyed("needs a start (the moment the change went live); the baseline is the period before it")
        moment = _moment(value, key, c)
        if key == "baseline_to":
            start = c.raw("start")
            try:
                start_moment = _moment(start, "start", c)
            except Exception:  # noqa: BLE001 - the start's own problem is reported under its key
                start_moment = None
            if start_moment is not None and moment > start_moment:
                raise keyed(f"must not be after the start {start!r}; got {value!r}")
            begin = c.raw("baseline_from")
            try:
                begin_moment = None if begin is None else _moment(begin, "baseline_from", c)
            except Exception:  # noqa: BLE001 - reported under baseline_from
                begin_moment = None
            if begin_moment is not None and not begin_moment < moment:
                raise keyed(f"must be after baseline_from; got {begin!r} to {value!r}")
            cls._fits(c)
        return value if isinstance(value, str) else value.isoformat()

    @staticmethod
    def _fits(c: Context):
        if c.metric == "ratio":
            raise keyed("metric 'ratio' cannot be a before/after comparison yet: the difference in "
                        "differences is of means (welch, pooled) or rates (proportions)")
        if c.method not in ("welch", "pooled", "proportions"):
            raise keyed(f"method {c.method!r} cannot be a before/after comparison: it compares means "
                        f"(welch, pooled) or rates (proportions) day by day")
        if c.raw("cluster_column") is not None:
            raise keyed("a before/after comparison is clustered by calendar day; drop cluster_column")
        if c.raw("cluster_by") not in (None, "day"):
            raise keyed(f"a before/after comparison is clustered by calendar day; got cluster_by "
                        f"{c.raw('cluster_by')!r}")
        if c.raw("futility") is True:
            raise keyed("futility is not available for before/after comparisons")

    @field_validator("day_sd", "events_per_day", mode="before")
    @classmethod
    def _planning(cls, value, info):
        c, key = ctx(info), info.field_name
        planning = c.raw("planned_per_group") is None
        if not _has_baseline(c):
            if value is not None:
                raise keyed("plans a before/after comparison: give start and baseline too")
            return None
        if value is None:
            if key == "events_per_day" and planning:
                raise keyed("is required to plan a before/after comparison (events per group per day)")
            return None
        if not planning:
            raise keyed("is a planning input; give it with difference + sd (p1 + p2) and power, "
                        "not with planned_per_group")
        if not is_number(value) or value < 0 or (key == "events_per_day" and value == 0):
            raise keyed(f"must be a {'positive number' if key == 'events_per_day' else 'number of at least 0'}; "
                        f"got {value!r}")
        return float(value)


class Settings(Part):
    """Settings shown with a comparison but never frozen into its design."""

    every: str = checked("10m")
    lateness: str = checked("0s")
    notify: tuple[str, ...] = checked(None)
    description: str = checked("")
    expected_share: float | None = None

    @field_validator("every", mode="before")
    @classmethod
    def _every(cls, value, info):
        hint = "must be an interval like 30s, 10m, 1h, 1d or a cron expression"
        if not isinstance(value, str):
            raise keyed(f"{hint}; got {value!r}")
        try:
            seconds = parse_duration(value)
        except ValueError:
            seconds = None
        if seconds is not None:
            if seconds <= 0:
                raise keyed(f"{hint}; got {value!r}")
            return value
        local = zone_or_none(ctx(info).raw("timezone", "UTC")) or ZoneInfo("UTC")
        try:
            CronTrigger.from_crontab(value, timezone=local)
        except (ValueError, TypeError) as exc:
            # The trigger's message may quote the expression; one from ${NAME} is not shown.
            why = "" if isinstance(value, FromEnvironment) else f" ({exc})"
            raise keyed(f"{value!r} is neither an interval (30s, 10m, 1h, 1d) "
                        f"nor a cron expression{why}") from None
        return value

    @field_validator("lateness", mode="before")
    @classmethod
    def _lateness(cls, value):
        return duration(value)

    @field_validator("notify", mode="before")
    @classmethod
    def _notify(cls, value, info):
        channels = ctx(info).channels
        if value is None:
            return tuple(channels)
        if not isinstance(value, list) or not all(isinstance(n, str) for n in value):
            raise keyed(f"must be a list of channel names; got {value!r}")
        unknown = [n for n in value if n not in channels]
        if unknown:
            known = ", ".join(channels) or "none"
            raise keyed("\n".join(f"names no [channels] entry: {n!r} (known: {known})" for n in unknown))
        return tuple(value)

    @field_validator("expected_share", mode="before")
    @classmethod
    def _expected_share(cls, value):
        if not is_number(value) or not 0 < value < 1:
            raise keyed(f"must be a number in (0, 1) (group 1's share of the events); got {value!r}")
        return float(value)

    @field_validator("description", mode="before")
    @classmethod
    def _description(cls, value):
        if not isinstance(value, str):
            raise keyed(f"must be text; got {value!r}")
        return value


# Long enough for a site's or a desk's full name; short enough for a table column.
_LABEL_LIMIT = 60
_UNIT_LIMIT = 20


class Display(Part):
    """How the comparison is shown (never frozen into its design): group names and the unit."""

    labels: tuple[str, str] | None = None
    unit: str = ""

    @field_validator("labels", mode="before")
    @classmethod
    def _labels(cls, value, info):
        groups = ctx(info).raw("groups")
        count = len(groups) if isinstance(groups, list) else 2
        if not isinstance(value, list) or not all(isinstance(x, str) for x in value):
            raise keyed(f"must be a list of {count} names, one per group in group order; got {value!r}")
        if len(value) != count:
            raise keyed(f"must name each of the {count} groups once, in group order; got {len(value)} "
                        f"name{'s' if len(value) != 1 else ''}: {value!r}")
        empty = [i + 1 for i, x in enumerate(value) if not x.strip()]
        if empty:
            raise keyed(f"name {empty[0]} is empty; give each group a name to show, or leave labels out")
        long = [x for x in value if len(x.strip()) > _LABEL_LIMIT]
        if long:
            raise keyed(f"names must be at most {_LABEL_LIMIT} characters; got {long[0]!r}")
        if value[0].strip() == value[1].strip():
            raise keyed(f"must be two different names; got {value!r}")
        return tuple(x.strip() for x in value)

    @field_validator("unit", mode="before")
    @classmethod
    def _unit(cls, value):
        if not isinstance(value, str):
            raise keyed(f"must be text such as \"s\", \"min\" or \"units\"; got {value!r}")
        if not value.strip():
            raise keyed("is empty; give the values' unit (e.g. \"s\"), or leave unit out")
        if len(value.strip()) > _UNIT_LIMIT:
            raise keyed(f"must be at most {_UNIT_LIMIT} characters; got {value!r}")
        return value.strip()


class ComparisonTable(BaseModel):
    """A ``[[comparison]]`` table, as its parts."""

    model_config = ConfigDict(frozen=True, extra="forbid")

    reading: Reading
    inference: Inference
    planning: Planning
    pairing: Pairing
    clustering: Clustering
    settings: Settings
    display: Display
    before_after: BeforeAfter

    PARTS: ClassVar[dict] = {"reading": Reading, "inference": Inference, "planning": Planning,
                             "pairing": Pairing, "clustering": Clustering, "settings": Settings,
                             "display": Display, "before_after": BeforeAfter}

    @classmethod
    def keys(cls) -> set[str]:
        """Every key a comparison table may hold (``schema`` under its own name)."""
        out = {"name"}
        for part in cls.PARTS.values():
            out.update(f.alias or n for n, f in part.model_fields.items())
        return out

    @classmethod
    def split(cls, table: dict) -> dict:
        """The flat table as one sub-table per part."""
        return {name: {(f.alias or n): table[f.alias or n] for n, f in part.model_fields.items()
                       if (f.alias or n) in table}
                for name, part in cls.PARTS.items()}

    def build(self, name: str) -> ComparisonConfig:
        r, t, p, pr, cl, s, ba = (self.reading, self.inference, self.planning, self.pairing, self.clustering,
                                  self.settings, self.before_after)
        return ComparisonConfig(**plain(dict(
            name=name, source=r.source, table=r.table, group_column=r.group_column, groups=r.groups,
            value_column=r.value_column if t.metric != "ratio" else r.numerator_column,
            time_column=r.time_column, metric=t.metric, method=t.method,
            alternative=t.alternative, alpha=t.alpha, spending=t.spending,
            planned_per_group=p.planned_per_group, difference=p.difference, sd=p.sd, p1=p.p1, p2=p.p2,
            power=p.power, looks=p.looks, every=s.every, sigmas=t.sigmas, pair_by=pr.pair_by,
            pair_column=pr.pair_column, min_pairs=pr.min_pairs, shift_starts=pr.shift_starts, null_difference=t.null_difference,
            futility=t.futility, fraction=t.fraction, valid_range=r.valid_range, filters=r.filters,
            lateness=s.lateness,
            arrival_column=r.arrival_column, time_format=r.time_format, timezone=r.timezone,
            cluster_by=cl.cluster_by, cluster_column=cl.cluster_column, min_clusters=cl.min_clusters,
            notify=s.notify, description=s.description, schema=r.schema_, start=ba.start, baseline=ba.baseline,
            baseline_from=ba.baseline_from, baseline_to=ba.baseline_to, day_sd=ba.day_sd,
            events_per_day=ba.events_per_day,
            numerator_column=r.numerator_column, denominator_column=r.denominator_column,
            expected_share=s.expected_share,
            labels=self.display.labels, unit=self.display.unit,
        )))


_COMPARISON_KEYS = ComparisonTable.keys()


def check_comparison(index, table, context: Context):
    """(name or None, ComparisonConfig or None, problems) for one ``[[comparison]]`` table."""
    if not isinstance(table, dict):
        return None, None, [f"comparison #{index + 1}: must be a table"]
    problems = []
    name = table.get("name")
    if not isinstance(name, str) or not _NAME.match(name):
        problems.append(f"comparison #{index + 1}: 'name' must be letters, digits, '-', '_' or '.' "
                        f"(up to 200); got {name!r}")
        name = f"#{index + 1}"
    where = f"comparison {name!r}"
    problems += unknown_keys(where, table, _COMPARISON_KEYS)
    context = Context(folder=context.folder, sources=context.sources, channels=context.channels, table=table)
    model, found = validate(ComparisonTable, ComparisonTable.split(table), where, context)
    problems += [line for p in found for line in _split_lines(p, where)]
    return name, (model.build(name) if model is not None else None), problems


def _split_lines(problem, where):
    """A problem holding several lines (one per list entry) as one problem per line."""
    first, *rest = problem.split("\n")
    if not rest:
        return [problem]
    prefix = first[: first.index("' ", len(where)) + 2]  # "comparison 'x': 'key' "
    return [first] + [prefix + line for line in rest]
