"""Read-only aggregate queries against an operational (source) database.

The monitor never pulls raw rows to decide. For every look it asks the
database, with one SQLAlchemy Core statement, for per (group, 15-minute UTC
slot[, key]) counts and shifted sums ``Σ(x − c)`` and ``Σ(x − c)²`` of the
valid rows, and for per-reason counts of the bad ones. Only rows that are new
since the previous look are read: rows whose event time lies in
``(previous cutoff, cutoff]`` plus late rows (event time at or before the
previous cutoff, arrival value above the previous arrival watermark).

Every predicate is a plain comparison on the raw time or arrival column with a
bound value in the column's own type or stored format, so the database can use
its index; slot and epoch expressions appear in the SELECT list only.

Requirements on the source table
--------------------------------
* Time column: a SQL timestamp (PostgreSQL ``timestamp`` is read as UTC,
  ``timestamptz`` is exact), a date, epoch seconds (integer or real), or
  ISO-8601 text. ISO text is compared as text (that is what keeps the index
  usable), so **every row must share one format and one UTC offset** — the
  format is detected from the earliest row (e.g. ``2024-05-01 08:30:00``,
  ``2024-05-01T08:30:00.123Z``, ``2024-05-01T08:30:00+02:00``) and cutoffs are
  written in the same format. Text that is not a date-time is counted as
  ``null_time`` when it sorts inside a read range; text sorting after every
  date (a word, say) never falls inside one and is not seen at all.
* Arrival column (optional, e.g. an auto-increment id or an ``inserted_at``
  column): increases with insertion; used to find late events. On SQLite the
  implicit rowid serves when no arrival column is configured (a ``VACUUM`` may
  renumber the rowids of tables without an ``INTEGER PRIMARY KEY``). Elsewhere,
  without one, events arriving after their slot was read are missed. The values
  should follow commit order: with several concurrent writers a transaction
  that commits after a larger id was already read is missed unless its events
  are younger than the comparison's lateness allowance.
* Values: any numeric type (PostgreSQL ``double precision``, ``real``,
  ``numeric``, integers, ``boolean`` for rates); in SQLite also numeric text.
  SQLite stores a NaN as NULL, so there it is counted as ``null_value``.

Exclusion reasons (each bad row is counted once, under the first that applies,
in this order): ``null_time`` (NULL or unreadable time), ``unknown_group``
(group value not one of the two configured), ``null_value``, ``non_numeric``
(text that is not a number, or a blob), ``not_finite`` (NaN, ±infinity, also
as text), ``not_binary`` (proportion metric, value not 0 or 1),
``out_of_range`` (outside the inclusive ``valid_range``). In SQLite, numeric
text counts as a number when, once trimmed, it is a JSON number (``12``,
``-3.5``, ``1e3``); other text is ``non_numeric``.
"""

from __future__ import annotations

import math
import re
import sqlite3
import sys
import threading
from dataclasses import dataclass, field
from datetime import date, datetime, timedelta, timezone
from decimal import Decimal

import sqlalchemy as sa
from sqlalchemy import exc as sa_exc

from ..errors import InvalidArgumentError, SourceSchemaError, SourceUnavailableError

__all__ = [
    "SLOT_SECONDS",
    "EXCLUSION_REASONS",
    "FILTER_OPERATORS",
    "SourceSpec",
    "Watermark",
    "SlotCell",
    "Batch",
    "Source",
]

SLOT_SECONDS = 900

EXCLUSION_REASONS = (
    "null_time",
    "unknown_group",
    "null_value",
    "non_numeric",
    "not_finite",
    "not_binary",
    "out_of_range",
    "before_start",
)

FILTER_OPERATORS = ("=", "!=", "<", "<=", ">", ">=", "in", "not in")

_TIME_FORMATS = ("auto", "timestamp", "iso", "epoch")
_METRICS = ("mean", "proportion")
_FLOAT_MAX = sys.float_info.max
# Spellings SQLite keeps as text but that name a non-finite number.
_NON_FINITE_TEXT = ("nan", "+nan", "-nan", "inf", "+inf", "-inf", "infinity", "+infinity", "-infinity")
_ISO_PATTERN = re.compile(
    r"^(?P<date>\d{4}-\d{2}-\d{2})"
    r"(?:(?P<sep>[T ])(?P<hm>\d{2}:\d{2})(?P<sec>:\d{2}(?P<frac>\.\d+)?)?)?"
    r"(?P<zone>Z|[+-]\d{2}:\d{2})?$"
)


# --------------------------------------------------------------------------- contract objects


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

    def __post_init__(self):
        for name in ("table", "group_column", "value_column", "time_column"):
            value = getattr(self, name)
            if not isinstance(value, str) or not value:
                raise InvalidArgumentError(f"{name} must be a non-empty string, got {value!r}")
        if len(tuple(self.groups)) != 2:
            raise InvalidArgumentError(f"groups must hold exactly two values, got {self.groups!r}")
        object.__setattr__(self, "groups", tuple(self.groups))
        if tuple(self.groups)[0] == tuple(self.groups)[1]:
            raise InvalidArgumentError(f"groups must be two different values, got {self.groups!r}")
        if self.metric not in _METRICS:
            raise InvalidArgumentError(f"metric must be one of {_METRICS}, got {self.metric!r}")
        if self.time_format not in _TIME_FORMATS:
            raise InvalidArgumentError(
                f"time_format must be one of {_TIME_FORMATS}, got {self.time_format!r}"
            )
        if not isinstance(self.shift, (int, float)) or not math.isfinite(self.shift):
            raise InvalidArgumentError(f"shift must be a finite number, got {self.shift!r}")
        filters = []
        for item in self.filters:
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
            filters.append((column, op, value))
        object.__setattr__(self, "filters", tuple(filters))
        if self.valid_range is not None:
            bounds = tuple(self.valid_range)
            if len(bounds) != 2:
                raise InvalidArgumentError(f"valid_range must be (low, high), got {self.valid_range!r}")
            for b in bounds:
                if b is not None and (not isinstance(b, (int, float)) or math.isnan(b)):
                    raise InvalidArgumentError(f"valid_range bounds must be numbers or None, got {self.valid_range!r}")
            if bounds[0] is not None and bounds[1] is not None and bounds[0] > bounds[1]:
                raise InvalidArgumentError(f"valid_range low must not exceed high, got {self.valid_range!r}")
            object.__setattr__(self, "valid_range", bounds)
        for name in ("start", "end"):
            moment = getattr(self, name)
            if moment is not None:
                object.__setattr__(self, name, _as_utc(moment, name))
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
        )


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
        return cls(cutoff=_as_utc(cutoff, "cutoff"), arrival=d.get("arrival"))


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


