"""The statistical design of a comparison: one typed, frozen object with one home.

A :class:`Design` is what a comparison freezes at its first look: how the groups are
tested (method, alternative, alpha, spending, the null difference), how many events are
planned, how events pair or cluster, and what is measured (table, columns, groups,
filters, the valid range, the time zone). The schedule, the alert channels, the lateness
allowance, the description and the source's address are settings, not design.

* ``Design.from_config(comparison)`` — the design a configuration asks for (the plan is
  computed here from the planning inputs);
* ``Design.from_stored(dict)`` / ``design.to_stored()`` — the JSON kept with the
  comparison in the store, in exactly the shape stores have always held;
* ``design.differences(other)`` — the keys that changed (the shift fixed at the first look
  and the plan's derived figures are left out), for the design-change refusal;
* ``design.fingerprint()`` — the hash stored beside it;
* ``monitor.source.SourceSpec.from_design(design, …)`` — what the source reads.
"""

from __future__ import annotations

import functools
import hashlib
import json
import math
from dataclasses import dataclass, field, replace
from datetime import datetime
from types import MappingProxyType
from zoneinfo import ZoneInfo

from .config.model import DEFAULT_MIN_PAIRS
from .errors import InvalidArgumentError
from .vocabulary import json_safe

__all__ = ["Design", "Plan", "PlanInputs", "Pairing", "Clustering", "Measure", "RatioColumns", "Display",
           "Window", "design_hash"]


def design_hash(stored: dict) -> str:
    """A stable fingerprint of a stored design dict (sorted keys, JSON text, SHA-256)."""
    text = json.dumps(stored, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode()).hexdigest()


@dataclass(frozen=True)
class PlanInputs:
    """What the plan was computed from: power, looks, and difference + sd or p1 + p2."""

    power: float | None = None
    looks: int | None = None
    difference: float | None = None
    sd: float | None = None
    p1: float | None = None
    p2: float | None = None
    day_sd: float | None = None
    events_per_day: float | None = None
    # The order the stored dict had, so a design read back is written back text for text.
    order: tuple = field(default=(), compare=False, repr=False)

    def to_stored(self) -> dict:
        names = self.order or _INPUT_NAMES
        return {k: getattr(self, k) for k in names if getattr(self, k) is not None}

    @classmethod
    def from_stored(cls, stored: dict) -> PlanInputs:
        known = {k: v for k, v in stored.items() if k in _INPUT_NAMES}
        return cls(**known, order=tuple(known))


_INPUT_NAMES = ("power", "looks", "difference", "sd", "p1", "p2", "day_sd", "events_per_day")


@dataclass(frozen=True)
class Plan:
    """Planned events per group (pairs for paired comparisons), and where the figure came from.

    ``inputs`` and ``figures`` are None when ``planned_per_group`` was given directly;
    ``figures`` are the planning function's own (inflation, drift, expected events …).
    """

    planned_per_group: int
    inputs: PlanInputs | None = None
    figures: MappingProxyType | None = None

    @property
    def drift(self) -> float | None:
        """Expected z at the end under the planned difference (None without planning inputs)."""
        return None if self.figures is None else self.figures.get("drift")

    def to_stored(self) -> dict:
        out = {"planned_per_group": self.planned_per_group}
        if self.inputs is not None:
            out["inputs"] = self.inputs.to_stored()
        if self.figures is not None:
            out["figures"] = dict(self.figures)
        return out

    @classmethod
    def from_stored(cls, stored: dict) -> Plan:
        inputs = stored.get("inputs")
        figures = stored.get("figures")
        return cls(
            planned_per_group=int(stored["planned_per_group"]),
            inputs=None if inputs is None else PlanInputs.from_stored(inputs),
            figures=None if figures is None else MappingProxyType(dict(figures)),
        )


@dataclass(frozen=True)
class Pairing:
    """Paired comparisons: pairs by a calendar bucket (``pair_by``) or a key column."""

    pair_by: str | None
    pair_column: str | None
    shift_starts: tuple = ()
    min_pairs: int = DEFAULT_MIN_PAIRS

    def to_stored(self) -> dict:
        stored = {"pair_by": self.pair_by, "pair_column": self.pair_column,
                  "shift_starts": list(self.shift_starts)}
        if self.min_pairs != DEFAULT_MIN_PAIRS:
            # Only when set: designs frozen before min_pairs existed stay equal to the config.
            stored["min_pairs"] = self.min_pairs
        return stored

    @classmethod
    def from_stored(cls, stored: dict) -> Pairing:
        return cls(stored.get("pair_by"), stored.get("pair_column"), tuple(stored.get("shift_starts") or ()),
                   int(stored.get("min_pairs", DEFAULT_MIN_PAIRS)))


