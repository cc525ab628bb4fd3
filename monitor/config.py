"""The configuration file: TOML in, frozen dataclasses out, every problem reported at once.

The file is found from the argument, else ``$GAPWATCH_CONFIG``, else
``./gapwatch.toml``. Any string may use ``${NAME}`` to take a value from the
environment (secrets never live in the file). Relative SQLite paths in URLs are
resolved against the folder of the configuration file, so the service can be
started from anywhere.

Validation is one pass over the whole file: a :class:`~monitor.errors.ConfigError`
carries every problem, each naming the file, the comparison and the key, so a
lead fixes the file once rather than once per run.
"""

from __future__ import annotations

import functools
import hashlib
import json
import math
import os
import re
import tomllib
from dataclasses import dataclass, field
from datetime import time as clock_time
from pathlib import Path
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from .errors import ConfigError, InvalidArgumentError, UnknownComparisonError

__all__ = [
    "Config",
    "ComparisonConfig",
    "SourceConfig",
    "ChannelConfig",
    "ServiceConfig",
    "load_config",
    "parse_duration",
    "design_hash",
    "METHODS",
    "FILTER_OPS",
]

METHODS = ("welch", "pooled", "z", "paired", "proportions")
METRICS = ("mean", "proportion")
ALTERNATIVES = ("two-sided", "greater", "less")
TIME_FORMATS = ("auto", "timestamp", "iso", "epoch")
PAIR_BUCKETS = ("hour", "day", "week", "shift")
CLUSTER_BUCKETS = ("hour", "day", "week")
FILTER_OPS = ("=", "!=", "<", "<=", ">", ">=", "in", "not in")
CHANNEL_TYPES = ("log", "webhook", "email")

DEFAULT_STORE_URL = "sqlite:///gapwatch-store.sqlite"
DEFAULT_MIN_CLUSTERS = 10

# Table, schema and column names: plain identifiers only. The source quotes them
# anyway; refusing anything else here stops a typo (or an injection attempt)
# before it reaches a database.
_IDENTIFIER = re.compile(r"^[A-Za-z_][A-Za-z0-9_$]{0,127}$")
_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.\-]{0,199}$")
_ENV_REF = re.compile(r"\$\{([^}]*)\}")
_DURATION = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*(s|m|h|d)\s*$")
_DURATION_UNITS = {"s": 1, "m": 60, "h": 3600, "d": 86400}
_CLOCK = re.compile(r"^([01]\d|2[0-3]):([0-5]\d)$")

_TOP_KEYS = {"store", "sources", "service", "channels", "comparison"}
_STORE_KEYS = {"url"}
_SOURCE_KEYS = {"url"}
_SERVICE_DEFAULTS = {
    "lease_seconds": 120,
    "unreachable_alert_after": "15m",
    "retry_max_backoff": "10m",
    "alert_max_attempts": 8,
    "config_poll": "30s",
}
_CHANNEL_OPTIONS = {
    "log": ({"path", "level"}, set()),
    "webhook": ({"url", "secret", "timeout", "headers"}, {"url"}),
    "email": (
        {"host", "port", "sender", "recipients", "user", "password", "starttls", "ssl", "timeout"},
        {"host", "port", "sender", "recipients"},
    ),
}
_COMPARISON_KEYS = {
    "name", "source", "table", "schema", "group_column", "groups", "value_column", "time_column",
    "metric", "method", "alternative", "alpha", "spending", "planned_per_group", "difference",
    "sd", "p1", "p2", "power", "looks", "every", "sigmas", "pair_by", "pair_column",
    "shift_starts", "null_difference", "futility", "valid_range", "filters", "lateness",
    "arrival_column", "time_format", "timezone", "cluster_by", "cluster_column", "min_clusters",
    "notify", "description", "start", "baseline", "baseline_from", "baseline_to", "day_sd", "events_per_day",
}


def toml_value(value) -> str:
    """``value`` (bool, number, string, list or tuple of these) written as a TOML value.

    For the files gapwatch writes itself (the demo's configuration, test fixtures).
    """
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    raise TypeError(f"cannot write {value!r} as TOML")


def parse_duration(text) -> float:
    """Seconds in ``"30s"``, ``"10m"``, ``"1h"``, ``"1d"`` (a bare number is seconds).

    Raises ValueError naming the value when it is not a duration.
    """
    if isinstance(text, bool):
        raise ValueError(f"{text!r} is not a duration like 30s, 10m, 1h or 1d")
    if isinstance(text, (int, float)):
        if not math.isfinite(text) or text < 0:
            raise ValueError(f"{text!r} is not a non-negative number of seconds")
        return float(text)
    if not isinstance(text, str):
        raise ValueError(f"{text!r} is not a duration like 30s, 10m, 1h or 1d")
    match = _DURATION.match(text)
    if not match:
        raise ValueError(f"{text!r} is not a duration like 30s, 10m, 1h or 1d")
    return float(match.group(1)) * _DURATION_UNITS[match.group(2)]


