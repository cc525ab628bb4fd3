"""MySQL and MariaDB: the base dialect, with sessions that start read-only."""

from __future__ import annotations

from .base import SourceDialect

__all__ = ["MySQLDialect"]


class MySQLDialect(SourceDialect):
    names = ("mysql", "mariadb")
    enforces_read_only = True

    def session_statements(self):
        return ("SET SESSION TRANSACTION READ ONLY",)
