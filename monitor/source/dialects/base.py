"""The abstract source dialect: everything a typed SQL database needs, written once.

A dialect answers the few questions on which databases differ: how a session is
made read-only, how a time column's storage is recognised, how an event time
becomes epoch seconds and a 15-minute slot, how a stored value is checked and
summed. The base answers them for a database whose columns hold values of their
declared type and that knows ``EXTRACT(epoch FROM …)``; a variant overrides only
what its database does differently.
"""

from __future__ import annotations

import sys
from datetime import datetime
from decimal import Decimal

import sqlalchemy as sa

from ...errors import SourceSchemaError
from ..binding import bind_like, is_numeric_type, literals
from ..spec import SLOT_SECONDS, utc
from ..times import TimeKind

__all__ = ["SourceDialect", "FLOAT_MAX"]

FLOAT_MAX = sys.float_info.max


class SourceDialect:
    """How gapwatch reads one kind of database. Subclasses are small; see ``sqlite`` and ``postgresql``."""

    #: SQLAlchemy dialect names this variant serves.
    names: tuple = ()
    #: Whether the session this dialect opens refuses writes by itself.
    enforces_read_only = False
    #: Whether each stored value has the column's declared type (SQLite keeps a storage class per value).
    typed_values = True

    def __init__(self, url: sa.engine.URL):
        self.url = url

    # ------------------------------------------------------------------ sessions

    def create_engine(self, *, source_name: str, safe_url: str) -> sa.Engine:
        """An engine whose every session is read-only where the database allows it."""
        engine = sa.create_engine(self.url, pool_pre_ping=True, connect_args=self.connect_args())
        statements = self.session_statements()
        if statements:

            @sa.event.listens_for(engine, "connect")
            def _start_session(dbapi_connection, _record):
                cursor = dbapi_connection.cursor()
                try:
                    for statement in statements:
                        cursor.execute(statement)
                finally:
                    cursor.close()

        return engine

    def connect_args(self) -> dict:
        """Driver arguments for every new connection."""
        return {}

    def session_statements(self) -> tuple:
        """Fixed statements (no user text) run on every new connection, e.g. a read-only session."""
        return ()

    # ------------------------------------------------------------------ reflection

    def implicit_arrival(self, conn, table: sa.TableClause, reflected: sa.Table):
        """A column that grows with insertion when none is configured (SQLite's rowid), or None."""
        return None

    def value_type_problem(self, value_type) -> str | None:
        """Why a value column of this declared type cannot be summed, or None."""
        if is_numeric_type(value_type) or isinstance(value_type, sa.Boolean):
            return None
        return f"has type {value_type}, not a numeric type"

    # ------------------------------------------------------------------ time

    def sample_time(self, conn, raw) -> tuple:
        """(storage, value) of the earliest stored time; ``(None, None)`` for an empty table."""
        # The earliest value comes straight off the time index.
        value = conn.execute(sa.select(raw).where(raw.is_not(None)).order_by(raw).limit(1)).scalar()
        return ("text", value) if value is not None else (None, None)

    def time_kind(self, wanted: str, column_type, sample, *, describe: str) -> TimeKind:
        """How the time column stores events. ``sample()`` gives (storage, value) when needed.

        An ``iso`` kind is returned without its layout; the reader detects that from a stored value.
        """
        if wanted == "auto":
            if isinstance(column_type, sa.DateTime):
                wanted = "timestamp"
            elif isinstance(column_type, sa.Date):
                return TimeKind("date")
            elif is_numeric_type(column_type):
                wanted = "epoch"
            elif isinstance(column_type, sa.String):
                wanted = "iso"
            else:
                raise SourceSchemaError(
                    f"{describe} has type {column_type}; need a timestamp, a date, epoch seconds or ISO-8601 text"
                )
        if wanted == "timestamp":
            if isinstance(column_type, sa.Date) and not isinstance(column_type, sa.DateTime):
                return TimeKind("date")
            return TimeKind("timestamp", timezone_aware=bool(getattr(column_type, "timezone", False)))
        if wanted == "epoch":
            return TimeKind(
                "epoch",
                integer=isinstance(column_type, sa.Integer),
                decimal=isinstance(column_type, sa.Numeric) and not isinstance(column_type, sa.Float),
            )
        return TimeKind("iso")

    def epoch(self, kind: TimeKind, raw):
        """Event time as epoch seconds, for the SELECT list only (predicates compare the raw column)."""
        if kind.kind == "epoch":
            return sa.cast(raw, sa.Float)
        if kind.kind == "iso":
            return self.text_epoch(kind, raw)
        return self.timestamp_epoch(raw)

    def timestamp_epoch(self, raw):
        """A timestamp or date column as epoch seconds (a naive timestamp is UTC)."""
        return sa.cast(sa.extract("epoch", raw), sa.Float)

    def text_epoch(self, kind: TimeKind, raw):
        """ISO-8601 text as epoch seconds."""
        target = sa.DateTime(timezone=bool(kind.iso.zone))
        return sa.cast(sa.extract("epoch", sa.cast(raw, target)), sa.Float)

    def slot(self, kind: TimeKind, epoch):
        """The start of the event's 15-minute UTC slot, in epoch seconds."""
        return sa.cast(sa.func.floor(epoch / SLOT_SECONDS) * SLOT_SECONDS, sa.BigInteger)

    # ------------------------------------------------------------------ values

    def number_checks(self, spec, number) -> list:
        """(condition, reason) pairs that apply to a value already known to be a finite number."""
        checks = []
        if spec.metric == "proportion":
            checks.append((number.not_in(literals((0.0, 1.0))), "not_binary"))
        if spec.valid_range is not None:
            low, high = spec.valid_range
            if low is not None:
                checks.append((number < float(low), "out_of_range"))
            if high is not None:
                checks.append((number > float(high), "out_of_range"))
        return checks

    def value_parts(self, spec, raw, value_type) -> tuple:
        """(numeric value expression, reason expression: NULL for a valid value)."""
        checks = [(raw.is_(None), "null_value")]
        if isinstance(value_type, sa.Boolean):
            value = sa.case((raw.is_(True), 1.0), else_=0.0)
        else:
            value = sa.cast(raw, sa.Float)
            if not isinstance(value_type, sa.Integer):
                limit = _float_limit(value_type)
                # NaN sorts above every number here, so the upper test catches NaN as well.
                checks.append((sa.or_(raw > sa.literal(limit), raw < sa.literal(-limit)), "not_finite"))
        checks.extend(self.number_checks(spec, value))
        return value, sa.case(*checks, else_=None)

    def summand(self, raw, value, value_type):
        """The value as summed: NULL where converting it could fail (a numeric beyond float)."""
        if isinstance(value_type, (sa.Integer, sa.Boolean)):
            return value
        limit = _float_limit(value_type)
        return sa.case((sa.and_(raw <= sa.literal(limit), raw >= sa.literal(-limit)), value), else_=None)

    # ------------------------------------------------------------------ arrivals

    def bind_arrival(self, arrival_type, value):
        """A stored arrival watermark as a value of the arrival column's type."""
        if value is None:
            return None
        if isinstance(arrival_type, sa.DateTime) and isinstance(value, str):
            moment = utc(datetime.fromisoformat(value), "arrival")
            return moment if getattr(arrival_type, "timezone", False) else moment.replace(tzinfo=None)
        return bind_like(arrival_type, value)


def _float_limit(value_type):
    """The largest finite double, as a value comparable with the column without a lossy cast."""
    return FLOAT_MAX if isinstance(value_type, sa.Float) else Decimal(repr(FLOAT_MAX))