def design_hash(design: dict) -> str:
    """A stable fingerprint of a design dict (sorted keys, JSON text, SHA-256)."""
    text = json.dumps(design, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode()).hexdigest()


# ---------------------------------------------------------------- dataclasses


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
    """One ``[[comparison]]`` table: every key of the file is an attribute."""

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
    shift_starts: tuple = ()
    null_difference: float = 0.0
    futility: bool = False
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

    # ------------------------------------------------------------ derived

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
        from datetime import timedelta

        from .vocabulary import parse_moment

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

    @functools.cached_property
    def plan(self) -> dict:
        """The plan: ``planned_per_group`` as given, or the planning inputs and figures.

        For paired comparisons the planned count is of pairs: the planning
        function's per-group figure for the sd of the differences is halved,
        since a paired difference carries the variance of two events.
        """
        if self.planned_per_group is not None:
            return {"planned_per_group": int(self.planned_per_group)}
        if self.before_after:
            return self._before_after_plan()
        from .stats.planning import plan_mean, plan_proportion

        common = dict(alpha=self.alpha, power=self.power, alternative=self.alternative,
                      spending=self.spending, looks=self.looks, futility=self.futility)
        if self.metric == "proportion":
            plan = plan_proportion(self.p1, self.p2, **common)
        else:
            plan = plan_mean(self.difference, self.sd, **common)
        figures = plan.to_dict()
        planned = int(plan.max_per_group)
        if self.paired:
            planned = int(math.ceil(plan.max_per_group / 2.0))
        return {"planned_per_group": planned, "inputs": _plan_inputs(self), "figures": figures}

    def _before_after_plan(self) -> dict:
        """Planned events per group after the start, from the days the change needs."""
        from .stats.before_after import plan_before_after

        common = dict(day_sd=self.day_sd or 0.0, events_per_day=self.events_per_day,
                      baseline_days=self.window["baseline_days"], alpha=self.alpha, power=self.power,
                      alternative=self.alternative, spending=self.spending, looks=self.looks,
                      futility=self.futility)
        if self.metric == "proportion":
            # The change is p1 − p2; the spread is taken at the rate nearer one half.
            plan = plan_before_after(self.p1 - self.p2, rate=min((self.p1, self.p2), key=lambda q: abs(q - 0.5)),
                                     **common)
        else:
            plan = plan_before_after(self.difference, self.sd, **common)
        inputs = _plan_inputs(self)
        inputs.update(day_sd=self.day_sd or 0.0, events_per_day=self.events_per_day)
        return {"planned_per_group": int(plan.planned_per_group), "inputs": inputs, "figures": plan.to_dict()}

    @property
    def planned(self) -> int:
        """Planned events per group (pairs for paired comparisons)."""
        return int(self.plan["planned_per_group"])

    def design(self) -> dict:
        """The statistical design frozen at the first look (JSON-friendly).

        It includes what is measured (table, columns, filters, range, groups) as
        well as how it is tested; schedule, notification, lateness, description
        and the source's address are settings, not design.
        """
        return {
            "method": self.method,
            "metric": self.metric,
            "groups": list(self.groups),
            "alternative": self.alternative,
            "alpha": self.alpha,
            "spending": self.spending,
            "null_difference": self.null_difference,
            "plan": self.plan,
            "sigmas": list(self.sigmas) if self.sigmas else None,
            "pairing": ({"pair_by": self.pair_by, "pair_column": self.pair_column,
                         "shift_starts": list(self.shift_starts)} if self.paired else None),
            "clustering": ({"cluster_by": self.cluster_by, "cluster_column": self.cluster_column}
                           if self.clustered else None),
            "futility": self.futility,
            "valid_range": list(self.valid_range) if self.valid_range else None,
            "filters": [list(f[:2]) + [list(f[2]) if isinstance(f[2], tuple) else f[2]]
                        for f in self.filters],
            "table": self.table,
            "schema": self.schema,
            "group_column": self.group_column,
            "value_column": self.value_column,
            "time_column": self.time_column,
            "time_format": self.time_format,
            "timezone": self.timezone,
            "min_clusters": self.min_clusters if (self.clustered or self.before_after) else None,
            **self._window_design(),
        }

    def _window_design(self) -> dict:
        """The start and baseline as frozen design entries (absent without a start, as before)."""
        window = self.window
        if window is None:
            return {}
        out = {"start": window["start"].isoformat()}
        if window["baseline_from"] is not None:
            out["before_after"] = {"baseline_from": window["baseline_from"].isoformat(),
                                   "baseline_to": window["baseline_to"].isoformat(),
                                   "baseline_days": window["baseline_days"],
                                   "events_per_day": self.events_per_day}
        return out

    def settings(self) -> dict:
        """Non-design settings, shown with the comparison but never frozen."""
        return {
            "source": self.source,
            "every": self.every,
            "lateness": self.lateness,
            "notify": list(self.notify),
            "description": self.description,
            "arrival_column": self.arrival_column,
        }

    def source_spec(self, shift: float = 0.0):
        """The :class:`monitor.source.reader.SourceSpec` for this comparison."""
        from .source.reader import SourceSpec

        return SourceSpec(
            table=self.table,
            group_column=self.group_column,
            groups=tuple(self.groups),
            value_column=self.value_column,
            time_column=self.time_column,
            metric=self.metric,
            shift=float(shift),
            schema=self.schema,
            time_format=self.time_format,
            key_column=self.key_column,
            arrival_column=self.arrival_column,
            filters=tuple(self.filters),
            valid_range=self.valid_range,
            start=None if self.window is None else self.window["start"],
        )

    def baseline_spec(self, shift: float = 0.0):
        """The source spec of the baseline: events from ``baseline_from`` up to (not at) ``baseline_to``."""
        from dataclasses import replace

        window = self.window
        return replace(self.source_spec(shift), start=window["baseline_from"], end=window["baseline_to"])

    @property
    def zone(self) -> ZoneInfo:
        return ZoneInfo(self.timezone)