@dataclass(frozen=True)
class Batch:
    """What one incremental read found."""

    cells: tuple
    excluded: dict
    new_events: int
    late_events: int
    watermark: Watermark


# --------------------------------------------------------------------------- helpers


def _as_utc(moment, name: str) -> datetime:
    if not isinstance(moment, datetime):
        raise InvalidArgumentError(f"{name} must be a datetime, got {moment!r}")
    if moment.tzinfo is None:
        # Naive moments are taken as UTC, the convention of the whole project.
        return moment.replace(tzinfo=timezone.utc)
    return moment.astimezone(timezone.utc)


@dataclass(frozen=True)
class _IsoFormat:
    """The text layout of an ISO-8601 time column, detected from one stored value."""

    sep: str | None  # None: date only
    seconds: bool
    frac_digits: int
    zone: str  # "", "Z" or "+HH:MM"

    @classmethod
    def detect(cls, text: str) -> "_IsoFormat | None":
        m = _ISO_PATTERN.match(text.strip())
        if not m:
            return None
        frac = m.group("frac")
        return cls(
            sep=m.group("sep"),
            seconds=m.group("sec") is not None,
            frac_digits=len(frac) - 1 if frac else 0,
            zone=m.group("zone") or "",
        )

    @property
    def offset(self) -> timedelta:
        if self.zone in ("", "Z"):
            return timedelta(0)
        sign = -1 if self.zone[0] == "-" else 1
        return sign * timedelta(hours=int(self.zone[1:3]), minutes=int(self.zone[4:6]))

    def format(self, moment: datetime) -> str:
        """Write ``moment`` (aware) in this layout, truncating what the layout cannot hold.

        Truncation is monotone, so consecutive ``(previous, cutoff]`` ranges still
        partition the rows exactly.
        """
        local = moment.astimezone(timezone(self.offset)).replace(tzinfo=None)
        text = local.strftime("%Y-%m-%d")
        if self.sep is None:
            return text
        text += self.sep + local.strftime("%H:%M")
        if self.seconds:
            text += local.strftime(":%S")
            if self.frac_digits:
                micro = f"{local.microsecond:06d}"
                text += "." + (micro + "0" * self.frac_digits)[: self.frac_digits]
        return text + self.zone


@dataclass(frozen=True)
class _TimeKind:
    """How the time column is stored: decides the bound cutoff and the epoch expression."""

    kind: str  # "timestamp" | "date" | "epoch" | "iso"
    timezone_aware: bool = False
    integer: bool = False
    decimal: bool = False
    iso: _IsoFormat | None = None


@dataclass
class _Columns:
    table: sa.Table  # reflected (types used to coerce bound values)
    query_table: sa.TableClause  # untyped, so values come back as the driver stores them
    has_rowid: bool


def _literal(value):
    """A bound value; integers bind as BIGINT so large ids and epochs survive a typed bind cast."""
    if isinstance(value, int) and not isinstance(value, bool):
        return sa.literal(value, sa.BigInteger())
    return sa.literal(value)


def _literals(values):
    """Bound values rendered one by one: an "expanding" IN list would be re-rendered on every execution."""
    return [_literal(v) for v in values]


def _bind_type(value):
    """The SQL type of a bound cutoff or arrival value (decides the driver's bind cast)."""
    if isinstance(value, bool):
        return sa.Boolean()
    if isinstance(value, int):
        return sa.BigInteger()
    if isinstance(value, float):
        return sa.Float()
    if isinstance(value, Decimal):
        return sa.Numeric()
    if isinstance(value, datetime):
        return sa.DateTime(timezone=value.tzinfo is not None)
    if isinstance(value, date):
        return sa.Date()
    return sa.String()


def _is_numeric_type(t) -> bool:
    return isinstance(t, (sa.Integer, sa.Numeric, sa.Float)) and not isinstance(t, sa.Boolean)


