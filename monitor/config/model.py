"""What a valid configuration file holds: frozen dataclasses, one per section.

These are the objects the rest of gapwatch reads. They are built only from a file that
passed every check in :mod:`monitor.config.checks`; the statistical design of a comparison
is derived from its :class:`ComparisonConfig` by :meth:`monitor.design.Design.from_config`.
"""

from __future__ import annotations

import functools

from dataclasses import dataclass, field
from datetime import timedelta
from pathlib import Path
from zoneinfo import ZoneInfo

from ..calendar import schedule_places
from ..errors import UnknownComparisonError
from ..vocabulary import parse_duration, parse_moment

__all__ = [
    "Config",
    "ComparisonConfig",
    "SourceConfig",
    "ChannelConfig",
    "ServiceConfig",
    "METHODS",
    "METRICS",
    "ALTERNATIVES",
    "TIME_FORMATS",
    "PAIR_BUCKETS",
    "CLUSTER_BUCKETS",
    "FILTER_OPS",
    "CHANNEL_TYPES",
    "DEFAULT_STORE_URL",
    "DEFAULT_MIN_CLUSTERS",
    "DEFAULT_MIN_PAIRS",
    "MIN_CLUSTERS_FLOOR",
    "MIN_PAIRS_FLOOR",
]

METHODS = ("welch", "pooled", "z", "paired", "proportions")
METRICS = ("mean", "proportion", "ratio")
ALTERNATIVES = ("two-sided", "greater", "less")
TIME_FORMATS = ("auto", "timestamp", "iso", "epoch")
PAIR_BUCKETS = ("hour", "day", "week", "shift")
CLUSTER_BUCKETS = ("hour", "day", "week")
FILTER_OPS = ("=", "!=", "<", "<=", ">", ">=", "in", "not in")
CHANNEL_TYPES = ("log", "webhook", "email")

DEFAULT_STORE_URL = "sqlite:///gapwatch-store.sqlite"
DEFAULT_MIN_CLUSTERS = 10
# Below four clusters a cluster-robust t has at most two degrees of freedom, and clusters
# that belong to one group need at least three per group (see stats.clustered).
MIN_CLUSTERS_FLOOR = 4
# Pairs a paired comparison needs before it decides: below five the t has three df or fewer
# and its interval spans ±3.2 standard errors or more, which says little even when the exact
# sequential t boundary holds the error rate.
DEFAULT_MIN_PAIRS = 5
# A paired t on one degree of freedom (two pairs) has an interval of ±12.7 standard errors.
MIN_PAIRS_FLOOR = 3


@dataclass(frozen=True)
class SourceConfig:
    """A source database (read only); ``url`` may carry a password from the environment."""

    name: str
    url: str

    def __repr__(self):  # the URL may hold a password
        return f"SourceConfig(name={self.name!r})"


@dataclass(frozen=True)
class ChannelConfig:
    """An alert channel: ``type`` is log, webhook or email; ``options`` as written.

    Durations in options (``timeout``) are converted to seconds (float).
    """

    name: str
    type: str
    options: dict = field(default_factory=dict)

    def __repr__(self):  # options may hold secrets
        return f"ChannelConfig(name={self.name!r}, type={self.type!r})"


@dataclass(frozen=True)
class ServiceConfig:
    """Settings of ``gapwatch run``; durations in seconds."""

    lease_seconds: int = 120
    unreachable_alert_after: float = 900.0
    retry_max_backoff: float = 600.0
    alert_max_attempts: int = 8
    config_poll: float = 30.0