@dataclass(frozen=True)
class Clustering:
    """Clustered comparisons: clusters by a calendar bucket or a key column."""

    cluster_by: str | None
    cluster_column: str | None
    min_clusters: int | None

    def to_stored(self) -> dict:
        """The ``clustering`` entry (``min_clusters`` is stored beside it, at the top)."""
        return {"cluster_by": self.cluster_by, "cluster_column": self.cluster_column}

    @classmethod
    def from_stored(cls, stored: dict, min_clusters) -> Clustering:
        return cls(stored.get("cluster_by"), stored.get("cluster_column"), min_clusters)


@dataclass(frozen=True)
class RatioColumns:
    """Metric ``ratio``: the numerator (also ``Measure.value_column``) and denominator columns."""

    numerator_column: str
    denominator_column: str


@dataclass(frozen=True)
class Measure:
    """What is measured: the table and columns, which rows count, and the local time zone."""

    table: str
    group_column: str
    value_column: str
    time_column: str
    schema: str | None = None
    time_format: str = "auto"
    timezone: str = "UTC"
    filters: tuple = ()
    valid_range: tuple | None = None

    @property
    def zone(self) -> ZoneInfo:
        return ZoneInfo(self.timezone)

    @classmethod
    def from_stored(cls, stored: dict) -> Measure:
        """From the top level of a stored design, where these keys have always lived."""
        valid_range = stored.get("valid_range")
        return cls(
            table=stored["table"], group_column=stored["group_column"], value_column=stored["value_column"],
            time_column=stored["time_column"], schema=stored.get("schema"),
            time_format=stored.get("time_format", "auto"), timezone=stored.get("timezone", "UTC"),
            filters=tuple((f[0], f[1], tuple(f[2]) if isinstance(f[2], list) else f[2])
                          for f in stored.get("filters") or ()),
            valid_range=tuple(valid_range) if valid_range else None,
        )


@dataclass(frozen=True)
class Display:
    """How a comparison is shown: a name per group (in group order) and the unit of its values.

    Display only: it is stored with the design so every reader of the store shows it, but it
    is no part of what is tested, so changing it never starts a new version (it is left out
    of :meth:`Design.comparable` and of the fingerprint) and the next look stores the new one.
    """

    labels: tuple | None = None
    unit: str = ""

    def to_stored(self) -> dict:
        out = {}
        if self.labels:
            out["labels"] = list(self.labels)
        if self.unit:
            out["unit"] = self.unit
        return out

    @classmethod
    def from_stored(cls, stored) -> Display:
        stored = stored if isinstance(stored, dict) else {}
        labels = stored.get("labels")
        return cls(tuple(str(x) for x in labels) if labels else None, str(stored.get("unit") or ""))

    def names(self, groups) -> tuple:
        """The groups as shown: their labels, else the group values themselves."""
        return tuple(self.labels) if self.labels else tuple(str(g) for g in groups)


@dataclass(frozen=True)
class Window:
    """A comparison's start and, for a before/after comparison, the baseline before it.

    Times are ISO-8601 UTC text as stored. With a baseline the comparison estimates the
    difference in differences; ``min_clusters`` then counts days since the start.
    """

    start: str
    baseline_from: str | None = None
    baseline_to: str | None = None
    baseline_days: float | None = None
    events_per_day: float | None = None
    min_clusters: int | None = None

    @property
    def before_after(self) -> bool:
        return self.baseline_from is not None

    def moments(self) -> dict:
        """``start``, ``baseline_from``, ``baseline_to`` as aware datetimes (None where unset)."""
        return {k: None if getattr(self, k) is None else datetime.fromisoformat(getattr(self, k))
                for k in ("start", "baseline_from", "baseline_to")}

    def to_stored(self) -> dict:
        out = {"start": self.start}
        if self.before_after:
            out["before_after"] = {"baseline_from": self.baseline_from, "baseline_to": self.baseline_to,
                                   "baseline_days": self.baseline_days, "events_per_day": self.events_per_day}
        return out

    @classmethod
    def from_stored(cls, stored: dict) -> Window | None:
        if not stored.get("start"):
            return None
        ba = stored.get("before_after") or {}
        return cls(stored["start"], ba.get("baseline_from"), ba.get("baseline_to"), ba.get("baseline_days"),
                   ba.get("events_per_day"), stored.get("min_clusters") if ba else None)


