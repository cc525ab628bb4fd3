"""Which group values a source table holds, for ``check`` to tell a typo'd group name from a quiet one."""

from __future__ import annotations

import difflib

import sqlalchemy as sa
from sqlalchemy.exc import DBAPIError

__all__ = ["group_values", "group_problems"]

# At most this many distinct values are listed (a group column is a handful of sites or desks).
LISTED_VALUES = 20


def group_values(source, spec, limit: int = LISTED_VALUES) -> list[tuple[str, int]]:
    """``(value, rows)`` of the group column, most rows first (read only; one aggregate query)."""
    try:
        with source.engine.connect() as conn:
            table = sa.Table(spec.table, sa.MetaData(), autoload_with=conn, schema=spec.schema)
            column = table.c[spec.group_column]
            rows = conn.execute(sa.select(column, sa.func.count()).group_by(column)
                                .order_by(sa.func.count().desc()).limit(limit)).all()
    except (DBAPIError, KeyError, sa.exc.NoSuchTableError) as exc:
        raise source._unavailable(spec, exc) from None
    return [("NULL" if value is None else str(value), int(n)) for value, n in rows]


def group_problems(source, spec) -> list[str]:
    """One line per configured group that has no row, with the values present and near misses.

    A line starts with ``"warning: "`` when the group is only absent so far (a site not live
    yet); without it when a present value is a near miss (most likely a typo).
    """
    present = group_values(source, spec)
    names = [v for v, _ in present]
    listed = ", ".join(f"{v!r} ({n} rows)" for v, n in present) or "none (the table is empty)"
    problems = []
    for group in spec.groups:
        if str(group) in names:
            continue
        near = [v for v in difflib.get_close_matches(str(group), names, n=3, cutoff=0.6)
                if v not in map(str, spec.groups)]
        if near:
            problems.append(f"group {group!r} has no rows in {spec.table!r}; did you mean "
                            f"{' or '.join(repr(v) for v in near)}? values present: {listed}")
        else:
            problems.append(f"warning: group {group!r} has no rows in {spec.table!r} yet; values present: {listed}")
    return problems
