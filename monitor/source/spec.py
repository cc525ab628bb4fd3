"""The source's contract: what to read (``SourceSpec``) and what a read returns.

These types carry no SQL; the reader and the look both speak them. Exclusion
reasons are listed here in the order they are tested, so each bad row is
counted once, under the first reason that applies.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import datetime

from ..errors import InvalidArgumentError
from ..vocabulary import as_utc

__all__ = [
    "SLOT_SECONDS",
    "EXCLUSION_REASONS",
    "FILTER_OPERATORS",
    "VALUE_LIMIT",
    "TIME_FORMATS",
    "METRICS",
    "SourceSpec",
    "Watermark",
    "SlotCell",
    "Batch",
    "utc",
]

# Cells are kept per 15-minute UTC slot: fine enough for calendar clusters (day, shift,
# hour), coarse enough that one look's cells stay few.
SLOT_SECONDS = 900

EXCLUSION_REASONS = (
    "null_time",  # no event time
    "bad_time",  # a stored time that is not a date-time (text that is not ISO-8601, an epoch out of range)
    "unknown_group",
    "null_value",
    "non_numeric",
    "not_finite",  # NaN, ±infinity, or beyond the largest double
    "too_large",  # finite, but |value| > VALUE_LIMIT
    "not_binary",
    "out_of_range",
    "before_start",  # dated before a before/after comparison's start, arrived after its baseline was frozen
    "bad_denominator",  # ratio metric: a denominator that is NULL, not a number, not finite, |d| > VALUE_LIMIT, or <= 0
)

# Values whose magnitude exceeds this are excluded as ``too_large``. The bound keeps every
# figure built from the shifted sums finite: with |x| and the shift c at most 1e50,
# (x - c)^2 <= 4e100, so a sum over even 1e12 rows stays below 1e113, and the squares of
# variances that Welch's degrees of freedom form (about 3e202 at most) stay far below the
# largest double (1.8e308). Without it one value above about 1.3e154 overflows Σ(x - c)^2.
# No measured operations quantity comes near 1e50.
VALUE_LIMIT = 1e50

FILTER_OPERATORS = ("=", "!=", "<", "<=", ">", ">=", "in", "not in")

TIME_FORMATS = ("auto", "timestamp", "iso", "epoch")
METRICS = ("mean", "proportion", "ratio")


def utc(moment, name: str) -> datetime:
    """``moment`` as an aware UTC datetime (naive means UTC); a caller's mistake raises InvalidArgumentError."""
    try:
        return as_utc(moment, name)
    except ValueError as error:
        raise InvalidArgumentError(str(error)) from None


def _check_filters(filters) -> tuple:
    checked = []
    for item in filters:
        if not isinstance(item, (tuple, list)) or len(item) != 3:
            raise InvalidArgumentError(f"filters entries must be (column, op, value), got {item!r}")
        column, op, value = item
        if not isinstance(column, str) or not column:
            raise InvalidArgumentError(f"filter column must be a non-empty string, got {column!r}")
        if op not in FILTER_OPERATORS:
            raise InvalidArgumentError(f"filter operator must be one of {FILTER_OPERATORS}, got {op!r}")
        if op in ("in", "not in"):
            if isinstance(value, (str, bytes)) or not hasattr(value, "__iter__"):
                raise InvalidArgumentError(f"filter {op!r} needs a list of values, got {value!r}")
            value = tuple(value)
        checked.append((column, op, value))
    return tuple(checked)


def _check_valid_range(valid_range) -> tuple:
    bounds = tuple(valid_range)
    if len(bounds) != 2:
        raise InvalidArgumentError(f"valid_range must be (low, high), got {valid_range!r}")
    for b in bounds:
        if b is not None and (not isinstance(b, (int, float)) or math.isnan(b)):
            raise InvalidArgumentError(f"valid_range bounds must be numbers or None, got {valid_range!r}")
    if bounds[0] is not None and bounds[1] is not None and bounds[0] > bounds[1]:
        raise InvalidArgumentError(f"valid_range low must not exceed high, got {valid_range!r}")
    return bounds


