"""PostgreSQL: the base dialect, with sessions that start read-only."""

from __future__ import annotations

from .base import SourceDialect

__all__ = ["PostgreSQLDialect"]


class PostgreSQLDialect(SourceDialect):
    names = ("postgresql",)

    @property
    def enforces_read_only(self):
        return self.url.get_driver_name() in ("psycopg", "psycopg2")

    def connect_args(self):
        if self.enforces_read_only:
            # Every transaction of the session is read-only unless it says otherwise (we never do);
            # text times without an offset are read as UTC.
            return {"options": "-c default_transaction_read_only=on -c timezone=UTC"}
        return {}

    def session_statements(self):
        return () if self.enforces_read_only else ("SET TIME ZONE 'UTC'",)
