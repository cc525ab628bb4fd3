"""MySQL and MariaDB: read-only UTC sessions, and epoch seconds without ``EXTRACT(epoch …)``.

MySQL has no epoch field and no CAST to a floating type on every version, and MariaDB
reads no UTC offset in a date-time literal; each is a small override of the base.
"""

from __future__ import annotations

import sqlalchemy as sa

from ..binding import literals
from .base import SourceDialect

__all__ = ["MySQLDialect"]

_EPOCH_START = sa.literal_column("'1970-01-01 00:00:00'")


class MySQLDialect(SourceDialect):
    names = ("mysql", "mariadb")
    enforces_read_only = True

    def session_statements(self):
        # TIMESTAMP columns are converted to the session zone when read: make that UTC.
        return ("SET SESSION TRANSACTION READ ONLY", "SET SESSION time_zone = '+00:00'")

    def to_double(self, expression):
        # Adding a double literal converts integers and decimals, where CAST(… AS DOUBLE) is not portable.
        return expression + sa.literal_column("0e0")

    def timestamp_epoch(self, raw):
        micros = sa.func.timestampdiff(sa.literal_column("MICROSECOND"), _EPOCH_START, raw)
        return micros / sa.literal_column("1e6")

    def valid_text_epoch(self, raw):
        length = sa.func.char_length(raw)
        sign = sa.func.substr(raw, length - 5, 1)
        has_offset = sa.and_(length > 16, sign.in_(literals(("+", "-"))))
        local = sa.case(
            (raw.like("%Z"), sa.func.substr(raw, 1, length - 1)),
            (has_offset, sa.func.substr(raw, 1, length - 6)),
            else_=raw,
        )
        hours = sa.cast(sa.func.substr(raw, length - 4, 2), sa.Integer)
        minutes = sa.cast(sa.func.substr(raw, length - 1, 2), sa.Integer)
        offset = sa.case(
            (sa.and_(has_offset, sign == "-"), -(hours * 3600 + minutes * 60)),
            (has_offset, hours * 3600 + minutes * 60),
            else_=0,
        )
        return self.timestamp_epoch(sa.func.timestamp(local)) - offset