@dataclass(frozen=True)
class ComparisonConfig:
    """One ``[[comparison]]`` table: every key of the file is an attribute.

    The planning inputs (``difference``, ``sd``, ``p1``, ``p2``, ``power``, ``looks``) are
    kept as written; the plan they give is :attr:`monitor.design.Design.plan`.
    """

    name: str
    source: str
    table: str
    group_column: str
    groups: tuple
    value_column: str
    time_column: str
    metric: str = "mean"
    method: str = "welch"
    alternative: str = "two-sided"
    alpha: float = 0.05
    spending: str = "obrien-fleming"
    planned_per_group: int | None = None
    difference: float | None = None
    sd: float | None = None
    p1: float | None = None
    p2: float | None = None
    power: float | None = None
    looks: int = 5
    every: str = "10m"
    sigmas: tuple | None = None
    pair_by: str | None = None
    pair_column: str | None = None
    min_pairs: int = DEFAULT_MIN_PAIRS
    shift_starts: tuple = ()
    null_difference: float = 0.0
    futility: bool = False
    fraction: str = "events"
    valid_range: tuple | None = None
    filters: tuple = ()
    lateness: str = "0s"
    arrival_column: str | None = None
    time_format: str = "auto"
    timezone: str = "UTC"
    cluster_by: str | None = None
    cluster_column: str | None = None
    min_clusters: int = DEFAULT_MIN_CLUSTERS
    notify: tuple = ()
    description: str = ""
    schema: str | None = None
    start: str | None = None
    baseline: str | None = None
    baseline_from: str | None = None
    baseline_to: str | None = None
    day_sd: float | None = None
    events_per_day: float | None = None
    # metric "ratio": value_column holds the numerator column; the denominator is read beside it.
    numerator_column: str | None = None
    denominator_column: str | None = None
    expected_share: float | None = None     # the volume check's share of group 1 (None: learned)
    # Display only (monitor.design.Display): a name per group, in group order, and the values' unit.
    labels: tuple | None = None
    unit: str = ""

    @property
    def schedule(self):
        """Interval in seconds (float) or a cron expression (str)."""
        try:
            return parse_duration(self.every)
        except ValueError:
            return self.every

    @property
    def lateness_seconds(self) -> float:
        return parse_duration(self.lateness)

    @property
    def paired(self) -> bool:
        return self.method == "paired"

    @property
    def clustered(self) -> bool:
        return bool(self.cluster_by or self.cluster_column)

    @property
    def before_after(self) -> bool:
        """A start and a baseline before it: the comparison estimates the difference in differences."""
        return self.start is not None and (self.baseline is not None or self.baseline_from is not None)

    @functools.cached_property
    def window(self) -> dict | None:
        """The start and the baseline as aware UTC datetimes (None without a start).

        ``{"start", "baseline_from", "baseline_to", "baseline_days"}``; the baseline entries
        are None for a comparison with a start and no baseline.
        """
        if self.start is None:
            return None
        start = parse_moment(self.start, "start", self.zone)
        begin = end = None
        if self.baseline is not None:
            end = start
            begin = start - timedelta(seconds=parse_duration(self.baseline))
        elif self.baseline_from is not None:
            begin = parse_moment(self.baseline_from, "baseline_from", self.zone)
            end = parse_moment(self.baseline_to, "baseline_to", self.zone)
        days = None if begin is None else (end - begin).total_seconds() / 86400.0
        return {"start": start, "baseline_from": begin, "baseline_to": end, "baseline_days": days}

    @property
    def key_column(self) -> str | None:
        """The source column that keys cells (pair or cluster column), if any."""
        return self.pair_column or self.cluster_column

    @property
    def zone(self) -> ZoneInfo:
        return ZoneInfo(self.timezone)

    def settings(self) -> dict:
        """Non-design settings, shown with the comparison but never frozen."""
        return {
            "source": self.source,
            "every": self.every,
            "lateness": self.lateness,
            "notify": list(self.notify),
            "description": self.description,
            "arrival_column": self.arrival_column,
            "expected_share": self.expected_share,
        }


@dataclass(frozen=True)
class Config:
    """The whole configuration file."""

    path: Path
    store_url: str
    sources: dict
    comparisons: tuple
    channels: dict
    service: ServiceConfig
    # The dashboard's address ([alerts] dashboard_url): alerts link to the comparison's page.
    dashboard_url: str | None = None

    @functools.cached_property
    def places(self) -> dict:
        """Each interval comparison's place on its schedule's grid, seconds (``calendar.schedule_places``)."""
        return schedule_places({c.name: c.schedule for c in self.comparisons})

    def comparison(self, name: str) -> ComparisonConfig:
        """The comparison of that name; UnknownComparisonError lists the known ones."""
        for c in self.comparisons:
            if c.name == name:
                return c
        known = ", ".join(c.name for c in self.comparisons) or "none"
        raise UnknownComparisonError(f"no comparison named {name!r} in {self.path.name} (known: {known})")

    def __repr__(self):
        return f"Config(path={str(self.path)!r}, comparisons={[c.name for c in self.comparisons]!r})"
