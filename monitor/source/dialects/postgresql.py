"""PostgreSQL: the base dialect, with sessions that start read-only, and a cheaper epoch."""

from __future__ import annotations

from datetime import datetime, timezone

import sqlalchemy as sa

from ..spec import SLOT_SECONDS
from .base import SourceDialect

__all__ = ["PostgreSQLDialect"]

# Set on every session (each changes only how this session's own reads run, never what they
# return or anything stored): times without an offset are read as UTC; no aggregate is compiled
# to machine code (a first read groups every row by slot, so the planner expects as many groups
# as rows and its cost passes the JIT thresholds; compiling the statement's expressions then
# took longer, seconds, than running them); and a read may hash its slot cells in 32 MB (twice
# that with the default hash_mem_multiplier) rather than 4 MB: a year of 15-minute slots of two
# groups needs about 10 MB, and beyond the limit the rows spill to temporary files (150 MB of
# them for a first read of 10 million rows).
_SETTINGS = (("timezone", "UTC"), ("jit", "off"), ("work_mem", "32MB"))


class PostgreSQLDialect(SourceDialect):
    names = ("postgresql",)
    infinite_times = True
    # date_bin (PostgreSQL 14 and later) is known once a connection has told the server's version.
    _bins = False

    @property
    def enforces_read_only(self):
        return self.url.get_driver_name() in ("psycopg", "psycopg2")

    def connect_args(self):
        if self.enforces_read_only:
            # Every transaction of the session is read-only unless it says otherwise (we never do).
            options = " ".join(f"-c {name}={value}" for name, value in (("default_transaction_read_only", "on"),
                                                                           *_SETTINGS))
            return {"options": options}
        return {}

    def session_statements(self):
        if self.enforces_read_only:
            return ()
        return tuple(f"SET {name} = '{value}'" for name, value in _SETTINGS)

    def fence(self, select):
        # Without it the planner sees through the inner select to the time column, whose values
        # are nearly all distinct, expects one group per row, and sorts every row (spilling to
        # disk) to group them. Behind OFFSET 0 it expects far fewer and hashes the rows into
        # their slots instead: about a third less time on a first read of 2 million rows.
        return select.offset(0)

    def timestamp_epoch(self, raw):
        # date_part gives double precision directly; EXTRACT gives numeric (PostgreSQL 14 and
        # later), whose conversion back to a double cost more than the rest of a row's work.
        # Both are the exact microseconds over 1e6, rounded once to a double. An infinite
        # timestamp or date has no epoch (date_part's ±Infinity failed the slot's cast, and with
        # it every read): NULL, so the row is bad_time.
        epoch = sa.func.date_part(sa.literal_column("'epoch'"), raw, type_=sa.Float)
        return sa.case((sa.func.isfinite(raw), epoch), else_=None)

    def learn(self, conn):
        version = conn.dialect.server_version_info
        self._bins = bool(version) and version >= (14,)

    def _binned(self, kind) -> bool:
        return self._bins and kind.kind in ("timestamp", "date")

    def row_time(self, kind, raw, epoch):
        if not self._binned(kind):
            return epoch
        # The slot itself, binned as a timestamp: integer arithmetic on the stored microseconds,
        # where the epoch as a double, divided and floored, cost a quarter of a first read. The
        # origin is a midnight (so aligned with UTC slots) before nearly every stored time.
        origin = "timestamptz '0001-01-01 00:00:00+00'" if kind.timezone_aware else "timestamp '0001-01-01 00:00:00'"
        binned = sa.func.date_bin(sa.text(f"interval '{SLOT_SECONDS} seconds'"), raw, sa.text(origin),
                                  type_=sa.DateTime(timezone=kind.timezone_aware))
        return sa.case((sa.func.isfinite(raw), binned), else_=None)

    def slot(self, kind, at):
        return at if self._binned(kind) else super().slot(kind, at)

    def slot_seconds(self, value) -> int:
        if isinstance(value, datetime):
            # A timestamp without a zone is UTC (the session's zone is UTC as well).
            moment = value if value.tzinfo is not None else value.replace(tzinfo=timezone.utc)
            return int(moment.timestamp())
        return int(value)