@dataclass(frozen=True)
class Design:
    """A comparison's statistical design, frozen at its first look.

    ``shift`` (the constant the source subtracts before summing) is fixed at the first
    look with data and is None before it; it is not part of what may not change.
    """

    method: str
    metric: str
    groups: tuple
    alternative: str
    alpha: float
    spending: str
    null_difference: float
    plan: Plan
    measure: Measure
    sigmas: tuple | None = None
    pairing: Pairing | None = None
    clustering: Clustering | None = None
    futility: bool = False
    shift: float | None = None
    window: Window | None = None
    ratio: RatioColumns | None = None
    shift_den: float | None = None   # metric "ratio": the denominator's shift, fixed like ``shift``
    # "events" or "information" (monitor.look.plan): stored only when not the default, so
    # designs frozen before the choice existed compare equal.
    fraction: str = "events"
    # Names and unit as shown (display only; see Display).
    display: Display = Display()

    # ------------------------------------------------------------ derived

    @property
    def before_after(self) -> bool:
        """A start and a baseline: the comparison estimates the difference in differences."""
        return self.window is not None and self.window.before_after

    @property
    def planned_per_group(self) -> int:
        """Planned events per group (pairs for paired comparisons)."""
        return self.plan.planned_per_group

    @property
    def paired(self) -> bool:
        return self.pairing is not None

    @property
    def clustered(self) -> bool:
        return self.clustering is not None

    @property
    def key_column(self) -> str | None:
        """The source column that keys cells (pair or cluster column), if any."""
        if self.pairing is not None and self.pairing.pair_column:
            return self.pairing.pair_column
        if self.clustering is not None and self.clustering.cluster_column:
            return self.clustering.cluster_column
        return None

    @property
    def min_clusters(self) -> int | None:
        if self.clustering is not None:
            return self.clustering.min_clusters
        return self.window.min_clusters if self.before_after else None

    def with_shift(self, shift) -> Design:
        """The same design with the shift fixed (None leaves it unset)."""
        return replace(self, shift=None if shift is None else float(shift))

    def with_shift_den(self, shift_den) -> Design:
        """The same design with the ratio's denominator shift fixed (None leaves it unset)."""
        return replace(self, shift_den=None if shift_den is None else float(shift_den))

    # ------------------------------------------------------------ from the configuration

    @classmethod
    def from_config(cls, c) -> Design:
        """The design a :class:`monitor.config.ComparisonConfig` asks for (shift not yet fixed)."""
        paired = c.method == "paired"
        clustered = bool(c.cluster_by or c.cluster_column)
        return cls(
            method=c.method,
            metric=c.metric,
            groups=tuple(c.groups),
            alternative=c.alternative,
            alpha=c.alpha,
            spending=c.spending,
            null_difference=c.null_difference,
            plan=_plan_of(c),
            measure=Measure(
                table=c.table, group_column=c.group_column, value_column=c.value_column,
                time_column=c.time_column, schema=c.schema, time_format=c.time_format,
                timezone=c.timezone, filters=tuple(c.filters),
                valid_range=tuple(c.valid_range) if c.valid_range else None,
            ),
            sigmas=tuple(c.sigmas) if c.sigmas else None,
            pairing=Pairing(c.pair_by, c.pair_column, tuple(c.shift_starts), c.min_pairs) if paired else None,
            clustering=Clustering(c.cluster_by, c.cluster_column, c.min_clusters) if clustered else None,
            futility=c.futility,
            window=_window_of(c),
            ratio=RatioColumns(c.numerator_column, c.denominator_column) if c.metric == "ratio" else None,
            fraction=getattr(c, "fraction", "events"),
            display=Display(tuple(c.labels) if getattr(c, "labels", None) else None, getattr(c, "unit", "") or ""),
        )

    def with_display(self, display: Display) -> Design:
        """The same design shown with ``display`` (what a look stores when the names or unit change)."""
        return replace(self, display=display)

    # ------------------------------------------------------------ the stored form

    def to_stored(self) -> dict:
        """The JSON-ready dict kept in ``Comparison.design`` (the shape every store holds)."""
        m = self.measure
        return {
            "method": self.method,
            "metric": self.metric,
            "groups": list(self.groups),
            "alternative": self.alternative,
            "alpha": self.alpha,
            "spending": self.spending,
            "null_difference": self.null_difference,
            "plan": self.plan.to_stored(),
            "sigmas": list(self.sigmas) if self.sigmas else None,
            "pairing": None if self.pairing is None else self.pairing.to_stored(),
            "clustering": None if self.clustering is None else self.clustering.to_stored(),
            "futility": self.futility,
            "valid_range": list(m.valid_range) if m.valid_range else None,
            "filters": [[f[0], f[1], list(f[2]) if isinstance(f[2], tuple) else f[2]] for f in m.filters],
            "table": m.table,
            "schema": m.schema,
            "group_column": m.group_column,
            "value_column": m.value_column,
            "time_column": m.time_column,
            "time_format": m.time_format,
            "timezone": m.timezone,
            "min_clusters": self.min_clusters,
            "shift": self.shift,
            # Only a comparison with a start stores these: every other design keeps its shape.
            **({} if self.window is None else self.window.to_stored()),
            # Only ratio designs carry these, so every other stored design keeps its shape.
            **({"numerator_column": self.ratio.numerator_column,
                "denominator_column": self.ratio.denominator_column,
                "shift_den": self.shift_den} if self.ratio is not None else {}),
            **({"fraction": self.fraction} if self.fraction != "events" else {}),
            **({"display": self.display.to_stored()} if self.display.to_stored() else {}),
        }

    @classmethod
    def from_stored(cls, stored) -> Design:
        """The design kept with a comparison; InvalidArgumentError names what a dict lacks."""
        if not isinstance(stored, dict):
            raise InvalidArgumentError(f"a stored design must be a dict; got {type(stored).__name__}")
        missing = [k for k in _REQUIRED if stored.get(k) is None]
        if missing or not isinstance(stored["plan"], dict) or "planned_per_group" not in stored["plan"]:
            raise InvalidArgumentError(f"the stored design lacks {', '.join(missing) or 'plan.planned_per_group'}")
        pairing, clustering = stored.get("pairing"), stored.get("clustering")
        sigmas, shift = stored.get("sigmas"), stored.get("shift")
        return cls(
            method=stored["method"],
            metric=stored["metric"],
            groups=tuple(stored["groups"]),
            alternative=stored["alternative"],
            alpha=stored["alpha"],
            spending=stored["spending"],
            null_difference=stored.get("null_difference", 0.0),
            plan=Plan.from_stored(stored["plan"]),
            measure=Measure.from_stored(stored),
            sigmas=tuple(sigmas) if sigmas else None,
            pairing=Pairing.from_stored(pairing) if pairing else None,
            clustering=Clustering.from_stored(clustering, stored.get("min_clusters")) if clustering else None,
            futility=bool(stored.get("futility", False)),
            shift=None if shift is None else float(shift),
            window=Window.from_stored(stored),
            ratio=(RatioColumns(stored["numerator_column"], stored["denominator_column"])
                   if stored.get("denominator_column") else None),
            shift_den=None if stored.get("shift_den") is None else float(stored["shift_den"]),
            fraction=stored.get("fraction") or "events",
            display=Display.from_stored(stored.get("display")),
        )

    # ------------------------------------------------------------ change check

    def comparable(self) -> dict:
        """The stored form without what may change: the shift, the plan's derived figures and the display."""
        out = self.to_stored()
        del out["shift"]
        out.pop("shift_den", None)
        out.pop("display", None)
        out["plan"] = {k: v for k, v in out["plan"].items() if k != "figures"}
        return out

    @functools.cached_property
    def _comparable(self) -> dict:
        # Built once per object: every look compares the configured design (kept between looks)
        # with the stored one. Never handed out, so nothing can change it.
        return self.comparable()

    def differences(self, other: Design) -> list[str]:
        """Stored keys whose values differ between this design and ``other``, sorted."""
        a, b = self._comparable, other._comparable
        if a == b:
            return []
        return sorted(k for k in set(a) | set(b) if a.get(k) != b.get(k))

    def fingerprint(self) -> str:
        """The hash stored beside the design (of :meth:`comparable`)."""
        return design_hash(self._comparable)


