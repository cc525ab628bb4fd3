"""Changes made to running comparisons by hand: replans and restarts, one writer for both.

A replan is written only if no look was recorded since the figures it was computed from
were read (the comparison's look count is the guard) and the comparison has not stopped;
a restart archives the active version and records, in the same transaction, whether the
next version reads only what comes after this version's watermark or everything again.
"""

from __future__ import annotations

from datetime import datetime

import sqlalchemy as sa
from sqlalchemy.exc import DBAPIError, IntegrityError

from ..errors import LookAlreadyRecordedError, ReplanRefusedError, StoreUnavailableError, UnknownComparisonError
from .models import Comparison, Look, PlanChange

__all__ = ["KINDS", "plan_changes", "replans", "record_replan", "restart_version", "restart_note", "replan_inputs"]

KINDS = ("replan", "restart")

_CHANGE = PlanChange.__table__
_COMPARISON = Comparison.__table__
_FIELDS = ("number", "kind", "made_at", "made_by", "reason", "after_look", "old_plan", "new_plan", "record")


def _rows(conn, comparison_id, kind=None):
    stmt = sa.select(*(_CHANGE.c[f] for f in _FIELDS)).where(_CHANGE.c.comparison_id == comparison_id)
    if kind is not None:
        stmt = stmt.where(_CHANGE.c.kind == kind)
    return [dict(r) for r in conn.execute(stmt.order_by(_CHANGE.c.number)).mappings()]


def plan_changes(engine_or_conn, comparison_id: int, kind: str | None = None) -> list[dict]:
    """The changes made to one comparison version, oldest first (optionally of one kind)."""
    if isinstance(engine_or_conn, sa.engine.Connection):
        return _rows(engine_or_conn, comparison_id, kind)
    try:
        with engine_or_conn.connect() as conn:
            return _rows(conn, comparison_id, kind)
    except DBAPIError as exc:
        raise StoreUnavailableError(f"cannot read the history store: {str(exc.orig).splitlines()[0]}") from None


def replans(engine_or_conn, comparison_id: int) -> list[dict]:
    """The replans of one comparison version, oldest first."""
    return plan_changes(engine_or_conn, comparison_id, "replan")


def _next_number(conn, comparison_id):
    top = conn.execute(sa.select(sa.func.max(_CHANGE.c.number)).where(_CHANGE.c.comparison_id == comparison_id))
    return (top.scalar() or 0) + 1


def record_replan(engine, *, comparison_id: int, looks_taken: int, made_at: datetime, made_by: str,
                  reason: str, old_plan: dict, new_plan: dict, record: dict) -> int:
    """Write a replan; returns its number among the version's changes.

    Raises
    ------
    LookAlreadyRecordedError
        A look was recorded (or the version archived) since ``looks_taken`` was read:
        nothing is written; compute the replan again.
    ReplanRefusedError
        The comparison has stopped.
    """
    try:
        with engine.begin() as conn:
            # The guarded update takes the comparison row first (a look's write waits for it, or
            # wins and voids this replan) and moves the count a look guards its own write on.
            done = conn.execute(
                sa.update(_COMPARISON)
                .where(_COMPARISON.c.id == comparison_id, _COMPARISON.c.looks_taken == looks_taken,
                       _COMPARISON.c.stopped_at.is_(None), _COMPARISON.c.archived.is_(False))
                .values(replans=_COMPARISON.c.replans + 1))
            if done.rowcount != 1:
                row = conn.execute(
                    sa.select(_COMPARISON.c.name, _COMPARISON.c.stopped_at, _COMPARISON.c.state)
                    .where(_COMPARISON.c.id == comparison_id)).mappings().first()
                if row is None:
                    raise UnknownComparisonError(f"no comparison version with id {comparison_id} in the store")
                if row["stopped_at"] is not None:
                    raise ReplanRefusedError(
                        f"comparison {row['name']!r} has stopped ({row['state'].replace('_', ' ')}): a stopped "
                        f"comparison cannot be replanned; start a new comparison instead")
                raise LookAlreadyRecordedError(
                    f"comparison {row['name']!r}: a look was recorded (or the version restarted) while the "
                    f"replan was being worked out; nothing was written — run the replan again")
            number = _next_number(conn, comparison_id)
            conn.execute(sa.insert(_CHANGE), dict(
                comparison_id=comparison_id, number=number, kind="replan", made_at=made_at, made_by=made_by,
                reason=reason, after_look=looks_taken, old_plan=old_plan, new_plan=new_plan, record=record))
    except IntegrityError:
        raise LookAlreadyRecordedError(
            f"comparison version {comparison_id}: another change was recorded at the same moment; nothing "
            f"was written — run the replan again") from None
    except DBAPIError as exc:
        raise StoreUnavailableError(f"cannot write the history store: {str(exc.orig).splitlines()[0]}") from None
    return number


