"""DuckDB: a database file opened read-only, one read at a time; doubles named as such; no index needed.

DuckDB's ``FLOAT`` is single precision, so conversions name ``DOUBLE``. Range reads
are pruned by the min/max kept per row group, so no index is asked for. Its SQLAlchemy
dialect cannot reflect tables (it queries catalogue tables DuckDB lacks); the reader's
``LIMIT 0`` probe serves instead.
"""

from __future__ import annotations

import sqlalchemy as sa

from .base import SourceDialect

__all__ = ["DuckDBDialect"]


class DuckDBDialect(SourceDialect):
    names = ("duckdb",)
    enforces_read_only = True
    wants_indexes = False
    infinite_times = True  # EXTRACT(epoch …) of an infinite timestamp is NULL: bad_time

    def engine_options(self):
        # A DuckDB file open in one process cannot be opened for writing by another: hold it
        # only for the length of one read, so the program that feeds it can write between looks.
        return {"poolclass": sa.pool.NullPool}

    def connect_args(self):
        # The file is never created or changed: a missing file fails, every write is refused.
        return {"read_only": True}

    def to_double(self, expression):
        return sa.cast(expression, sa.Double)
