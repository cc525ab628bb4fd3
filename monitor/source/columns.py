"""The events table as the source declares it: reflected column types and an untyped query table."""

from __future__ import annotations

from dataclasses import dataclass

import sqlalchemy as sa
from sqlalchemy import exc as sa_exc

from ..errors import SourceSchemaError

__all__ = ["Columns", "reflect"]


@dataclass(frozen=True)
class Columns:
    """One table: declared types, a table to query, and the implicit arrival column if any."""

    table: sa.Table  # reflected: its types coerce bound values and choose expressions
    query_table: sa.TableClause  # untyped, so values come back as the driver stores them
    implicit_arrival: object = None  # e.g. SQLite's rowid, when no arrival column is configured

    def missing(self, spec) -> list[tuple[str, str]]:
        """(role, column) for every column the spec uses that the table lacks."""
        return [(role, c) for role, c in spec.used_columns() if c not in self.table.c]

    def raw(self, name: str):
        return self.query_table.c[name]

    def declared_type(self, name: str):
        return self.table.c[name].type


def reflect(conn, dialect, spec, *, source_name: str) -> Columns:
    """Read the table's columns; a missing table raises SourceSchemaError naming it."""
    try:
        table = sa.Table(spec.table, sa.MetaData(), autoload_with=conn, schema=spec.schema)
    except sa_exc.NoSuchTableError:
        where = f" in schema {spec.schema!r}" if spec.schema else ""
        raise SourceSchemaError(f"source {source_name!r}: table {spec.table!r}{where} not found") from None
    query_table = sa.table(spec.table, *(sa.column(c.name) for c in table.columns), schema=spec.schema)
    return Columns(
        table=table,
        query_table=query_table,
        implicit_arrival=dialect.implicit_arrival(conn, query_table, table),
    )