def restart_version(engine, name: str, *, made_at: datetime, made_by: str, reason: str,
                    from_start: bool) -> dict:
    """Archive the active version of ``name`` and record how the next version starts.

    Returns ``{"name", "archived_version", "next_version", "from_start", "watermark"}``
    (the archived version's watermark: where the next version starts unless ``from_start``).
    """
    try:
        with engine.begin() as conn:
            row = conn.execute(
                sa.select(_COMPARISON.c.id, _COMPARISON.c.version, _COMPARISON.c.looks_taken,
                          _COMPARISON.c.watermark)
                .where(_COMPARISON.c.name == name, _COMPARISON.c.archived.is_(False))
                .order_by(_COMPARISON.c.version.desc()).limit(1)).mappings().first()
            if row is None:
                raise UnknownComparisonError(f"no active comparison named {name!r} in the store")
            conn.execute(sa.update(_COMPARISON).where(_COMPARISON.c.id == row["id"]).values(archived=True))
            conn.execute(sa.insert(_CHANGE), dict(
                comparison_id=row["id"], number=_next_number(conn, row["id"]), kind="restart", made_at=made_at,
                made_by=made_by, reason=reason, after_look=row["looks_taken"], old_plan=None, new_plan=None,
                record={"from_start": bool(from_start), "watermark": row["watermark"]}))
    except DBAPIError as exc:
        raise StoreUnavailableError(f"cannot write the history store: {str(exc.orig).splitlines()[0]}") from None
    return {"name": name, "archived_version": row["version"], "next_version": row["version"] + 1,
            "from_start": bool(from_start), "watermark": row["watermark"]}


def restart_note(conn, name: str, version: int) -> dict | None:
    """How version ``version + 1`` of ``name`` starts, from the archived version ``version``.

    ``{"after_version", "from_start", "watermark", "made_at", "made_by", "reason"}`` from the
    restart recorded on that version. A version archived before restarts were recorded has
    no note: the next version starts after its watermark all the same (``made_at`` etc. None),
    so old data are never tested again unless a restart said so. None when there is no such
    version (a first version).
    """
    row = conn.execute(
        sa.select(_COMPARISON.c.id, _COMPARISON.c.watermark)
        .where(_COMPARISON.c.name == name, _COMPARISON.c.version == version)).mappings().first()
    if row is None:
        return None
    found = conn.execute(
        sa.select(_CHANGE.c.record, _CHANGE.c.made_at, _CHANGE.c.made_by, _CHANGE.c.reason)
        .where(_CHANGE.c.comparison_id == row["id"], _CHANGE.c.kind == "restart")
        .order_by(_CHANGE.c.number.desc()).limit(1)).mappings().first()
    if found is None:
        return {"after_version": version, "from_start": False, "watermark": row["watermark"],
                "made_at": None, "made_by": None, "reason": None}
    record = found["record"] or {}
    return {"after_version": version, "from_start": bool(record.get("from_start")),
            "watermark": record.get("watermark"), "made_at": found["made_at"], "made_by": found["made_by"],
            "reason": found["reason"]}


_LOOK_FIELDS = ("look_number", "boundary_look", "fraction", "boundary_z", "futility_z", "statistic", "df",
                "p_value", "estimate", "n1", "n2", "pairs", "as_of", "detail")


def replan_inputs(engine, name: str) -> dict | None:
    """What a replan is worked out from, in one read: the active version of ``name``, its
    testing looks (oldest first) and its replans. None when the comparison has no version yet.
    """
    look = Look.__table__
    try:
        with engine.connect() as conn:
            row = conn.execute(
                sa.select(_COMPARISON.c.id, _COMPARISON.c.version, _COMPARISON.c.design, _COMPARISON.c.state,
                          _COMPARISON.c.looks_taken, _COMPARISON.c.stopped_at)
                .where(_COMPARISON.c.name == name, _COMPARISON.c.archived.is_(False))
                .order_by(_COMPARISON.c.version.desc()).limit(1)).mappings().first()
            if row is None:
                return None
            testing = [dict(r) for r in conn.execute(
                sa.select(*(look.c[f] for f in _LOOK_FIELDS))
                .where(look.c.comparison_id == row["id"], look.c.boundary_look.is_not(None))
                .order_by(look.c.boundary_look)).mappings()]
            changes = _rows(conn, row["id"], "replan")
    except DBAPIError as exc:
        raise StoreUnavailableError(f"cannot read the history store: {str(exc.orig).splitlines()[0]}") from None
    return {"comparison": dict(row), "testing_looks": testing, "replans": changes}