_REQUIRED = ("method", "metric", "groups", "alternative", "alpha", "spending", "plan", "table",
             "group_column", "value_column", "time_column")


def _plan_of(c) -> Plan:
    """The plan: ``planned_per_group`` as given, or computed from the planning inputs.

    For paired comparisons the planned count is of pairs: the planning function's
    per-group figure for the sd of the differences is halved, since a paired difference
    carries the variance of two events.
    """
    if c.planned_per_group is not None:
        return Plan(int(c.planned_per_group))
    window = _window_of(c)
    if window is not None and window.before_after:
        if c.metric == "proportion":
            inputs = PlanInputs(power=c.power, looks=c.looks, p1=c.p1, p2=c.p2, day_sd=c.day_sd or 0.0,
                                events_per_day=c.events_per_day)
        else:
            inputs = PlanInputs(power=c.power, looks=c.looks, difference=c.difference, sd=c.sd,
                                day_sd=c.day_sd or 0.0, events_per_day=c.events_per_day)
        planned, figures = _planned_before_after(c.metric, c.alpha, c.alternative, c.spending, inputs,
                                                 window.baseline_days)
        return Plan(planned, inputs, figures)
    if c.metric == "proportion":
        inputs = PlanInputs(power=c.power, looks=c.looks, p1=c.p1, p2=c.p2)
    else:
        inputs = PlanInputs(power=c.power, looks=c.looks, difference=c.difference, sd=c.sd)
    max_per_group, figures = _planned(c.metric, c.alpha, c.alternative, c.spending, c.futility, inputs)
    planned = int(math.ceil(max_per_group / 2.0)) if c.method == "paired" else int(max_per_group)
    return Plan(planned, inputs, figures)


