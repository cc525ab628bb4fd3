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

from ...errors import InvalidArgumentError, SourceSchemaError
from ..binding import bind_like, is_numeric_type, literals
from ..spec import SLOT_SECONDS
from ..times import TimeKind
from .base import FLOAT_MAX, SourceDialect

__all__ = ["SQLiteDialect"]

# Spellings SQLite keeps as text but that name a non-finite number.
_NON_FINITE_TEXT = ("nan", "+nan", "-nan", "inf", "+inf", "-inf", "infinity", "+infinity", "-infinity")


class SQLiteDialect(SourceDialect):
    names = ("sqlite",)
    enforces_read_only = True
    typed_values = False

    def create_engine(self, *, source_name: str, safe_url: str) -> sa.Engine:
        database = self.url.database
        if not database or database == ":memory:" or database.startswith("file:"):
            raise InvalidArgumentError(f"source {source_name!r}: url must name a SQLite file, got {safe_url!r}")
        uri = f"file:{quote(str(Path(database).expanduser().absolute()))}?mode=ro"

        def creator():
            conn = sqlite3.connect(uri, uri=True, check_same_thread=False)
            # mode=ro already refuses writes (and never creates the file); query_only is a second lock.
            conn.execute("PRAGMA query_only = ON")
            return conn

        return sa.create_engine("sqlite://", creator=creator, pool_pre_ping=True)

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

    def sample_time(self, conn, raw):
        row = conn.execute(sa.select(raw, sa.func.typeof(raw)).where(raw.is_not(None)).order_by(raw).limit(1)).first()
        return (row[1], row[0]) if row is not None else (None, None)

    def time_kind(self, wanted, column_type, sample, *, describe):
        # Look at a stored value, not the declared type.
        storage, _value = sample()
        if wanted == "auto":
            if storage in ("integer", "real"):
                wanted = "epoch"
            elif storage == "text":
                wanted = "iso"
            elif storage is None:
                wanted = "epoch" if is_numeric_type(column_type) else "iso"
            else:
                raise SourceSchemaError(f"{describe} holds {storage} values; need ISO-8601 text or epoch seconds")
        if wanted == "epoch":
            return TimeKind("epoch", integer=storage == "integer")
        return TimeKind("iso")  # "timestamp" columns hold text in SQLite

    def epoch(self, kind, raw):
        if kind.kind == "epoch":
            return raw
        if sqlite3.sqlite_version_info >= (3, 38, 0):
            return sa.func.unixepoch(raw)  # an integer, without formatting text first
        return sa.cast(sa.func.strftime("%s", raw), sa.Integer)

    def slot(self, kind, epoch):
        if kind.kind == "epoch":
            whole = sa.cast(epoch, sa.Integer)
            # CAST truncates toward zero; step down for negative fractions before flooring.
            whole = whole - sa.case((epoch < whole, 1), else_=0)
        else:
            whole = epoch
        # SQLite's % keeps the sign of the dividend; this floors negative epochs too.
        return whole - ((whole % SLOT_SECONDS) + SLOT_SECONDS) % SLOT_SECONDS

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
            *self.number_checks(spec, from_text),
            else_=None,
        )
        number_reason = sa.case(
            (sa.or_(raw > FLOAT_MAX, raw < -FLOAT_MAX), "not_finite"),
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

    def summand(self, raw, value, value_type):
        return value  # SQLite turns an overflow into ±inf instead of failing the statement

    def bind_arrival(self, arrival_type, value):
        return None if value is None else bind_like(arrival_type, value)
