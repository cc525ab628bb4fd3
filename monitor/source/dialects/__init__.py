"""Source dialects: one small variant per kind of database, beside the base that carries the logic.

A database not listed here is read through the base dialect (any SQLAlchemy
dialect with ``EXTRACT(epoch FROM …)``, ``FLOOR`` and typed columns); ``check``
then warns that its sessions are not made read-only.
"""

from __future__ import annotations

import sqlalchemy as sa

from .base import SourceDialect
from .duckdb import DuckDBDialect
from .mysql import MySQLDialect
from .postgresql import PostgreSQLDialect
from .sqlite import SQLiteDialect

__all__ = ["SourceDialect", "SQLiteDialect", "PostgreSQLDialect", "MySQLDialect", "DuckDBDialect", "dialect_for"]

_VARIANTS = (SQLiteDialect, PostgreSQLDialect, MySQLDialect, DuckDBDialect)


def dialect_for(url: sa.engine.URL) -> SourceDialect:
    """The variant that reads the database ``url`` names."""
    backend = url.get_backend_name()
    for variant in _VARIANTS:
        if backend in variant.names:
            return variant(url)
    return SourceDialect(url)