@functools.lru_cache(maxsize=256)
def _planned(metric, alpha, alternative, spending, futility, inputs: PlanInputs):
    # The boundary integration behind a plan takes milliseconds; a configuration (re)loaded
    # every few seconds asks for the same plans again, so they are kept by their inputs.
    # Imported here: the read side (status, history, the dashboard) reads stored designs and
    # never plans, so `gapwatch status` does not load scipy at start for it.
    # lazy: planning is needed only here.
    from .stats.planning import plan_mean, plan_proportion

    common = dict(alpha=alpha, power=inputs.power, alternative=alternative, spending=spending,
                  looks=inputs.looks, futility=futility)
    if metric == "proportion":
        plan = plan_proportion(inputs.p1, inputs.p2, **common)
    else:
        plan = plan_mean(inputs.difference, inputs.sd, **common)
    return plan.max_per_group, MappingProxyType(json_safe(plan.to_dict()))


def _window_of(c) -> Window | None:
    """The start and baseline a configuration asks for, as stored (ISO-8601 UTC text)."""
    window = c.window
    if window is None:
        return None
    if window["baseline_from"] is None:
        return Window(window["start"].isoformat())
    return Window(window["start"].isoformat(), window["baseline_from"].isoformat(),
                  window["baseline_to"].isoformat(), window["baseline_days"], c.events_per_day, c.min_clusters)


@functools.lru_cache(maxsize=256)
def _planned_before_after(metric, alpha, alternative, spending, inputs: PlanInputs, baseline_days):
    """Planned events per group after the start, from the days the change needs."""
    # lazy: planning is needed only here (the read side never plans).
    from .stats.before_after import plan_before_after

    common = dict(day_sd=inputs.day_sd or 0.0, events_per_day=inputs.events_per_day, baseline_days=baseline_days,
                  alpha=alpha, power=inputs.power, alternative=alternative, spending=spending, looks=inputs.looks)
    if metric == "proportion":
        # The change is p1 − p2; the event spread is taken at the rate nearer one half.
        rate = min((inputs.p1, inputs.p2), key=lambda q: abs(q - 0.5))
        plan = plan_before_after(inputs.p1 - inputs.p2, rate=rate, **common)
    else:
        plan = plan_before_after(inputs.difference, inputs.sd, **common)
    return int(plan.planned_per_group), MappingProxyType(json_safe(plan.to_dict()))
