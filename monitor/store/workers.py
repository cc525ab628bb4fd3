"""Checks and heartbeats: when any worker last looked at a comparison, and which workers live.

Both are small rows written in their own short transaction, on wall time (like claims):
the demo's simulated clock moves looks' ``as_of``, never these. ``look_check`` tells a
scheduler whether a comparison is due whoever looked last; ``worker`` lets the read side
say plainly that nobody is looking.
"""

from __future__ import annotations

from datetime import datetime

import sqlalchemy as sa
from sqlalchemy.dialects import postgresql, sqlite

from .models import LookCheck, Worker

__all__ = ["last_check", "record_check", "beat", "worker_stopped", "workers", "latest_beat"]

_CHECK = LookCheck.__table__
_WORKER = Worker.__table__


def _upsert(engine, table, key: str, values: dict, update: dict | None = None):
    """Insert ``values`` or update the row with the same ``key`` (one statement where the dialect allows)."""
    update = values if update is None else update
    dialect = engine.dialect.name
    insert = {"postgresql": postgresql.insert, "sqlite": sqlite.insert}.get(dialect)
    with engine.begin() as conn:
        if insert is not None:
            stmt = insert(table).values(**values)
            conn.execute(stmt.on_conflict_do_update(index_elements=[table.c[key]],
                                                    set_={k: stmt.excluded[k] for k in update}))
            return
        changed = conn.execute(sa.update(table).where(table.c[key] == values[key]).values(**update)).rowcount
        if not changed:
            conn.execute(sa.insert(table).values(**values))


def last_check(engine, name: str):
    """The ``look_check`` row of comparison ``name`` as a dict, or None when it was never checked."""
    with engine.connect() as conn:
        row = conn.execute(sa.select(_CHECK).where(_CHECK.c.comparison_name == name)).mappings().first()
    return None if row is None else dict(row)


def record_check(engine, name: str, *, checked_at: datetime, as_of: datetime | None, holder: str | None,
                 outcome: str, detail: dict | None = None) -> None:
    """Record that ``name`` was checked at wall time ``checked_at`` (``outcome``: recorded | quiet)."""
    _upsert(engine, _CHECK, "comparison_name", {
        "comparison_name": name, "checked_at": checked_at, "as_of": as_of, "holder": holder,
        "outcome": outcome, "detail": dict(detail or {})})


def beat(engine, holder: str, *, now: datetime, started_at: datetime, looked_at: datetime | None = None) -> None:
    """This worker is alive at wall time ``now`` (and last looked at ``looked_at``, when given)."""
    values = {"holder": holder, "started_at": started_at, "beat_at": now, "stopped_at": None}
    update = {"beat_at": now, "stopped_at": None}
    if looked_at is not None:
        values["looked_at"] = update["looked_at"] = looked_at
    _upsert(engine, _WORKER, "holder", values, update)


def worker_stopped(engine, holder: str, *, now: datetime) -> None:
    """A clean stop: the worker says it is gone (a killed one just stops beating)."""
    with engine.begin() as conn:
        conn.execute(sa.update(_WORKER).where(_WORKER.c.holder == holder).values(stopped_at=now))


def workers(engine) -> list[dict]:
    """Every worker row, newest beat first."""
    with engine.connect() as conn:
        rows = conn.execute(sa.select(_WORKER).order_by(_WORKER.c.beat_at.desc())).mappings().all()
    return [dict(r) for r in rows]


def latest_beat(engine):
    """(newest beat, newest look) over all workers, wall time; (None, None) when none ever ran."""
    with engine.connect() as conn:
        row = conn.execute(sa.select(sa.func.max(_WORKER.c.beat_at), sa.func.max(_WORKER.c.looked_at))).first()
    return (row[0], row[1]) if row is not None else (None, None)
