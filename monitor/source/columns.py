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
    """Read the table's columns; a missing table raises SourceSchemaError naming it.

    The dialect's reflection is tried first; where it fails (some dialects query catalogue
    tables their database lacks), a ``LIMIT 0`` probe of the table gives the names and types.
    """
    where = f" in schema {spec.schema!r}" if spec.schema else ""
    missing = SourceSchemaError(f"source {source_name!r}: table {spec.table!r}{where} not found")
    try:
        table = sa.Table(spec.table, sa.MetaData(), autoload_with=conn, schema=spec.schema)
    except sa_exc.NoSuchTableError:
        raise missing from None
    except (sa_exc.ProgrammingError, NotImplementedError):
        conn.rollback()  # a failed statement may leave the transaction unusable
        table = _probe(conn, spec, missing)
    query_table = sa.table(spec.table, *(sa.column(c.name) for c in table.columns), schema=spec.schema)
    return Columns(
        table=table,
        query_table=query_table,
        implicit_arrival=dialect.implicit_arrival(conn, query_table, table),
    )


def _probe(conn, spec, missing) -> sa.Table:
    """The table as a ``SELECT * … LIMIT 0`` describes it: names, and types from the driver's type codes."""
    probe = sa.select(sa.literal_column("*")).select_from(sa.table(spec.table, schema=spec.schema)).limit(0)
    try:
        result = conn.execute(probe)
    except sa_exc.ProgrammingError:  # no such table (an unreachable database raises OperationalError)
        conn.rollback()
        raise missing from None
    columns = [sa.Column(d[0], _described_type(conn.dialect, d[1])) for d in result.cursor.description]
    result.close()
    return sa.Table(spec.table, sa.MetaData(), *columns, schema=spec.schema)


# SQL type names as drivers describe result columns, beyond what a dialect's own table knows.
_NAMED_TYPES = (
    (("double", "float", "real", "decimal", "numeric"), sa.Float),
    (("int", "integer", "bigint", "smallint", "tinyint", "hugeint", "ubigint", "uinteger"), sa.BigInteger),
    (("varchar", "text", "string", "char"), sa.String),
    (("timestamp with time zone", "timestamptz"), lambda: sa.DateTime(timezone=True)),
    (("timestamp", "datetime", "timestamp without time zone"), sa.DateTime),
    (("date",), sa.Date),
    (("boolean", "bool"), sa.Boolean),
)


def _described_type(dialect, type_code):
    """A SQLAlchemy type for a DB-API type code: by its name (the dialect's own type table, then
    common SQL names), else by the DB-API type objects (PEP 249 STRING, NUMBER, DATETIME)."""
    name = str(type_code).lower().split("(")[0].strip()
    known = getattr(dialect, "ischema_names", {}).get(name)
    if isinstance(known, type) and issubclass(known, sa.DateTime):
        return known(timezone="with time zone" in name or name.endswith("tz"))
    if isinstance(known, type):
        return known()
    for names, sql_type in _NAMED_TYPES:
        if name in names:
            return sql_type()
    dbapi = getattr(dialect, "dbapi", None)
    for type_object, sql_type in (("STRING", sa.String), ("NUMBER", sa.Float), ("DATETIME", sa.DateTime)):
        if dbapi is not None and hasattr(dbapi, type_object) and type_code == getattr(dbapi, type_object):
            return sql_type()
    return sa.types.NullType()