class Source:
    """A read-only connection to one operational database.

    Parameters
    ----------
    url : str
        SQLAlchemy URL (``sqlite:///ops.sqlite``, ``postgresql+psycopg://…``).
    name : str
        The source's name in the configuration; used in error messages.

    SQLite files are opened with ``mode=ro`` (the file is never created or
    changed); PostgreSQL sessions start with ``default_transaction_read_only``.
    """

    def __init__(self, url: str, *, name: str = "source"):
        try:
            self._url = sa.engine.make_url(url)
        except Exception as error:  # noqa: BLE001 - bad URL text, report without echoing secrets
            raise InvalidArgumentError(f"source {name!r}: url is not a valid SQLAlchemy URL ({type(error).__name__})") from None
        self.name = name
        self._safe_url = self._url.render_as_string(hide_password=True)
        self._lock = threading.Lock()
        self._tables: dict = {}
        self._iso_formats: dict = {}
        self._kinds: dict = {}
        self._statements: dict = {}
        self.engine = self._make_engine()
        self.dialect = self.engine.dialect.name

    # ------------------------------------------------------------------ engine

    def _make_engine(self) -> sa.Engine:
        backend = self._url.get_backend_name()
        if backend == "sqlite":
            database = self._url.database
            if not database or database == ":memory:" or database.startswith("file:"):
                raise InvalidArgumentError(
                    f"source {self.name!r}: url must name a SQLite file, got {self._safe_url!r}"
                )
            from pathlib import Path
            from urllib.parse import quote

            path = Path(database).expanduser().absolute()
            uri = f"file:{quote(str(path))}?mode=ro"

            def creator():
                conn = sqlite3.connect(uri, uri=True, check_same_thread=False)
                # mode=ro already refuses writes; query_only is a second lock on the door.
                conn.execute("PRAGMA query_only = ON")
                return conn

            # QueuePool, named: for a creator-built "sqlite://" engine SQLAlchemy would pick its
            # SingletonThreadPool, which closes connections other threads are still using once more
            # than five threads share it, and on dispose() — a crash inside libsqlite3.
            return sa.create_engine("sqlite://", creator=creator, poolclass=sa.pool.QueuePool,
                                    pool_pre_ping=True)
        connect_args = {}
        if backend == "postgresql" and self._url.get_driver_name() in ("psycopg", "psycopg2"):
            connect_args["options"] = "-c default_transaction_read_only=on"
        engine = sa.create_engine(self._url, pool_pre_ping=True, connect_args=connect_args)
        if backend in ("mysql", "mariadb"):

            @sa.event.listens_for(engine, "connect")
            def _read_only(dbapi_connection, record):  # pragma: no cover - no MySQL in the tests
                cursor = dbapi_connection.cursor()
                cursor.execute("SET SESSION TRANSACTION READ ONLY")
                cursor.close()

        return engine

    def dispose(self):
        """Close every pooled connection."""
        self.engine.dispose()

    def _unavailable(self, spec, error) -> SourceUnavailableError:
        detail = str(getattr(error, "orig", None) or error).strip().splitlines()
        detail = detail[0] if detail else type(error).__name__
        password = self._url.password
        if password:
            detail = detail.replace(str(password), "***")
        table = f" table {spec.table!r}" if spec is not None else ""
        return SourceUnavailableError(
            f"source {self.name!r} ({self._safe_url}){table}: {type(error).__name__}: {detail}"
        )

    # ------------------------------------------------------------------ reflection

    def _columns(self, conn, spec, *, refresh=False) -> _Columns:
        key = (spec.schema, spec.table)
        with self._lock:
            if refresh:
                # The table may have changed: forget everything learnt from it.
                self._tables.pop(key, None)
                self._kinds.clear()
                self._iso_formats.clear()
                self._statements.clear()
            cached = self._tables.get(key)
        if cached is not None:
            return cached
        try:
            table = sa.Table(spec.table, sa.MetaData(), autoload_with=conn, schema=spec.schema)
        except sa_exc.NoSuchTableError:
            where = f" in schema {spec.schema!r}" if spec.schema else ""
            raise SourceSchemaError(
                f"source {self.name!r}: table {spec.table!r}{where} not found"
            ) from None
        has_rowid = False
        if self.dialect == "sqlite":
            probe = sa.select(sa.literal_column("rowid")).select_from(sa.table(spec.table, schema=spec.schema)).limit(0)
            try:
                conn.execute(probe)
                has_rowid = "rowid" not in table.c
            except sa_exc.DBAPIError:
                has_rowid = False
        query_table = sa.table(spec.table, *(sa.column(c.name) for c in table.columns), schema=spec.schema)
        found = _Columns(table=table, query_table=query_table, has_rowid=has_rowid)
        with self._lock:
            self._tables[key] = found
        return found

    def _used_columns(self, spec):
        used = [
            ("group_column", spec.group_column),
            ("value_column", spec.value_column),
            ("time_column", spec.time_column),
        ]
        if spec.key_column:
            used.append(("key_column", spec.key_column))
        if spec.arrival_column:
            used.append(("arrival_column", spec.arrival_column))
        for column, _op, _value in spec.filters:
            used.append(("filters", column))
        return used

    def _resolve(self, conn, spec) -> _Columns:
        cols = self._columns(conn, spec)
        missing = [(role, c) for role, c in self._used_columns(spec) if c not in cols.table.c]
        if missing:
            cols = self._columns(conn, spec, refresh=True)
            missing = [(role, c) for role, c in self._used_columns(spec) if c not in cols.table.c]
        if missing:
            names = ", ".join(f"{role} {c!r}" for role, c in missing)
            raise SourceSchemaError(f"source {self.name!r}: table {spec.table!r} has no column {names}")
        if self.dialect != "sqlite":
            vtype = cols.table.c[spec.value_column].type
            if not (_is_numeric_type(vtype) or isinstance(vtype, sa.Boolean)):
                raise SourceSchemaError(
                    f"source {self.name!r}: table {spec.table!r} value_column {spec.value_column!r} "
                    f"has type {vtype}, not a numeric type"
                )
        return cols

    def _time_kind(self, conn, spec, cols: _Columns) -> _TimeKind:
        key = (spec.schema, spec.table, spec.time_column, spec.time_format)
        with self._lock:
            known = self._kinds.get(key)
        if known is not None:
            return known
        kind, settled = self._detect_time_kind(conn, spec, cols)
        if settled:
            with self._lock:
                self._kinds[key] = kind
        return kind

    def _detect_time_kind(self, conn, spec, cols: _Columns):
        """(kind, settled): settled is False while an empty SQLite table leaves the layout open."""
        column = cols.table.c[spec.time_column]
        ctype = column.type
        wanted = spec.time_format
        if self.dialect == "sqlite":
            # SQLite keeps whatever was inserted, so look at a stored value, not the declared type.
            sample_type, sample = self._sample_time(conn, spec, cols)
            if wanted == "auto":
                if sample_type in ("integer", "real"):
                    wanted = "epoch"
                elif sample_type == "text":
                    wanted = "iso"
                elif sample_type is None:
                    wanted = "epoch" if _is_numeric_type(ctype) else "iso"
                else:
                    raise SourceSchemaError(
                        f"source {self.name!r}: table {spec.table!r} time_column {spec.time_column!r} "
                        f"holds {sample_type} values; need ISO-8601 text or epoch seconds"
                    )
            elif wanted == "timestamp":
                wanted = "iso"
            settled = sample is not None
            if wanted == "epoch":
                return _TimeKind("epoch", integer=sample_type == "integer"), settled
            return _TimeKind("iso", iso=self._iso_format(spec, sample)), settled
        if wanted == "auto":
            if isinstance(ctype, sa.DateTime):
                wanted = "timestamp"
            elif isinstance(ctype, sa.Date):
                return _TimeKind("date"), True
            elif _is_numeric_type(ctype):
                wanted = "epoch"
            elif isinstance(ctype, sa.String):
                wanted = "iso"
            else:
                raise SourceSchemaError(
                    f"source {self.name!r}: table {spec.table!r} time_column {spec.time_column!r} "
                    f"has type {ctype}; need a timestamp, a date, epoch seconds or ISO-8601 text"
                )
        if wanted == "timestamp":
            if isinstance(ctype, sa.Date) and not isinstance(ctype, sa.DateTime):
                return _TimeKind("date"), True
            return _TimeKind("timestamp", timezone_aware=bool(getattr(ctype, "timezone", False))), True
        if wanted == "epoch":
            return _TimeKind(
                "epoch",
                integer=isinstance(ctype, sa.Integer),
                decimal=isinstance(ctype, sa.Numeric) and not isinstance(ctype, sa.Float),
            ), True
        _sample_type, sample = self._sample_time(conn, spec, cols)
        return _TimeKind("iso", iso=self._iso_format(spec, sample)), sample is not None

    def _sample_time(self, conn, spec, cols):
        raw = cols.query_table.c[spec.time_column]
        columns = [raw]
        if self.dialect == "sqlite":
            columns.append(sa.func.typeof(raw))
        # The earliest value comes straight off the time index.
        row = conn.execute(
            sa.select(*columns).where(raw.is_not(None)).order_by(raw).limit(1)
        ).first()
        if row is None:
            return None, None
        if self.dialect == "sqlite":
            return row[1], row[0]
        return "text", row[0]

    def _iso_format(self, spec, sample) -> _IsoFormat:
        key = (spec.schema, spec.table, spec.time_column)
        with self._lock:
            cached = self._iso_formats.get(key)
        if cached is not None:
            return cached
        if sample is None:
            # No rows yet: any layout partitions nothing; detect again next time.
            return _IsoFormat(sep=" ", seconds=True, frac_digits=0, zone="")
        found = _IsoFormat.detect(str(sample))
        if found is None:
            raise SourceSchemaError(
                f"source {self.name!r}: table {spec.table!r} time_column {spec.time_column!r} "
                f"holds text {str(sample)[:40]!r} that is not an ISO-8601 date-time"
            )
        with self._lock:
            self._iso_formats[key] = found
        return found

    # ------------------------------------------------------------------ expressions

    def _bind_time(self, kind: _TimeKind, moment: datetime):
        """The cutoff as a value of the time column's own type or stored format."""
        if kind.kind == "iso":
            return kind.iso.format(moment)
        if kind.kind == "epoch":
            seconds = moment.timestamp()
            if kind.integer:
                return math.floor(seconds)
            if kind.decimal:
                return Decimal(repr(seconds))
            return seconds
        if kind.kind == "date":
            return moment.date()
        if kind.timezone_aware:
            return moment
        return moment.replace(tzinfo=None)

    def _epoch_expr(self, kind: _TimeKind, raw):
        """Event time as epoch seconds (float or integer), for the SELECT list only."""
        if self.dialect == "sqlite":
            if kind.kind == "epoch":
                return raw
            if sqlite3.sqlite_version_info >= (3, 38, 0):
                return sa.func.unixepoch(raw)  # an integer, without formatting text first
            return sa.cast(sa.func.strftime("%s", raw), sa.Integer)
        if kind.kind == "epoch":
            return sa.cast(raw, sa.Float)
        if kind.kind == "iso":
            target = sa.DateTime(timezone=bool(kind.iso.zone))
            return sa.cast(sa.extract("epoch", sa.cast(raw, target)), sa.Float)
        return sa.cast(sa.extract("epoch", raw), sa.Float)

    def _slot_expr(self, kind: _TimeKind, epoch):
        if self.dialect == "sqlite":
            if kind.kind == "epoch":
                whole = sa.cast(epoch, sa.Integer)
                # CAST truncates toward zero; step down for negative fractions before flooring.
                whole = whole - sa.case((epoch < whole, 1), else_=0)
            else:
                whole = epoch
            # SQLite's % keeps the sign of the dividend; this floors negative epochs too.
            return whole - ((whole % SLOT_SECONDS) + SLOT_SECONDS) % SLOT_SECONDS
        return sa.cast(sa.func.floor(epoch / SLOT_SECONDS) * SLOT_SECONDS, sa.BigInteger)

    def _bind_like(self, column_type, value):
        """Coerce a configured value to the column's Python type where that is unambiguous."""
        if value is None:
            return None
        try:
            python_type = column_type.python_type
        except NotImplementedError:
            return value
        if python_type is int and isinstance(value, str) and re.fullmatch(r"[+-]?\d+", value.strip()):
            return int(value)
        if python_type is str and isinstance(value, (int, float)) and not isinstance(value, bool):
            return str(value)
        if python_type is Decimal and isinstance(value, float):
            return Decimal(repr(value))
        return value

    def _group_index(self, spec, cols):
        column = cols.query_table.c[spec.group_column]
        ctype = cols.table.c[spec.group_column].type
        g0, g1 = (self._bind_like(ctype, g) for g in spec.groups)
        return sa.case((column == _literal(g0), 0), (column == _literal(g1), 1), else_=None)

    def _value_parts(self, spec, cols):
        """(raw value, numeric value expression, reason expression: NULL for a valid value)."""
        raw = cols.query_table.c[spec.value_column]
        vtype = cols.table.c[spec.value_column].type

        def number_checks(x):
            checks = []
            if spec.metric == "proportion":
                checks.append((x.not_in(_literals((0.0, 1.0))), "not_binary"))
            if spec.valid_range is not None:
                low, high = spec.valid_range
                if low is not None:
                    checks.append((x < float(low), "out_of_range"))
                if high is not None:
                    checks.append((x > float(high), "out_of_range"))
            return checks

        if self.dialect == "sqlite":
            # SQLite keeps each value with its own storage class: branch once on typeof(),
            # so a plain REAL or INTEGER row costs a few comparisons and no conversion.
            stored = sa.func.typeof(raw)
            trimmed = sa.func.trim(raw)
            from_text = sa.cast(trimmed, sa.Float)
            text_reason = sa.case(
                (sa.func.lower(trimmed).in_(_literals(_NON_FINITE_TEXT)), "not_finite"),
                (
                    sa.not_(
                        sa.and_(
                            sa.func.json_valid(trimmed) == 1,
                            sa.func.json_type(trimmed).in_(_literals(("integer", "real"))),
                        )
                    ),
                    "non_numeric",
                ),
                (sa.or_(from_text > _FLOAT_MAX, from_text < -_FLOAT_MAX), "not_finite"),
                *number_checks(from_text),
                else_=None,
            )
            number_reason = sa.case(
                (sa.or_(raw > _FLOAT_MAX, raw < -_FLOAT_MAX), "not_finite"),
                *number_checks(raw),
                else_=None,
            )
            reason = sa.case(
                {"null": "null_value", "blob": "non_numeric", "text": text_reason},
                value=stored,
                else_=number_reason,
            )
            value = sa.case((stored == "text", from_text), else_=raw)
            return raw, value, reason
        checks = [(raw.is_(None), "null_value")]
        if isinstance(vtype, sa.Boolean):
            value = sa.case((raw.is_(True), 1.0), else_=0.0)
        else:
            value = sa.cast(raw, sa.Float)
            if not isinstance(vtype, sa.Integer):
                limit = Decimal(repr(_FLOAT_MAX)) if not isinstance(vtype, sa.Float) else _FLOAT_MAX
                # PostgreSQL sorts NaN above every number, so the upper test catches NaN as well.
                checks.append((sa.or_(raw > sa.literal(limit), raw < sa.literal(-limit)), "not_finite"))
        checks.extend(number_checks(value))
        return raw, value, sa.case(*checks, else_=None)

    def _filters(self, spec, cols):
        clauses = []
        for column_name, op, value in spec.filters:
            column = cols.query_table.c[column_name]
            ctype = cols.table.c[column_name].type
            if op in ("in", "not in"):
                values = [self._bind_like(ctype, v) for v in value]
                clauses.append(column.in_(_literals(values)) if op == "in" else column.not_in(_literals(values)))
                continue
            bound = self._bind_like(ctype, value)
            if bound is None and op in ("=", "!="):
                clauses.append(column.is_(None) if op == "=" else column.is_not(None))
                continue
            literal = _literal(bound)
            clauses.append(
                {
                    "=": column == literal,
                    "!=": column != literal,
                    "<": column < literal,
                    "<=": column <= literal,
                    ">": column > literal,
                    ">=": column >= literal,
                }[op]
            )
        return clauses

    def _arrival(self, spec, cols):
        """(arrival expression, arrival column type) or (None, None)."""
        if spec.arrival_column:
            return cols.query_table.c[spec.arrival_column], cols.table.c[spec.arrival_column].type
        if self.dialect == "sqlite" and cols.has_rowid:
            return sa.literal_column("rowid"), sa.Integer()
        return None, None

    def _bind_arrival(self, atype, value):
        if value is None:
            return None
        if self.dialect != "sqlite" and isinstance(atype, sa.DateTime) and isinstance(value, str):
            moment = datetime.fromisoformat(value)
            if getattr(atype, "timezone", False):
                return _as_utc(moment, "arrival")
            return _as_utc(moment, "arrival").replace(tzinfo=None)
        return self._bind_like(atype, value)

    @staticmethod
    def _arrival_out(value):
        """An arrival value as the contract's int | float | str."""
        if value is None or isinstance(value, (int, str)) and not isinstance(value, bool):
            return value
        if isinstance(value, datetime):
            return _as_utc(value, "arrival").isoformat()
        if isinstance(value, Decimal):
            return int(value) if value == value.to_integral_value() else float(value)
        if isinstance(value, float):
            return int(value) if value.is_integer() else value
        if isinstance(value, date):
            return value.isoformat()
        return str(value)

    def _row_parts(self, conn, spec):
        cols = self._resolve(conn, spec)
        kind = self._time_kind(conn, spec, cols)
        time_raw = cols.query_table.c[spec.time_column]
        epoch = self._epoch_expr(kind, time_raw)
        group_index = self._group_index(spec, cols)
        _raw_value, value, value_reason = self._value_parts(spec, cols)
        # The epoch of a NULL time is NULL, so one test covers NULL and unreadable times.
        reason = sa.case(
            (epoch.is_(None), "null_time"),
            (group_index.is_(None), "unknown_group"),
            else_=value_reason,
        )
        key = sa.cast(cols.query_table.c[spec.key_column], sa.String) if spec.key_column else sa.null()
        arrival, atype = self._arrival(spec, cols)
        return cols, kind, time_raw, epoch, group_index, value, reason, key, arrival, atype

    # ------------------------------------------------------------------ public reads

    def check(self, spec: SourceSpec) -> list[str]:
        """Problems that would stop or weaken the reads; warnings start with ``"warning:"``.

        Raises SourceUnavailableError when the source cannot be reached.
        """
        problems = []
        try:
            with self.engine.connect() as conn:
                try:
                    cols = self._columns(conn, spec, refresh=True)
                except SourceSchemaError as error:
                    return [str(error)]
                for role, column in self._used_columns(spec):
                    if column not in cols.table.c:
                        problems.append(f"table {spec.table!r} has no column {column!r} ({role})")
                if problems:
                    return problems
                vtype = cols.table.c[spec.value_column].type
                if self.dialect != "sqlite" and not (_is_numeric_type(vtype) or isinstance(vtype, sa.Boolean)):
                    problems.append(
                        f"value_column {spec.value_column!r} has type {vtype}, not a numeric type"
                    )
                try:
                    kind, _settled = self._detect_time_kind(conn, spec, cols)
                except SourceSchemaError as error:
                    problems.append(str(error))
                    kind = None
                if kind is not None and kind.kind == "iso":
                    problems.extend(self._check_iso_layout(conn, spec, cols))
                arrival, _atype = self._arrival(spec, cols)
                if arrival is None:
                    problems.append(
                        "warning: no arrival_column (an id or inserted-at column that grows with "
                        "insertion): late events older than the lateness allowance will be missed"
                    )
                inspector = sa.inspect(conn)
                indexed = self._leading_index_columns(inspector, spec)
                if spec.time_column not in indexed:
                    problems.append(
                        f"warning: no index starts with time_column {spec.time_column!r}: "
                        "every look will scan the whole table"
                    )
                if spec.arrival_column and spec.arrival_column not in indexed:
                    problems.append(
                        f"warning: no index starts with arrival_column {spec.arrival_column!r}: "
                        "the late-event query will scan the table"
                    )
                if self.dialect not in ("sqlite", "postgresql", "mysql", "mariadb"):
                    problems.append(
                        f"warning: read-only sessions are not enforced for dialect {self.dialect!r}; "
                        "give the source a read-only database user"
                    )
        except (SourceSchemaError, InvalidArgumentError):
            raise
        except sa_exc.SQLAlchemyError as error:
            raise self._unavailable(spec, error) from None
        return problems

    def _leading_index_columns(self, inspector, spec) -> set:
        leading = set()
        try:
            for index in inspector.get_indexes(spec.table, schema=spec.schema):
                names = index.get("column_names") or []
                if names and names[0]:
                    leading.add(names[0])
            pk = inspector.get_pk_constraint(spec.table, schema=spec.schema)
            if pk and pk.get("constrained_columns"):
                leading.add(pk["constrained_columns"][0])
            for unique in inspector.get_unique_constraints(spec.table, schema=spec.schema):
                names = unique.get("column_names") or []
                if names:
                    leading.add(names[0])
        except (NotImplementedError, sa_exc.SQLAlchemyError):
            pass
        return leading

    def _check_iso_layout(self, conn, spec, cols) -> list[str]:
        raw = cols.query_table.c[spec.time_column]
        first = conn.execute(sa.select(raw).where(raw.is_not(None)).order_by(raw).limit(1)).scalar()
        last = conn.execute(sa.select(raw).where(raw.is_not(None)).order_by(raw.desc()).limit(1)).scalar()
        if first is None:
            return []
        a, b = _IsoFormat.detect(str(first)), _IsoFormat.detect(str(last))
        if a is None or b is None:
            return []  # already reported by the detection itself
        if (a.sep, a.zone) != (b.sep, b.zone):
            return [
                f"time_column {spec.time_column!r} mixes text layouts ({first!r} … {last!r}); "
                "ISO text is compared as text, so every row must share one layout and UTC offset"
            ]
        return []

    def first_value(self, spec: SourceSpec) -> float | None:
        """The median of up to 25 valid values at the earliest times: a shift near the data."""
        try:
            with self.engine.connect() as conn:
                cols, kind, time_raw, epoch, gi, value, reason, key, arrival, atype = self._row_parts(conn, spec)
                query = (
                    sa.select(value)
                    .where(time_raw.is_not(None), reason.is_(None), *self._filters(spec, cols))
                    .order_by(time_raw)
                    .limit(25)
                )
                values = sorted(float(v) for v in conn.execute(query).scalars())
        except (SourceSchemaError, InvalidArgumentError):
            raise
        except sa_exc.SQLAlchemyError as error:
            raise self._unavailable(spec, error) from None
        if not values:
            return None
        mid = len(values) // 2
        return values[mid] if len(values) % 2 else 0.5 * (values[mid - 1] + values[mid])

    def read_cells(self, spec: SourceSpec, since: Watermark | None, cutoff: datetime) -> Batch:
        """Aggregate the rows that are new since ``since``, up to event time ``cutoff``."""
        if not isinstance(spec, SourceSpec):
            raise InvalidArgumentError(f"spec must be a SourceSpec, got {type(spec).__name__}")
        cutoff = _as_utc(cutoff, "cutoff")
        if since is not None:
            if not isinstance(since, Watermark):
                raise InvalidArgumentError(f"since must be a Watermark or None, got {since!r}")
            previous = _as_utc(since.cutoff, "since.cutoff")
            if cutoff < previous:
                raise InvalidArgumentError(
                    f"cutoff {cutoff.isoformat()} is before the previous cutoff {previous.isoformat()}"
                )
        try:
            with self.engine.connect() as conn:
                statement, params = self._cells_statement(conn, spec, since, cutoff)
                rows = conn.execute(statement, params).all()
        except (SourceSchemaError, InvalidArgumentError):
            raise
        except sa_exc.SQLAlchemyError as error:
            raise self._unavailable(spec, error) from None
        excluded = {}
        arrival_max = None
        merged = {}
        for gi, slot, key, reason, count, late, sum_dev, sum_dev2, row_arrival in rows:
            if row_arrival is not None and (arrival_max is None or row_arrival > arrival_max):
                arrival_max = row_arrival
            if reason is not None:
                excluded[reason] = excluded.get(reason, 0) + int(count)
                continue
            # The same cell can come from the new-range and the late branch: add them up.
            cell = (int(gi), int(slot), key)
            n0, l0, s0, q0 = merged.get(cell, (0, 0, 0.0, 0.0))
            merged[cell] = (n0 + int(count), l0 + int(late or 0), s0 + float(sum_dev), q0 + float(sum_dev2))
        cells = [
            SlotCell(group_index=gi, slot=slot, key=key, n=n, sum_dev=s1, sum_dev2=s2, late=late)
            for (gi, slot, key), (n, late, s1, s2) in merged.items()
        ]
        cells.sort(key=lambda c: (c.group_index, c.slot, "" if c.key is None else c.key))
        arrival = since.arrival if since is not None else None
        arrival_max = self._arrival_out(arrival_max)
        if arrival_max is not None and (arrival is None or _arrival_greater(arrival_max, arrival)):
            arrival = arrival_max
        return Batch(
            cells=tuple(cells),
            excluded={r: excluded[r] for r in EXCLUSION_REASONS if r in excluded},
            new_events=sum(c.n for c in cells),
            late_events=sum(c.late for c in cells),
            watermark=Watermark(cutoff=cutoff, arrival=arrival),
        )

    def _cells_statement(self, conn, spec, since, cutoff):
        """The aggregate statement (built once per spec and shape) and its bound values."""
        cols = self._resolve(conn, spec)
        kind = self._time_kind(conn, spec, cols)
        arrival, atype = self._arrival(spec, cols)
        params = {"upper": self._bind_time(kind, cutoff)}
        if spec.start is not None:
            params["start"] = self._bind_time(kind, spec.start)
        if spec.end is not None:
            params["end"] = self._bind_time(kind, spec.end)
        if since is not None:
            params["lower"] = self._bind_time(kind, _as_utc(since.cutoff, "since.cutoff"))
            if arrival is not None and since.arrival is not None:
                params["seen"] = self._bind_arrival(atype, since.arrival)
        shape = (spec, kind, since is None, arrival is not None, tuple((k, type(v)) for k, v in sorted(params.items())))
        with self._lock:
            statement = self._statements.get(shape)
        if statement is None:
            statement = self._build_cells_statement(conn, spec, params)
            with self._lock:
                self._statements[shape] = statement
        return statement, params

    def _build_cells_statement(self, conn, spec, params):
        cols, kind, time_raw, epoch, gi, value, reason, key, arrival, atype = self._row_parts(conn, spec)
        filters = self._filters(spec, cols)
        bound = {name: sa.bindparam(name, type_=_bind_type(v)) for name, v in params.items()}
        upper = bound["upper"]

        dev = self._summand(spec, cols, value) - float(spec.shift)
        # Grouped by output position: the CASE expressions are evaluated once per row
        # (bound parameters make each repeated expression text distinct to the database).
        by_position = [sa.literal_column(str(i)) for i in (1, 2, 3, 4)]

        def part(where, late, why=None):
            return (
                sa.select(
                    gi.label("gi"),
                    self._slot_expr(kind, epoch).label("slot"),
                    key.label("key"),
                    (reason if why is None else sa.literal(why, sa.Text)).label("reason"),
                    sa.func.count().label("n"),
                    (sa.func.count() if late else sa.literal(0, sa.Integer)).label("late"),
                    # Sums of bad groups are ignored; only valid groups' sums are used.
                    sa.func.sum(dev).label("sum_dev"),
                    sa.func.sum(dev * dev).label("sum_dev2"),
                    sa.func.max(arrival if arrival is not None else sa.null()).label("arrival"),
                )
                .where(*where, *filters)
                .group_by(*by_position)
            )

        # A start keeps earlier events out; an end (a baseline's) keeps the change's out.
        window = ([time_raw >= bound["start"]] if "start" in bound else []) + \
                 ([time_raw < bound["end"]] if "end" in bound else [])
        parts = []
        if "lower" not in bound:
            parts.append(part([time_raw <= upper, *window], 0))
            if "end" not in bound:
                # NULL times never fall in a time range: count them once, on the first read
                # (of the comparison, not of its baseline).
                parts.append(part([time_raw.is_(None)], 0))
        else:
            lower = bound["lower"]
            parts.append(part([time_raw > lower, time_raw <= upper, *window], 0))
            if arrival is not None:
                # Late rows are only those at or before the previous cutoff, so rows read
                # earlier through the time range can never come back through this branch.
                newer = arrival > bound["seen"] if "seen" in bound else arrival.is_not(None)
                parts.append(part([time_raw <= lower, newer, *window], 1))
                parts.append(part([time_raw.is_(None), newer], 0))
                if "start" in bound and "seen" in bound:
                    # Rows dated before the start that arrive late: the baseline was read
                    # once and frozen, so they are counted, never used. (Without an arrival
                    # watermark yet nothing has been read, the baseline included.)
                    parts.append(part([time_raw < bound["start"], newer], 0, "before_start"))
        return sa.union_all(*parts)

    def _summand(self, spec, cols, value):
        """The value as summed: NULL where a cast could fail (PostgreSQL numeric beyond float)."""
        vtype = cols.table.c[spec.value_column].type
        if self.dialect == "sqlite" or isinstance(vtype, (sa.Integer, sa.Boolean)):
            return value
        raw = cols.query_table.c[spec.value_column]
        limit = Decimal(repr(_FLOAT_MAX)) if not isinstance(vtype, sa.Float) else _FLOAT_MAX
        return sa.case((sa.and_(raw <= sa.literal(limit), raw >= sa.literal(-limit)), value), else_=None)

    def count_before(self, spec: SourceSpec, moment: datetime, arrival_max) -> int:
        """Rows (valid or not) dated before ``moment`` that had arrived by ``arrival_max``.

        For verification: a before/after look counts rows dated before its start that
        arrive after the baseline was read (``before_start``); the difference of two
        counts replays that without pulling the rows.
        """
        try:
            with self.engine.connect() as conn:
                cols, kind, time_raw, epoch, gi, value, reason, key, arrival, atype = self._row_parts(conn, spec)
                if arrival is None:
                    raise InvalidArgumentError(f"table {spec.table!r} has no arrival column to count by")
                where = [time_raw < _literal(self._bind_time(kind, _as_utc(moment, "moment"))),
                         arrival <= _literal(self._bind_arrival(atype, arrival_max)), *self._filters(spec, cols)]
                return int(conn.execute(sa.select(sa.func.count()).select_from(cols.query_table)
                                        .where(*where)).scalar())
        except (SourceSchemaError, InvalidArgumentError):
            raise
        except sa_exc.SQLAlchemyError as error:
            raise self._unavailable(spec, error) from None

    def read_rows(self, spec: SourceSpec, cutoff: datetime, arrival_max=None):
        """Valid rows with time <= ``cutoff`` (and arrival <= ``arrival_max``), for verification.

        Returns a pandas DataFrame with columns ``group_index``, ``value``,
        ``time`` (aware UTC) and ``key``; ``.attrs["excluded"]`` counts the bad
        rows by reason. Raw rows are pulled here only to re-check a look.
        """
        import pandas as pd

        cutoff = _as_utc(cutoff, "cutoff")
        try:
            with self.engine.connect() as conn:
                cols, kind, time_raw, epoch, gi, value, reason, key, arrival, atype = self._row_parts(conn, spec)
                where = [sa.or_(time_raw <= _literal(self._bind_time(kind, cutoff)), time_raw.is_(None))]
                if spec.start is not None:
                    where.append(sa.or_(time_raw >= _literal(self._bind_time(kind, spec.start)), time_raw.is_(None)))
                if spec.end is not None:
                    where.append(time_raw < _literal(self._bind_time(kind, spec.end)))
                if arrival_max is not None:
                    if arrival is None:
                        raise InvalidArgumentError(
                            f"arrival_max given but table {spec.table!r} has no arrival column"
                        )
                    bound = _literal(self._bind_arrival(atype, arrival_max))
                    where.append(sa.or_(arrival <= bound, arrival.is_(None)))
                where.extend(self._filters(spec, cols))
                labelled = sa.select(
                    gi.label("group_index"), value.label("value"), time_raw.label("time"),
                    key.label("key"), reason.label("reason"),
                ).where(*where).subquery("checked")
                rows = conn.execute(
                    sa.select(labelled.c.group_index, labelled.c.value, labelled.c.time, labelled.c.key)
                    .where(labelled.c.reason.is_(None))
                ).all()
                counts = conn.execute(
                    sa.select(labelled.c.reason, sa.func.count())
                    .where(labelled.c.reason.is_not(None))
                    .group_by(labelled.c.reason)
                ).all()
        except (SourceSchemaError, InvalidArgumentError):
            raise
        except sa_exc.SQLAlchemyError as error:
            raise self._unavailable(spec, error) from None
        frame = pd.DataFrame(rows, columns=["group_index", "value", "time", "key"])
        frame["group_index"] = frame["group_index"].astype("int64")
        frame["value"] = frame["value"].astype("float64")
        frame["time"] = _to_utc_timestamps(frame["time"], kind)
        frame["key"] = frame["key"].astype(object).where(frame["key"].notna(), None)
        frame = frame.sort_values(["time", "group_index"], kind="stable").reset_index(drop=True)
        excluded = dict(counts)
        frame.attrs["excluded"] = {r: int(excluded[r]) for r in EXCLUSION_REASONS if r in excluded}
        return frame


def _arrival_greater(a, b) -> bool:
    try:
        return a > b
    except TypeError:
        return str(a) > str(b)


def _to_utc_timestamps(series, kind: _TimeKind):
    import pandas as pd

    if series.empty:
        return pd.Series(pd.DatetimeIndex([], tz="UTC"), index=series.index)
    if kind.kind == "epoch":
        return pd.to_datetime(series.astype("float64"), unit="s", utc=True)
    if kind.kind == "iso":
        return pd.to_datetime(series.astype(str), utc=True, format="ISO8601")
    return pd.to_datetime(series, utc=True)
