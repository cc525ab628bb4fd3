"""SQLite: a read-only file, a storage class per stored value, and the implicit rowid.

SQLite keeps whatever was inserted, whatever the declared type, so time and
value checks branch on ``typeof()`` of the stored value rather than trusting the
column's type.
"""

from __future__ import annotations

import sqlite3
from pathlib import Path
from urllib.parse import quote

import sqlalchemy as sa
from sqlalchemy import exc as sa_exc

from ...errors import InvalidArgumentError
from ..binding import bind_like, literals
from ..spec import SLOT_SECONDS, VALUE_LIMIT
from ..times import TimeKind
from .base import FLOAT_MAX, SourceDialect

__all__ = ["SQLiteDialect"]

# Epoch seconds from 0001-01-01 to 9999-12-31 23:59:59: the times a text layout can also hold.
_EPOCH_MIN, _EPOCH_MAX = -62135596800, 253402300799
# Spellings SQLite keeps as text but that name a non-finite number.
_NON_FINITE_TEXT = ("nan", "+nan", "-nan", "inf", "+inf", "-inf", "infinity", "+infinity", "-infinity")


class SQLiteDialect(SourceDialect):
    names = ("sqlite",)
    enforces_read_only = True
    typed_values = False
    # Grouping sorts every row; one small statement per slot sorts a few hundred in cache.
    sweeps_first_reads = True
    epoch_limits = (_EPOCH_MIN, _EPOCH_MAX)

    def create_engine(self, *, source_name: str, safe_url: str) -> sa.Engine:
        database = self.url.database
        if not database or database == ":memory:" or database.startswith("file:"):
            raise InvalidArgumentError(f"source {source_name!r}: url must name a SQLite file, got {safe_url!r}")
        path = Path(database).expanduser().absolute()
        uri = f"file:{quote(str(path))}?mode=ro"

        def creator():
            if not path.is_file():
                # SQLite's own words ("unable to open database file") leave the cause to guess.
                raise sqlite3.OperationalError(f"no such file: {path}" if path.parent.is_dir()
                                               else f"no such folder: {path.parent}")
            conn = sqlite3.connect(uri, uri=True, check_same_thread=False)
            # mode=ro already refuses writes (and never creates the file); query_only is a second lock.
            conn.execute("PRAGMA query_only = ON")
            return conn

        # QueuePool, named: for a creator-built "sqlite://" engine SQLAlchemy would pick its
        # SingletonThreadPool, which closes connections other threads are still using once more
        # than five threads share it, and on dispose() — a crash inside libsqlite3.
        return sa.create_engine("sqlite://", creator=creator, poolclass=sa.pool.QueuePool, pool_pre_ping=True)

    def implicit_arrival(self, conn, table, reflected):
        probe = sa.select(sa.literal_column("rowid")).select_from(table).limit(0)
        try:
            conn.execute(probe)
        except sa_exc.DBAPIError:
            return None  # a WITHOUT ROWID table
        # A real column named rowid shadows the implicit one.
        return None if "rowid" in reflected.c else sa.literal_column("rowid")

    def value_type_problem(self, value_type):
        return None  # each stored value is checked on its own

    def iso_samples(self, conn, raw):
        # Text sorts after every number in SQLite: seek to the first text, not the first row.
        text = raw >= sa.literal("")
        first = conn.execute(sa.select(raw).where(text).order_by(raw).limit(25)).scalars().all()
        last = conn.execute(sa.select(raw).where(text).order_by(raw.desc()).limit(25)).scalars().all()
        return [v for v in first + last if isinstance(v, str)]

    def time_kind(self, wanted, column_type, *, describe):
        # SQLite keeps whatever was inserted, whatever the declared type: each stored time is read
        # by its own storage class (ISO-8601 text, or epoch seconds as integer or real).
        return TimeKind("stored")

    def time_bounds(self, kind, moment):
        return (kind.iso.format(moment), moment.timestamp())

    def time_ranges(self, kind, raw, lower, upper):
        # Numbers sort before all text, and text before blobs, so each storage class has its own
        # range on the one index: text against the text cutoff, numbers against the epoch cutoff.
        # Two ranges rather than one OR, so each is a plain index range scan.
        empty = sa.literal("")
        if lower is None:
            return [sa.and_(raw >= empty, raw <= upper[0]), sa.and_(raw < empty, raw <= upper[1])]
        return [
            sa.and_(raw > lower[0], raw <= upper[0]),
            sa.and_(raw < empty, raw > lower[1], raw <= upper[1]),
        ]

    def storages(self, kind, raw):
        # Numbers sort before all text: text is what sorts at or after the empty text.
        empty = sa.literal("")
        return [raw >= empty, raw < empty]

    def is_text(self, raw):
        return sa.func.typeof(raw) == "text"

    def plain_epoch(self, raw):
        if sqlite3.sqlite_version_info >= (3, 38, 0):
            return sa.func.unixepoch(raw)
        return sa.cast(sa.func.strftime("%s", raw), sa.Integer)

    def plain_number(self, raw):
        # "+x" drops the column's affinity: text then never compares as a number (a text column's
        # affinity would compare the bounds as text, and '1.0e+4abc' would fall between them).
        return sa.sql.elements.UnaryExpression(raw, operator=sa.sql.operators.custom_op("+"), type_=sa.Float())

    def epoch(self, kind, raw):
        """Whole epoch seconds (floored) by storage class; NULL for anything that is not a readable time."""
        from_text = self.plain_epoch(raw)  # unixepoch: an integer, without formatting text first
        # SQLite's date functions also read words such as 'now', bare clock times and Julian day
        # numbers, and roll 2026-02-30 over into March: insist on a date first, and on a day its
        # month has. Of the texts they read, only a date has its first '-' fifth ('YYYY-MM-DD',
        # whose fields they check), so one character decides it: a GLOB of the whole pattern
        # cost a quarter of a first read.
        day = sa.func.substr(raw, 1, 10)
        day_exists = sa.or_(sa.func.substr(raw, 9, 2) <= "28", sa.func.date(day, "+0 days") == day)
        text = sa.case((sa.and_(sa.func.substr(raw, 5, 1) == "-", day_exists), from_text), else_=None)
        in_range = raw.between(_EPOCH_MIN, _EPOCH_MAX)
        whole = sa.cast(raw, sa.Integer)
        # CAST truncates toward zero; step down for negative fractions to floor.
        real = sa.case((in_range, whole - sa.case((raw < whole, 1), else_=0)), else_=None)
        integer = sa.case((in_range, raw), else_=None)
        return sa.case({"text": text, "integer": integer, "real": real}, value=sa.func.typeof(raw), else_=None)

    def fence(self, select):
        # SQLite does not flatten a subquery with a LIMIT into an aggregate, so the per-row time
        # and value checks run once per row instead of once per reference.
        return select.limit(-1)

    def slot(self, kind, epoch):
        # The epoch is whole seconds; SQLite's % keeps the sign of the dividend, so floor it by hand.
        return epoch - ((epoch % SLOT_SECONDS) + SLOT_SECONDS) % SLOT_SECONDS

    def value_parts(self, spec, raw, value_type):
        # Branch once on typeof(), so a plain REAL or INTEGER row costs a few comparisons and no conversion.
        stored = sa.func.typeof(raw)
        trimmed = sa.func.trim(raw)
        from_text = sa.cast(trimmed, sa.Float)
        is_json_number = sa.and_(
            sa.func.json_valid(trimmed) == 1,
            sa.func.json_type(trimmed).in_(literals(("integer", "real"))),
        )
        text_reason = sa.case(
            (sa.func.lower(trimmed).in_(literals(_NON_FINITE_TEXT)), "not_finite"),
            (sa.not_(is_json_number), "non_numeric"),
            (sa.or_(from_text > FLOAT_MAX, from_text < -FLOAT_MAX), "not_finite"),
            (sa.or_(from_text > VALUE_LIMIT, from_text < -VALUE_LIMIT), "too_large"),
            *self.number_checks(spec, from_text),
            else_=None,
        )
        number_reason = sa.case(
            (sa.or_(raw > FLOAT_MAX, raw < -FLOAT_MAX), "not_finite"),
            (sa.or_(raw > VALUE_LIMIT, raw < -VALUE_LIMIT), "too_large"),
            *self.number_checks(spec, raw),
            else_=None,
        )
        reason = sa.case(
            {"null": "null_value", "blob": "non_numeric", "text": text_reason},
            value=stored,
            else_=number_reason,
        )
        value = sa.case((stored == "text", from_text), else_=raw)
        return value, reason

    def denominator_parts(self, raw, value_type):
        # Numbers are read as in value_parts: a stored number, or text that is a JSON number.
        stored = sa.func.typeof(raw)
        trimmed = sa.func.trim(raw)
        is_json_number = sa.and_(
            sa.func.json_valid(trimmed) == 1,
            sa.func.json_type(trimmed).in_(literals(("integer", "real"))),
        )
        value = sa.case((stored == "text", sa.cast(trimmed, sa.Float)), else_=raw)
        bad = sa.case(
            (stored.in_(literals(("null", "blob"))), "bad_denominator"),
            (sa.and_(stored == "text", sa.not_(is_json_number)), "bad_denominator"),
            # +infinity is above the limit; SQLite stores a NaN as NULL.
            (sa.or_(value <= 0, value > VALUE_LIMIT), "bad_denominator"),
            else_=None,
        )
        return value, bad

    def summand(self, raw, value, value_type):
        # SQLite turns an overflow into ±inf instead of failing the statement, and rows beyond
        # VALUE_LIMIT are summed only into their own (excluded) groups.
        return value

    def bind_arrival(self, arrival_type, value):
        return None if value is None else bind_like(arrival_type, value)