def _has_baseline(v) -> bool:
    return any(k in v for k in ("baseline", "baseline_from", "baseline_to"))


def _moment_text(value):
    """A start or baseline end as written: text stays text, a TOML date-time becomes ISO text."""
    if value is None or isinstance(value, str):
        return value
    return value.isoformat() if hasattr(value, "isoformat") else None


def _plan_inputs(c: ComparisonConfig) -> dict:
    inputs = {"power": c.power, "looks": c.looks}
    if c.metric == "proportion":
        inputs.update(p1=c.p1, p2=c.p2)
    else:
        inputs.update(difference=c.difference, sd=c.sd)
    return inputs


@dataclass(frozen=True)
class Config:
    """The whole configuration file."""

    path: Path
    store_url: str
    sources: dict
    comparisons: tuple
    channels: dict
    service: ServiceConfig

    def comparison(self, name: str) -> ComparisonConfig:
        """The comparison of that name; UnknownComparisonError lists the known ones."""
        for c in self.comparisons:
            if c.name == name:
                return c
        known = ", ".join(c.name for c in self.comparisons) or "none"
        raise UnknownComparisonError(f"no comparison named {name!r} in {self.path.name} (known: {known})")

    def __repr__(self):
        return f"Config(path={str(self.path)!r}, comparisons={[c.name for c in self.comparisons]!r})"


# ---------------------------------------------------------------- loading


def _find_path(path, environ) -> Path:
    if path is not None:
        return Path(path)
    env_path = environ.get("GAPWATCH_CONFIG")
    if env_path:
        return Path(env_path)
    return Path("gapwatch.toml")


