"""PostgreSQL: the base dialect, with sessions that start read-only, and a cheaper epoch."""

from __future__ import annotations

import sqlalchemy as sa

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
