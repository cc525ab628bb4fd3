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
from ..spec import SLOT_SECONDS, VALUE_LIMIT, utc
from ..times import TimeKind, bind_time

__all__ = ["SourceDialect", "FLOAT_MAX", "ISO_REGEX"]

FLOAT_MAX = sys.float_info.max

# A well-formed ISO-8601 date-time with fields in range (the day is checked against its month
# separately). Rows that do not match are never cast, so one bad text cannot fail a statement.
ISO_REGEX = (
    r"^[0-9]{4}-(0[1-9]|1[0-2])-(0[1-9]|[12][0-9]|3[01])"
    r"([T ]([01][0-9]|2[0-3]):[0-5][0-9](:[0-5][0-9](\.[0-9]+)?)?)?"
    r"(Z|[+-]([01][0-9]|2[0-3]):[0-5][0-9])?$"
)
_LETTERS = tuple("abcdefghijklmnopqrstuvwxyz")


class SourceDialect:
    """How gapwatch reads one kind of database. Subclasses are small; see ``sqlite`` and ``postgresql``."""

    #: SQLAlchemy dialect names this variant serves.
    names: tuple = ()
    #: Whether the session this dialect opens refuses writes by itself.
    enforces_read_only = False
    #: Whether each stored value has the column's declared type (SQLite keeps a storage class per value).
    typed_values = True
    #: Whether range reads need an index on the time column (column stores prune by min/max instead).
    wants_indexes = True
    #: Whether timestamp and date columns can hold 'infinity' (and '-infinity'): no time range ever
    #: holds 'infinity', so it is counted with the rows that have no time.
    infinite_times = False
    #: Whether a first read sweeps the times one slot at a time (``source/sweep.py``): worth it
    #: where each statement is cheap (an in-process database) and grouping sorts.
    sweeps_first_reads = False
    #: (least, greatest) epoch seconds a stored number may hold to be read as a time (sweeps only).
    epoch_limits = None

    def __init__(self, url: sa.engine.URL):
        self.url = url

    # ------------------------------------------------------------------ sessions

    def create_engine(self, *, source_name: str, safe_url: str) -> sa.Engine:
        """An engine whose every session is read-only where the database allows it."""
        engine = sa.create_engine(self.url, connect_args=self.connect_args(), **self.engine_options())
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

    def engine_options(self) -> dict:
        """Keyword arguments for ``sqlalchemy.create_engine`` (pooling)."""
        return {"pool_pre_ping": True}

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

    def to_double(self, expression):
        """``expression`` as a double-precision number."""
        return sa.cast(expression, sa.Float)

    def value_type_problem(self, value_type) -> str | None:
        """Why a value column of this declared type cannot be summed, or None."""
        if is_numeric_type(value_type) or isinstance(value_type, sa.Boolean):
            return None
        return f"has type {value_type}, not a numeric type"

    # ------------------------------------------------------------------ time

    def iso_samples(self, conn, raw) -> list:
        """Stored texts to detect an ISO layout from: the earliest values, then the latest."""
        # Both come straight off the time index.
        present = raw.is_not(None)
        first = conn.execute(sa.select(raw).where(present).order_by(raw).limit(25)).scalars().all()
        last = conn.execute(sa.select(raw).where(present).order_by(raw.desc()).limit(25)).scalars().all()
        return first + last

    def time_kind(self, wanted: str, column_type, *, describe: str) -> TimeKind:
        """How the time column stores events, from its declared type and ``time_format``.

        An ``iso`` kind is returned without its layout; the reader detects that from stored values.
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

    def time_bounds(self, kind: TimeKind, moment) -> tuple:
        """One cutoff as the values the time predicates compare with (one per storage the column holds)."""
        return (bind_time(kind, moment),)

    def time_ranges(self, kind: TimeKind, raw, lower, upper) -> list:
        """Disjoint predicates that together hold the rows with ``lower < time <= upper``
        (no ``lower``: every time up to ``upper``); one per storage the column holds.

        Plain comparisons of the raw column with bound values, so the index serves each.
        """
        if lower is None:
            return [raw <= upper[0]]
        return [sa.and_(raw > lower[0], raw <= upper[0])]

    def storages(self, kind: TimeKind, raw) -> list:
        """One predicate per storage the column holds, in the order of ``time_bounds`` (a typed column has one).

        With them a bound of each storage applies only to the times stored that way.
        """
        return [sa.true()]

    def unplaced(self, kind: TimeKind, raw, above=None):
        """Rows that no time range ever holds: counted once, on the first read or by arrival.

        NULL times, and for text times a text that starts with a letter: it sorts after every
        date and is never readable (a readable time starts with its year). ``above`` (the first
        read's upper bounds) lets the index find them.
        """
        found = self.unplaced_parts(kind, raw, above)
        return found[0] if len(found) == 1 else sa.or_(*found)

    def unplaced_parts(self, kind: TimeKind, raw, above=None) -> list:
        """``unplaced`` as disjoint predicates, each one the index can serve on its own.

        Joined by OR, some databases (SQLite) scan the whole table for them instead.
        """
        if kind.kind not in ("iso", "stored"):
            if self.infinite_times and kind.kind in ("timestamp", "date"):
                # An equality, so the index finds it; its epoch is NULL (see timestamp_epoch): bad_time.
                stored = sa.Date() if kind.kind == "date" else sa.DateTime(timezone=kind.timezone_aware)
                return [raw.is_(None), raw == sa.cast(sa.literal("infinity"), stored)]
            return [raw.is_(None)]
        word = sa.func.lower(sa.func.substr(raw, 1, 1)).in_(literals(_LETTERS))
        if above is not None:
            word = sa.and_(raw > above[0], word)
        return [raw.is_(None), word]

    def is_text(self, raw):
        """Whether a stored time is text (always, in a typed text column)."""
        return sa.true()

    def epoch(self, kind: TimeKind, raw):
        """Event time as epoch seconds, NULL when unreadable; for the SELECT list only."""
        if kind.kind == "epoch":
            return self.to_double(raw)
        if kind.kind == "iso":
            return self.text_epoch(raw)
        return self.timestamp_epoch(raw)

    def timestamp_epoch(self, raw):
        """A timestamp or date column as epoch seconds (a naive timestamp is UTC)."""
        return self.to_double(sa.extract("epoch", raw))

    def text_epoch(self, raw):
        """ISO-8601 text as epoch seconds, NULL for text that is not a valid date-time."""
        year = sa.cast(sa.func.substr(raw, 1, 4), sa.Integer)
        month = sa.cast(sa.func.substr(raw, 6, 2), sa.Integer)
        day = sa.cast(sa.func.substr(raw, 9, 2), sa.Integer)
        leap = sa.case((sa.or_(sa.and_(year % 4 == 0, year % 100 != 0), year % 400 == 0), 1), else_=0)
        days_in_month = sa.case(
            (month == 2, 28 + leap), (month.in_(literals((4, 6, 9, 11))), 30), else_=31
        )
        # Nested CASEs keep the order: the substrings are cast only after the pattern matched.
        return sa.case(
            (
                raw.regexp_match(ISO_REGEX),
                sa.case((day <= days_in_month, self.valid_text_epoch(raw)), else_=None),
            ),
            else_=None,
        )

    def valid_text_epoch(self, raw):
        """Well-formed ISO-8601 text as epoch seconds (text without an offset is UTC)."""
        return self.timestamp_epoch(sa.cast(raw, sa.DateTime(timezone=True)))

    def plain_epoch(self, raw):
        """ISO text as epoch seconds without the date checks of ``epoch`` (a sweep checks each
        instant against its slot instead); only for dialects that sweep."""
        raise NotImplementedError

    def plain_number(self, raw):
        """A stored value as compared with numbers by a sweep's screen: only a stored number may pass."""
        return raw

    def fence(self, select):
        """An inner select whose columns the database computes once per row (planners inline it here)."""
        return select

    def learn(self, conn):
        """Note what the server offers before statements are built (e.g. its version); nothing here."""

    def row_time(self, kind: TimeKind, raw, epoch):
        """What a read's inner select keeps of each row's time: NULL for an unreadable time (so
        the row is ``bad_time``), else what ``slot`` makes the slot of; by default the epoch."""
        return epoch

    def slot(self, kind: TimeKind, at):
        """The start of the event's 15-minute UTC slot (``at`` as ``row_time`` gave it), in epoch seconds.

        A dialect may give it as a timestamp instead; ``slot_seconds`` then turns each value
        the database returns into epoch seconds.
        """
        return sa.cast(sa.func.floor(at / SLOT_SECONDS) * SLOT_SECONDS, sa.BigInteger)

    def slot_seconds(self, value) -> int:
        """A slot as a read returned it, in epoch seconds."""
        return int(value)

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
            value = self.to_double(raw)
            if not isinstance(value_type, sa.Integer):  # a 64-bit integer never exceeds the limits
                top, limit = _typed(value_type, FLOAT_MAX), _typed(value_type, VALUE_LIMIT)
                # NaN sorts above every number in these databases, so the upper test catches NaN as well.
                checks.append((sa.or_(raw > sa.literal(top), raw < sa.literal(-top)), "not_finite"))
                checks.append((sa.or_(raw > sa.literal(limit), raw < sa.literal(-limit)), "too_large"))
        checks.extend(self.number_checks(spec, value))
        return value, sa.case(*checks, else_=None)

    def summand(self, raw, value, value_type):
        """The value as summed: NULL beyond VALUE_LIMIT, so no square can overflow and fail the statement."""
        if isinstance(value_type, (sa.Integer, sa.Boolean)):
            return value
        limit = _typed(value_type, VALUE_LIMIT)
        return sa.case((sa.and_(raw <= sa.literal(limit), raw >= sa.literal(-limit)), value), else_=None)

    def denominator_parts(self, raw, value_type) -> tuple:
        """(denominator as summed, reason expression: NULL for a usable denominator).

        A usable denominator is a number above zero and at most VALUE_LIMIT; anything else
        (NULL, NaN, ±infinity, zero, negative, too large) is ``bad_denominator``. The summed
        expression is NULL beyond ±VALUE_LIMIT, so no square or cross-product can overflow.
        """
        bad = "bad_denominator"
        if isinstance(value_type, sa.Boolean):
            value = sa.case((raw.is_(True), 1.0), else_=0.0)
            return value, sa.case((sa.or_(raw.is_(None), raw.is_(False)), bad), else_=None)
        value = self.to_double(raw)
        checks = [raw.is_(None), raw <= sa.literal(0)]
        if not isinstance(value_type, sa.Integer):  # a 64-bit integer never exceeds the limit
            limit = _typed(value_type, VALUE_LIMIT)
            # NaN sorts above every number in these databases, so this catches NaN as well.
            checks.append(raw > sa.literal(limit))
            value = sa.case((sa.and_(raw <= sa.literal(limit), raw >= sa.literal(-limit)), value), else_=None)
        return value, sa.case((sa.or_(*checks), bad), else_=None)

    # ------------------------------------------------------------------ arrivals

    def bind_arrival(self, arrival_type, value):
        """A stored arrival watermark as a value of the arrival column's type."""
        if value is None:
            return None
        if isinstance(arrival_type, sa.DateTime) and isinstance(value, str):
            moment = utc(datetime.fromisoformat(value), "arrival")
            return moment if getattr(arrival_type, "timezone", False) else moment.replace(tzinfo=None)
        return bind_like(arrival_type, value)


def _typed(value_type, bound: float):
    """A float bound as a value comparable with the column without a lossy cast."""
    return bound if isinstance(value_type, sa.Float) else Decimal(repr(bound))