@dataclass(frozen=True)
class SourceSpec:
    """What to read: one comparison's table, columns, groups, metric and filters."""

    table: str
    group_column: str
    groups: tuple
    value_column: str
    time_column: str
    metric: str = "mean"
    shift: float = 0.0
    schema: str | None = None
    time_format: str = "auto"
    key_column: str | None = None
    arrival_column: str | None = None
    filters: tuple = ()
    valid_range: tuple | None = None
    # Event-time window: ``start`` inclusive (a comparison counts events at or after its start),
    # ``end`` exclusive (a baseline ends where the change begins).
    start: datetime | None = None
    end: datetime | None = None
    denominator_column: str | None = None  # ratio metric: value_column holds the numerator
    shift_den: float = 0.0

    def __post_init__(self):
        for name in ("table", "group_column", "value_column", "time_column"):
            value = getattr(self, name)
            if not isinstance(value, str) or not value:
                raise InvalidArgumentError(f"{name} must be a non-empty string, got {value!r}")
        groups = tuple(self.groups)
        if len(groups) != 2:
            raise InvalidArgumentError(f"groups must hold exactly two values, got {self.groups!r}")
        if groups[0] == groups[1]:
            raise InvalidArgumentError(f"groups must be two different values, got {self.groups!r}")
        object.__setattr__(self, "groups", groups)
        if self.metric not in METRICS:
            raise InvalidArgumentError(f"metric must be one of {METRICS}, got {self.metric!r}")
        if self.time_format not in TIME_FORMATS:
            raise InvalidArgumentError(f"time_format must be one of {TIME_FORMATS}, got {self.time_format!r}")
        for name in ("shift", "shift_den"):
            value = getattr(self, name)
            if not isinstance(value, (int, float)) or not math.isfinite(value):
                raise InvalidArgumentError(f"{name} must be a finite number, got {value!r}")
        if (self.metric == "ratio") != bool(self.denominator_column):
            raise InvalidArgumentError(
                f"denominator_column goes with metric 'ratio' (and only with it); got metric "
                f"{self.metric!r} and denominator_column {self.denominator_column!r}"
            )
        object.__setattr__(self, "filters", _check_filters(self.filters))
        if self.valid_range is not None:
            object.__setattr__(self, "valid_range", _check_valid_range(self.valid_range))
        for name in ("start", "end"):
            moment = getattr(self, name)
            if moment is not None:
                object.__setattr__(self, name, utc(moment, name))
        if self.start is not None and self.end is not None and not self.start < self.end:
            raise InvalidArgumentError(f"start must be before end, got {self.start} and {self.end}")

    @classmethod
    def from_design(cls, design, *, shift=None, arrival_column=None):
        """What to read for a :class:`monitor.design.Design` (the one place a design becomes a spec).

        ``shift`` defaults to the design's own (0 before it is fixed); ``arrival_column``
        is a setting of the comparison, not part of its design.
        """
        measure = design.measure
        if shift is None:
            shift = design.shift or 0.0
        return cls(
            table=measure.table, group_column=measure.group_column, groups=tuple(design.groups),
            value_column=measure.value_column, time_column=measure.time_column, metric=design.metric,
            shift=float(shift), schema=measure.schema, time_format=measure.time_format,
            key_column=design.key_column, arrival_column=arrival_column, filters=measure.filters,
            valid_range=measure.valid_range,
            start=None if design.window is None else design.window.moments()["start"],
            denominator_column=design.ratio.denominator_column if design.ratio is not None else None,
            shift_den=float(design.shift_den or 0.0),
        )

    def used_columns(self) -> list[tuple[str, str]]:
        """(role, column) for every column a read touches, in the order problems are reported."""
        used = [
            ("group_column", self.group_column),
            ("value_column", self.value_column),
            ("time_column", self.time_column),
        ]
        if self.key_column:
            used.append(("key_column", self.key_column))
        if self.denominator_column:
            used.append(("denominator_column", self.denominator_column))
        if self.arrival_column:
            used.append(("arrival_column", self.arrival_column))
        used.extend(("filters", column) for column, _op, _value in self.filters)
        return used


@dataclass(frozen=True)
class Watermark:
    """How far a comparison has read: event times up to ``cutoff`` and arrivals up to ``arrival``."""

    cutoff: datetime
    arrival: int | float | str | None = None

    def to_dict(self) -> dict:
        return {"cutoff": self.cutoff.isoformat(), "arrival": self.arrival}

    @classmethod
    def from_dict(cls, d: dict) -> "Watermark":
        cutoff = d["cutoff"]
        if isinstance(cutoff, str):
            cutoff = datetime.fromisoformat(cutoff)
        return cls(cutoff=utc(cutoff, "cutoff"), arrival=d.get("arrival"))


@dataclass(frozen=True)
class SlotCell:
    """Valid events of one group in one 15-minute UTC slot (and one key, when keyed)."""

    group_index: int
    slot: int
    key: str | None
    n: int
    sum_dev: float
    sum_dev2: float
    late: int = 0
    # Ratio metric only: the denominator's shifted sums Σ(d − c_d), Σ(d − c_d)² and the
    # cross-product Σ(x − c)(d − c_d) with the numerator.
    sum_den: float = 0.0
    sum_den2: float = 0.0
    sum_cross: float = 0.0


@dataclass(frozen=True)
class Batch:
    """What one incremental read found."""

    cells: tuple
    excluded: dict
    new_events: int
    late_events: int
    watermark: Watermark
