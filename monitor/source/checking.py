"""What ``Source.check`` reports beyond missing columns: unreadable or mixed times, missing indexes.

These queries scan the table once (``check`` is run by hand or at start-up, not every look).
"""

from __future__ import annotations

import sqlalchemy as sa
from sqlalchemy import exc as sa_exc

from .binding import literals

__all__ = ["time_problems", "reading_warnings"]


def time_problems(conn, dialect, spec, parts) -> list[str]:
    """Unreadable time values (counted as bad_time), numbers among text, mixed ISO layouts."""
    if parts.kind.kind not in ("iso", "stored"):
        return _infinite_times(conn, dialect, spec, parts)
    name = spec.time_column
    raw, epoch = parts.time_raw, parts.epoch
    problems = []
    bad, example = conn.execute(
        sa.select(sa.func.count(), sa.func.min(raw)).where(raw.is_not(None), epoch.is_(None))
    ).one()
    readable_text = sa.and_(epoch.is_not(None), dialect.is_text(raw))
    texts = conn.execute(sa.select(sa.func.count()).where(readable_text)).scalar()
    numbers = 0
    if parts.kind.kind == "stored":
        numbers = conn.execute(
            sa.select(sa.func.count()).where(epoch.is_not(None), sa.not_(dialect.is_text(raw)))
        ).scalar()
    if bad and not (texts or numbers):
        problems.append(
            f"time_column {name!r} holds text {str(example)[:40]!r} that is not an ISO-8601 date-time "
            f"(no row of {bad} has a readable time)"
        )
    elif bad:
        problems.append(
            f"warning: time_column {name!r} has {bad} rows whose time is not an ISO-8601 date-time "
            f"(e.g. {str(example)[:40]!r}); they are excluded and counted as bad_time"
        )
    if numbers and texts:
        problems.append(
            f"warning: time_column {name!r} holds {numbers} numbers among {texts} text times; "
            "each number is read as epoch seconds"
        )
    problems.extend(_layout_problems(conn, name, raw, readable_text))
    return problems


def _infinite_times(conn, dialect, spec, parts) -> list[str]:
    """Timestamps of ±infinity (PostgreSQL, DuckDB): no instant, so each is counted as bad_time."""
    if not dialect.infinite_times or parts.kind.kind not in ("timestamp", "date"):
        return []
    raw = parts.time_raw
    # Counted only: drivers cannot always turn an infinite time into a Python value.
    count = conn.execute(sa.select(sa.func.count()).where(raw.is_not(None), parts.epoch.is_(None))).scalar()
    if not count:
        return []
    return [f"warning: time_column {spec.time_column!r} has {count} rows whose time is infinity or -infinity; "
            "they are excluded and counted as bad_time"]


def _layout_problems(conn, name, raw, readable_text) -> list[str]:
    length = sa.func.length(raw)
    offset_start = sa.func.substr(raw, length - 5, 1)
    zone = sa.case(
        (raw.like("%Z"), "Z"),
        (sa.and_(length > 16, offset_start.in_(literals(("+", "-")))), sa.func.substr(raw, length - 5, 6)),
        else_="",
    )
    separator = sa.func.substr(raw, 11, 1)
    layouts = conn.execute(
        sa.select(separator, zone, sa.func.count(), sa.func.min(raw))
        .where(readable_text)
        .group_by(separator, zone)
        .order_by(sa.func.count().desc())
    ).all()
    if len(layouts) < 2:
        return []
    described = "; ".join(f"{count} like {example!r}" for _sep, _zone, count, example in layouts[:4])
    return [
        f"time_column {name!r} mixes text layouts ({described}); ISO text is compared as text, "
        "so every row must share one layout and UTC offset (rows in another layout are read at the wrong look)"
    ]


def reading_warnings(conn, dialect, spec, cols) -> list[str]:
    """Late events that would be missed, scans without an index, sessions that are not read-only."""
    warnings = []
    if not spec.arrival_column and cols.implicit_arrival is None:
        warnings.append(
            "warning: no arrival_column (an id or inserted-at column that grows with "
            "insertion): late events older than the lateness allowance will be missed"
        )
    if not dialect.wants_indexes:
        indexed = {spec.time_column, spec.arrival_column}
    else:
        indexed = _leading_index_columns(sa.inspect(conn), spec)
    if spec.time_column not in indexed:
        warnings.append(
            f"warning: no index starts with time_column {spec.time_column!r}: every look will scan the whole table"
        )
    if spec.arrival_column and spec.arrival_column not in indexed:
        warnings.append(
            f"warning: no index starts with arrival_column {spec.arrival_column!r}: "
            "the late-event query will scan the table"
        )
    if not dialect.enforces_read_only:
        warnings.append(
            f"warning: read-only sessions are not enforced for dialect {conn.dialect.name!r}; "
            "give the source a read-only database user"
        )
    return warnings


def _leading_index_columns(inspector, spec) -> set:
    leading = set()
    try:
        for index in inspector.get_indexes(spec.table, schema=spec.schema):
            names = index.get("column_names") or []
            if names and names[0]:
                leading.add(names[0])
        pk = inspector.get_pk_constraint(spec.table, schema=spec.schema)
        if pk and pk.get("constrained_columns"):
            leading.add(pk["constrained_columns"][0])
        for unique in inspector.get_unique_constraints(spec.table, schema=spec.schema):
            names = unique.get("column_names") or []
            if names:
                leading.add(names[0])
    except (NotImplementedError, sa_exc.SQLAlchemyError):
        pass
    return leading