def load_config(path=None, environ=None) -> Config:
    """Read, substitute and validate the configuration file.

    Parameters
    ----------
    path : str or Path, optional
        The file; default ``$GAPWATCH_CONFIG``, else ``./gapwatch.toml``.
    environ : mapping, optional
        Where ``${NAME}`` values come from; default ``os.environ``.

    Raises
    ------
    ConfigError
        Listing every problem found (``.problems``), each naming the key.
    """
    environ = os.environ if environ is None else environ
    path = _find_path(path, environ)
    label = path.name
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise ConfigError([f"cannot read the configuration file ({exc.strerror or exc})"], label) from None
    try:
        data = tomllib.loads(raw.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ConfigError([f"not valid TOML: {exc}"], label) from None
    problems: list[str] = []
    data = _substitute(data, environ, problems, "")
    checker = _Checker(path.resolve().parent, problems)
    config = checker.config(data, path)
    if problems:
        raise ConfigError(problems, label)
    return config


def _substitute(value, environ, problems, where):
    if isinstance(value, str):
        def replace(match):
            name = match.group(1)
            if name not in environ:
                problems.append(f"{where or 'value'}: environment variable {name!r} is not set")
                return ""
            return environ[name]
        return _ENV_REF.sub(replace, value)
    if isinstance(value, dict):
        return {k: _substitute(v, environ, problems, f"{where}.{k}" if where else k)
                for k, v in value.items()}
    if isinstance(value, list):
        return [_substitute(v, environ, problems, f"{where}[{i}]") for i, v in enumerate(value)]
    return value


def _resolve_sqlite(url: str, folder: Path) -> str:
    """Make a relative SQLite file path absolute against the config's folder."""
    if not url.startswith("sqlite"):
        return url
    from sqlalchemy.engine import make_url

    parsed = make_url(url)
    database = parsed.database
    if not database or database == ":memory:" or database.startswith("file:"):
        return url
    if Path(database).is_absolute():
        return url
    return parsed.set(database=str((folder / database).resolve())).render_as_string(hide_password=False)


def _is_number(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


class _Checker:
    """One pass over the parsed file, collecting problems instead of raising."""

    def __init__(self, folder: Path, problems: list):
        self.folder = folder
        self.problems = problems

    def problem(self, where, message):
        self.problems.append(f"{where}: {message}")

    def unknown_keys(self, where, table, allowed):
        for key in table:
            if key not in allowed:
                hint = _closest(key, allowed)
                extra = f" (did you mean {hint!r}?)" if hint else ""
                self.problem(where, f"unknown key {key!r}{extra}")

    def table(self, data, key, where):
        value = data.get(key, {})
        if not isinstance(value, dict):
            self.problem(where, f"{key!r} must be a table; got {value!r}")
            return {}
        return value

    def url(self, where, value):
        if not isinstance(value, str) or not value.strip():
            self.problem(where, f"'url' must be a database URL; got {value!r}")
            return ""
        try:
            from sqlalchemy.engine import make_url

            make_url(value)
        except Exception:  # noqa: BLE001 - any parse failure is the same problem for the user
            self.problem(where, "'url' is not a database URL SQLAlchemy understands")
            return ""
        return _resolve_sqlite(value, self.folder)

    # ------------------------------------------------------------ sections

    def config(self, data, path) -> Config:
        self.unknown_keys("top level", data, _TOP_KEYS)
        store = self.table(data, "store", "[store]")
        self.unknown_keys("[store]", store, _STORE_KEYS)
        store_url = self.url("[store]", store.get("url", DEFAULT_STORE_URL))

        sources = {}
        for name, table in self.table(data, "sources", "[sources]").items():
            where = f"source {name!r}"
            if not isinstance(table, dict):
                self.problem(where, "must be a table with a 'url'")
                continue
            self.unknown_keys(where, table, _SOURCE_KEYS)
            if "url" not in table:
                self.problem(where, "'url' is required")
                continue
            sources[name] = SourceConfig(name, self.url(where, table["url"]))

        channels = {}
        for name, table in self.table(data, "channels", "[channels]").items():
            channel = self.channel(name, table)
            if channel is not None:
                channels[name] = channel

        service = self.service(self.table(data, "service", "[service]"))

        raw_comparisons = data.get("comparison", [])
        if not isinstance(raw_comparisons, list):
            self.problem("top level", "'comparison' must be an array of tables ([[comparison]])")
            raw_comparisons = []
        comparisons = []
        seen = set()
        for index, table in enumerate(raw_comparisons):
            c = self.comparison(index, table, sources, channels)
            if c is None:
                continue
            if c.name in seen:
                self.problem(f"comparison {c.name!r}", "'name' is used by another comparison")
                continue
            seen.add(c.name)
            comparisons.append(c)
        return Config(path=path, store_url=store_url, sources=sources, comparisons=tuple(comparisons),
                      channels=channels, service=service)

    def channel(self, name, table):
        where = f"channel {name!r}"
        if not isinstance(table, dict):
            self.problem(where, "must be a table with a 'type'")
            return None
        kind = table.get("type")
        if kind not in CHANNEL_TYPES:
            self.problem(where, f"'type' {kind!r} is not one of {', '.join(CHANNEL_TYPES)}")
            return None
        allowed, required = _CHANNEL_OPTIONS[kind]
        options = {k: v for k, v in table.items() if k != "type"}
        self.unknown_keys(where, options, allowed)
        for key in sorted(required - options.keys()):
            self.problem(where, f"'{key}' is required for a {kind} channel")
        if "timeout" in options:
            try:
                options["timeout"] = parse_duration(options["timeout"])
            except ValueError as exc:
                self.problem(where, f"'timeout': {exc}")
        if kind == "webhook" and "url" in options:
            url = options["url"]
            if not isinstance(url, str) or not re.match(r"^https?://", url):
                self.problem(where, f"'url' must be an http(s) URL; got {url!r}")
        if kind == "email":
            port = options.get("port")
            if "port" in options and (not isinstance(port, int) or isinstance(port, bool)
                                      or not 0 < port < 65536):
                self.problem(where, f"'port' must be an integer in 1..65535; got {port!r}")
            recipients = options.get("recipients")
            if "recipients" in options and (not isinstance(recipients, list) or not recipients
                                            or not all(isinstance(r, str) and "@" in r for r in recipients)):
                self.problem(where, f"'recipients' must be a non-empty list of addresses; got {recipients!r}")
            for key in ("starttls", "ssl"):
                if key in options and not isinstance(options[key], bool):
                    self.problem(where, f"'{key}' must be true or false; got {options[key]!r}")
        return ChannelConfig(name, kind, options)

    def service(self, table) -> ServiceConfig:
        where = "[service]"
        self.unknown_keys(where, table, set(_SERVICE_DEFAULTS))
        values = {**_SERVICE_DEFAULTS, **table}
        out = {}
        for key in ("lease_seconds", "alert_max_attempts"):
            v = values[key]
            if not isinstance(v, int) or isinstance(v, bool) or v < 1:
                self.problem(where, f"'{key}' must be a positive integer; got {v!r}")
                v = _SERVICE_DEFAULTS[key]
            out[key] = v
        for key in ("unreachable_alert_after", "retry_max_backoff", "config_poll"):
            try:
                out[key] = parse_duration(values[key])
            except ValueError as exc:
                self.problem(where, f"'{key}': {exc}")
                out[key] = parse_duration(_SERVICE_DEFAULTS[key])
        return ServiceConfig(**out)

    # ------------------------------------------------------------ comparison

    def comparison(self, index, table, sources, channels):
        if not isinstance(table, dict):
            self.problem(f"comparison #{index + 1}", "must be a table")
            return None
        name = table.get("name")
        if not isinstance(name, str) or not _NAME.match(name):
            self.problem(f"comparison #{index + 1}",
                         f"'name' must be letters, digits, '-', '_' or '.' (up to 200); got {name!r}")
            name = f"#{index + 1}"
        where = f"comparison {name!r}"
        p = lambda key, message: self.problem(where, f"'{key}' {message}")  # noqa: E731
        self.unknown_keys(where, table, _COMPARISON_KEYS)
        v = dict(table)

        for key in ("source", "table", "group_column", "value_column", "time_column", "groups"):
            if key not in v:
                p(key, "is required")
        source = v.get("source")
        if "source" in v and source not in sources:
            p("source", f"names no [sources] entry: {source!r} (known: {', '.join(sources) or 'none'})")

        for key in ("table", "schema", "group_column", "value_column", "time_column",
                    "arrival_column", "pair_column", "cluster_column"):
            if key in v and (not isinstance(v[key], str) or not _IDENTIFIER.match(v[key])):
                p(key, f"must be a plain identifier (letters, digits, '_'); got {v[key]!r}")

        groups = v.get("groups")
        if "groups" in v:
            if (not isinstance(groups, list) or len(groups) != 2
                    or not all(isinstance(g, (str, int)) and not isinstance(g, bool) for g in groups)):
                p("groups", f"must be two group values (text or integers); got {groups!r}")
                groups = None
            elif groups[0] == groups[1]:
                p("groups", f"must be two different values; got {groups!r}")
            elif type(groups[0]) is not type(groups[1]):
                p("groups", f"must both be text or both integers; got {groups!r}")

        metric = v.get("metric", "mean")
        if metric not in METRICS:
            p("metric", f"{metric!r} is not one of {', '.join(METRICS)}")
        method = v.get("method", "proportions" if metric == "proportion" else "welch")
        if method not in METHODS:
            self.problem(where, f"method {method!r} is not one of {', '.join(METHODS)}")
        elif metric in METRICS and (method == "proportions") != (metric == "proportion"):
            p("method", f"{method!r} does not fit metric {metric!r}: proportions goes with "
                        "metric 'proportion' and the other methods with 'mean'")

        alternative = v.get("alternative", "two-sided")
        if alternative not in ALTERNATIVES:
            p("alternative", f"{alternative!r} is not one of {', '.join(ALTERNATIVES)}")

        alpha = v.get("alpha", 0.05)
        if not _is_number(alpha) or not 0 < alpha < 0.5:
            p("alpha", f"must be a number in (0, 0.5); got {alpha!r}")

        spending = v.get("spending", "obrien-fleming")
        try:
            from .stats.spending import parse_spending

            spending = parse_spending(spending).spec
        except Exception as exc:  # noqa: BLE001 - the spending module's own message is the problem
            p("spending", f"{exc}")

        null_difference = v.get("null_difference", 0.0)
        if not _is_number(null_difference):
            p("null_difference", f"must be a number; got {null_difference!r}")
        elif method == "proportions" and not -1 < null_difference < 1:
            p("null_difference", f"must be in (-1, 1) for proportions; got {null_difference!r}")

        futility = v.get("futility", False)
        if not isinstance(futility, bool):
            p("futility", f"must be true or false; got {futility!r}")
        elif futility and alternative == "two-sided":
            p("futility", "needs a one-sided alternative ('greater' or 'less')")

        self.plan_keys(v, metric, method, alternative, p)

        sigmas = v.get("sigmas")
        if method == "z":
            if sigmas is None:
                p("sigmas", "is required for method 'z' (the two known standard deviations)")
            elif not (isinstance(sigmas, list) and len(sigmas) == 2
                      and all(_is_number(s) and s > 0 for s in sigmas)):
                p("sigmas", f"must be two positive numbers; got {sigmas!r}")
        elif sigmas is not None:
            p("sigmas", f"is only used by method 'z', not {method!r}")

        # Pairing
        pair_by, pair_column = v.get("pair_by"), v.get("pair_column")
        shift_starts = v.get("shift_starts", [])
        if method == "paired":
            if (pair_by is None) == (pair_column is None):
                p("pair_by", "method 'paired' needs exactly one of pair_by or pair_column")
            if pair_by is not None and pair_by not in PAIR_BUCKETS:
                p("pair_by", f"{pair_by!r} is not one of {', '.join(PAIR_BUCKETS)}")
            if pair_by == "shift":
                if not shift_starts:
                    p("shift_starts", "is required with pair_by = \"shift\" (e.g. [\"06:00\", \"14:00\", \"22:00\"])")
        else:
            for key in ("pair_by", "pair_column"):
                if v.get(key) is not None:
                    p(key, f"is only used by method 'paired', not {method!r}")
        if "shift_starts" in v:
            if pair_by != "shift":
                p("shift_starts", "is only used with pair_by = \"shift\"")
            if (not isinstance(shift_starts, list) or not shift_starts
                    or not all(isinstance(s, str) and _CLOCK.match(s) for s in shift_starts)):
                p("shift_starts", f"must be a list of local times \"HH:MM\"; got {shift_starts!r}")
                shift_starts = []
            elif len(set(shift_starts)) != len(shift_starts):
                p("shift_starts", f"has repeated times: {shift_starts!r}")

        # Clustering
        cluster_by, cluster_column = v.get("cluster_by"), v.get("cluster_column")
        if cluster_by is not None and cluster_column is not None:
            p("cluster_by", "give cluster_by or cluster_column, not both")
        if cluster_by is not None and cluster_by not in CLUSTER_BUCKETS:
            p("cluster_by", f"{cluster_by!r} is not one of {', '.join(CLUSTER_BUCKETS)}")
        if (cluster_by or cluster_column) and method in ("paired", "z"):
            p("cluster_by" if cluster_by else "cluster_column",
              f"clustering is not available with method {method!r} (use welch, pooled or proportions)")
        min_clusters = v.get("min_clusters", DEFAULT_MIN_CLUSTERS)
        if not isinstance(min_clusters, int) or isinstance(min_clusters, bool) or min_clusters < 2:
            p("min_clusters", f"must be an integer of at least 2; got {min_clusters!r}")
        elif "min_clusters" in v and not (cluster_by or cluster_column or _has_baseline(v)):
            p("min_clusters", "is only used with cluster_by or cluster_column (or a baseline)")

        # What is read
        valid_range = v.get("valid_range")
        if valid_range is not None:
            if (not isinstance(valid_range, list) or len(valid_range) != 2
                    or not all(_is_number(x) for x in valid_range)):
                p("valid_range", f"must be [low, high] numbers; got {valid_range!r}")
                valid_range = None
            elif valid_range[0] > valid_range[1]:
                p("valid_range", f"low must not exceed high; got {valid_range!r}")
        filters = self.filters(v.get("filters", []), p)

        time_format = v.get("time_format", "auto")
        if time_format not in TIME_FORMATS:
            p("time_format", f"{time_format!r} is not one of {', '.join(TIME_FORMATS)}")
        timezone_name = v.get("timezone", "UTC")
        try:
            if not isinstance(timezone_name, str) or not timezone_name:
                raise ValueError
            ZoneInfo(timezone_name)
        except (ZoneInfoNotFoundError, ValueError, OSError):
            p("timezone", f"{timezone_name!r} is not a known time zone (e.g. \"Europe/Lisbon\")")
            timezone_name = "UTC"

        self.window_keys(v, metric, method, cluster_by, cluster_column, timezone_name, p)
        every = v.get("every", "10m")
        self.schedule(every, timezone_name, p)
        lateness = v.get("lateness", "0s")
        try:
            parse_duration(lateness)
        except ValueError as exc:
            p("lateness", f"{exc}")

        notify = v.get("notify")
        if notify is None:
            notify = list(channels)
        elif not isinstance(notify, list) or not all(isinstance(n, str) for n in notify):
            p("notify", f"must be a list of channel names; got {notify!r}")
            notify = []
        else:
            for n in notify:
                if n not in channels:
                    p("notify", f"names no [channels] entry: {n!r} (known: {', '.join(channels) or 'none'})")
        description = v.get("description", "")
        if not isinstance(description, str):
            p("description", f"must be text; got {description!r}")

        try:
            built = ComparisonConfig(
                name=name,
                source=source if isinstance(source, str) else "",
                table=v.get("table", ""),
                group_column=v.get("group_column", ""),
                groups=tuple(groups) if isinstance(groups, list) else (),
                value_column=v.get("value_column", ""),
                time_column=v.get("time_column", ""),
                metric=metric,
                method=method,
                alternative=alternative,
                alpha=float(alpha) if _is_number(alpha) else 0.05,
                spending=spending if isinstance(spending, str) else "obrien-fleming",
                planned_per_group=v.get("planned_per_group"),
                difference=_float_or_none(v.get("difference")),
                sd=_float_or_none(v.get("sd")),
                p1=_float_or_none(v.get("p1")),
                p2=_float_or_none(v.get("p2")),
                power=_float_or_none(v.get("power")),
                looks=v.get("looks", 5),
                every=every,
                sigmas=tuple(float(s) for s in sigmas) if isinstance(sigmas, list) and all(_is_number(s) for s in sigmas) else None,
                pair_by=pair_by,
                pair_column=pair_column,
                shift_starts=tuple(sorted(shift_starts)) if isinstance(shift_starts, list) else (),
                null_difference=float(null_difference) if _is_number(null_difference) else 0.0,
                futility=futility is True,
                valid_range=tuple(float(x) for x in valid_range) if valid_range else None,
                filters=filters,
                lateness=lateness,
                arrival_column=v.get("arrival_column"),
                time_format=time_format,
                timezone=timezone_name,
                cluster_by=cluster_by,
                cluster_column=cluster_column,
                min_clusters=min_clusters if isinstance(min_clusters, int) else DEFAULT_MIN_CLUSTERS,
                notify=tuple(notify),
                description=description if isinstance(description, str) else "",
                schema=v.get("schema"),
                start=_moment_text(v.get("start")),
                baseline=v.get("baseline"),
                baseline_from=_moment_text(v.get("baseline_from")),
                baseline_to=_moment_text(v.get("baseline_to")),
                day_sd=_float_or_none(v.get("day_sd")),
                events_per_day=_float_or_none(v.get("events_per_day")),
            )
        except (TypeError, ValueError) as exc:  # pragma: no cover - problems above cover the causes
            self.problem(where, f"cannot be built: {exc}")
            return None
        if built.before_after and built.planned_per_group is None and not self.problems:
            try:
                built.plan  # a baseline too short for the planned change is a problem of the file
            except InvalidArgumentError as exc:
                p("baseline", str(exc))
        return built

    def window_keys(self, v, metric, method, cluster_by, cluster_column, timezone_name, p):
        """``start``, ``baseline`` or ``baseline_from``/``baseline_to``, and their planning inputs."""
        from datetime import timedelta

        from .vocabulary import parse_moment

        zone = ZoneInfo(timezone_name)
        start = None
        if "start" in v:
            try:
                start = parse_moment(v["start"], "start", zone)
            except ValueError as exc:
                p("start", str(exc).removeprefix("start "))
        has_length, has_range = "baseline" in v, ("baseline_from" in v or "baseline_to" in v)
        if (has_length or has_range) and "start" not in v:
            p("baseline" if has_length else "baseline_from",
              "needs a start (the moment the change went live); the baseline is the period before it")
        if has_length and has_range:
            p("baseline", "give baseline (a length before the start) or baseline_from + baseline_to, not both")
        begin = end = None
        if has_length:
            try:
                length = parse_duration(v["baseline"])
                if isinstance(v["baseline"], (int, float)) or length <= 0:
                    raise ValueError(f"{v['baseline']!r} is not a positive length like \"28d\"")
                if start is not None:
                    begin, end = start - timedelta(seconds=length), start
            except ValueError as exc:
                p("baseline", str(exc))
        elif has_range:
            for key in ("baseline_from", "baseline_to"):
                if key not in v:
                    p(key, "is required with the other end of the baseline")
            try:
                if "baseline_from" in v and "baseline_to" in v:
                    begin = parse_moment(v["baseline_from"], "baseline_from", zone)
                    end = parse_moment(v["baseline_to"], "baseline_to", zone)
            except ValueError as exc:
                p("baseline_from" if "baseline_from" in str(exc) else "baseline_to",
                  str(exc).split(" ", 1)[1])
            if begin is not None and end is not None and not begin < end:
                p("baseline_to", f"must be after baseline_from; got {v['baseline_from']!r} to {v['baseline_to']!r}")
            if end is not None and start is not None and end > start:
                p("baseline_to", f"must not be after the start {v['start']!r}; got {v['baseline_to']!r}")
        if has_length or has_range:
            if method not in ("welch", "pooled", "proportions"):
                p("method", f"{method!r} cannot be a before/after comparison: it compares means "
                            f"(welch, pooled) or rates (proportions) day by day")
            if cluster_column is not None:
                p("cluster_column", "a before/after comparison is clustered by calendar day; drop cluster_column")
            elif cluster_by not in (None, "day"):
                p("cluster_by", f"a before/after comparison is clustered by calendar day; got {cluster_by!r}")
            if v.get("futility") is True:
                p("futility", "is not available for before/after comparisons")
            planning = "planned_per_group" not in v
            for key in ("day_sd", "events_per_day"):
                if key in v and not planning:
                    p(key, "is a planning input; give it with difference + sd (p1 + p2) and power, "
                           "not with planned_per_group")
            if planning and "events_per_day" not in v:
                p("events_per_day", "is required to plan a before/after comparison (events per group per day)")
            if "events_per_day" in v and (not _is_number(v["events_per_day"]) or v["events_per_day"] <= 0):
                p("events_per_day", f"must be a positive number; got {v['events_per_day']!r}")
            if "day_sd" in v and (not _is_number(v["day_sd"]) or v["day_sd"] < 0):
                p("day_sd", f"must be a number of at least 0; got {v['day_sd']!r}")
        else:
            for key in ("day_sd", "events_per_day"):
                if key in v:
                    p(key, "plans a before/after comparison: give start and baseline too")

    def plan_keys(self, v, metric, method, alternative, p):
        planned = v.get("planned_per_group")
        planning_keys = [k for k in ("difference", "sd", "p1", "p2", "power", "looks") if k in v]
        if planned is not None:
            if not isinstance(planned, int) or isinstance(planned, bool) or planned < 2:
                p("planned_per_group", f"must be an integer of at least 2; got {planned!r}")
            if v.get("futility") is True:
                p("futility", "needs the planning inputs (difference + sd, or p1 + p2, and power) "
                              "instead of planned_per_group: the futility boundary is built from the "
                              "planned difference")
            if planning_keys:
                p("planned_per_group", f"give planned_per_group or the planning inputs "
                                       f"({', '.join(planning_keys)}), not both")
            return
        if not planning_keys:
            p("planned_per_group", "is required, or the planning inputs: difference + sd "
                                   "(p1 + p2 for proportions) and power")
            return
        if metric == "proportion":
            needed, foreign = ("p1", "p2"), ("difference", "sd")
        else:
            needed, foreign = ("difference", "sd"), ("p1", "p2")
        for key in needed:
            if key not in v:
                p(key, f"is required to plan a {metric} comparison without planned_per_group")
        for key in foreign:
            if key in v:
                p(key, f"is not a planning input for metric {metric!r}")
        if "power" not in v:
            p("power", "is required to plan without planned_per_group")
        power = v.get("power", 0.8)
        if not _is_number(power) or not 0 < power < 1:
            p("power", f"must be a number in (0, 1); got {power!r}")
        looks = v.get("looks", 5)
        if not isinstance(looks, int) or isinstance(looks, bool) or not 1 <= looks <= 50:
            p("looks", f"must be an integer in 1..50; got {looks!r}")
        if metric == "proportion":
            for key in ("p1", "p2"):
                if key in v and (not _is_number(v[key]) or not 0 < v[key] < 1):
                    p(key, f"must be a proportion in (0, 1); got {v[key]!r}")
            if _is_number(v.get("p1")) and v.get("p1") == v.get("p2"):
                p("p2", "must differ from p1 (the difference worth detecting)")
        else:
            difference, sd = v.get("difference"), v.get("sd")
            if "difference" in v and (not _is_number(difference) or difference == 0):
                p("difference", f"must be a non-zero number; got {difference!r}")
            elif _is_number(difference) and alternative == "greater" and difference < 0:
                p("difference", f"must be positive for alternative 'greater'; got {difference!r}")
            elif _is_number(difference) and alternative == "less" and difference > 0:
                p("difference", f"must be negative for alternative 'less'; got {difference!r}")
            if "sd" in v and (not _is_number(sd) or sd <= 0):
                p("sd", f"must be a positive number; got {sd!r}")

    def filters(self, filters, p):
        if not isinstance(filters, list):
            p("filters", f"must be a list of [column, op, value]; got {filters!r}")
            return ()
        out = []
        for i, f in enumerate(filters):
            if not isinstance(f, list) or len(f) != 3:
                p("filters", f"entry {i + 1} must be [column, op, value]; got {f!r}")
                continue
            column, op, value = f
            if not isinstance(column, str) or not _IDENTIFIER.match(column):
                p("filters", f"entry {i + 1}: column must be a plain identifier; got {column!r}")
                continue
            if op not in FILTER_OPS:
                p("filters", f"entry {i + 1}: operator {op!r} is not one of {', '.join(FILTER_OPS)}")
                continue
            scalar = lambda x: isinstance(x, (str, int, float, bool))  # noqa: E731
            if op in ("in", "not in"):
                if not isinstance(value, list) or not value or not all(scalar(x) for x in value):
                    p("filters", f"entry {i + 1}: '{op}' needs a non-empty list of values; got {value!r}")
                    continue
                value = tuple(value)
            elif not scalar(value):
                p("filters", f"entry {i + 1}: value must be text, a number or a boolean; got {value!r}")
                continue
            out.append((column, op, value))
        return tuple(out)

    def schedule(self, every, timezone_name, p):
        try:
            parse_duration(every)
            if isinstance(every, (int, float)) or parse_duration(every) <= 0:
                raise ValueError
            return
        except ValueError:
            pass
        if not isinstance(every, str) or _DURATION.match(every):
            p("every", f"must be an interval like 30s, 10m, 1h, 1d or a cron expression; got {every!r}")
            return
        try:
            from apscheduler.triggers.cron import CronTrigger

            CronTrigger.from_crontab(every, timezone=ZoneInfo(timezone_name))
        except (ValueError, TypeError) as exc:
            p("every", f"{every!r} is neither an interval (30s, 10m, 1h, 1d) nor a cron expression ({exc})")


def _float_or_none(value):
    return float(value) if _is_number(value) else None


def _closest(key, allowed):
    import difflib

    match = difflib.get_close_matches(key, sorted(allowed), n=1, cutoff=0.75)
    return match[0] if match else None


def parse_clock(text: str) -> clock_time:
    """``"06:00"`` → ``datetime.time(6, 0)``."""
    hours, minutes = text.split(":")
    return clock_time(int(hours), int(minutes))
