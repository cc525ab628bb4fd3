"""The look history: what a look reads of its comparison, and the one transaction that records it.

Core tables and statements are built once: with bound parameters they compile once and
SQLAlchemy's statement cache serves every later look (no ORM on the hot path). Errors of
the database are translated here: a lost race becomes ``LookAlreadyRecordedError``, an
unreachable store ``StoreUnavailableError``.
"""

from __future__ import annotations

from collections import namedtuple
from dataclasses import dataclass, field
from datetime import datetime
from typing import Callable

import sqlalchemy as sa
from sqlalchemy.dialects import postgresql, sqlite
from sqlalchemy.exc import DBAPIError, IntegrityError, OperationalError

from ..errors import LookAlreadyRecordedError, StoreUnavailableError, UnknownComparisonError
from . import outbox
from .engine import ensure_current, head_revision
from .models import Cell, Comparison, Look
from .plan_changes import replans as replan_rows, restart_note

__all__ = [
    "BoundaryLookRow",
    "KeptState",
    "LookState",
    "AlertDraft",
    "LookWrite",
    "Written",
    "read_state",
    "boundary_looks",
    "write_look",
    "upsert_cells",
    "archive_active",
    "write_display",
]

_COMPARISON = Comparison.__table__
_LOOK = Look.__table__
_CELL = Cell.__table__
_VERSION_TABLE = sa.table("alembic_version", sa.column("version_num"))
_COMPARISON_FIELDS = ("id", "version", "design", "state", "looks_taken", "watermark", "stopped_at",
                      "last_look_at", "replans")
# The schema revision, the active comparison and its newest look in one round trip: the
# version table has one row, so the outer joins always return exactly one row.
_STATE_STATEMENT = (
    sa.select(_VERSION_TABLE.c.version_num.label("revision"),
              *(_COMPARISON.c[f] for f in _COMPARISON_FIELDS),
              _LOOK.c.excluded.label("last_excluded"),
              _LOOK.c.detail["state_token"].as_string().label("state_token"),
              _LOOK.c.detail["volume_state"].as_string().label("last_volume_state"))
    .select_from(
        _VERSION_TABLE
        .outerjoin(_COMPARISON, sa.and_(_COMPARISON.c.name == sa.bindparam("name"),
                                        _COMPARISON.c.archived.is_(False)))
        .outerjoin(_LOOK, sa.and_(_LOOK.c.comparison_id == _COMPARISON.c.id,
                                  _LOOK.c.look_number == _COMPARISON.c.looks_taken)))
    .order_by(_COMPARISON.c.version.desc())
    .limit(1)
)
_TOP_VERSION_STATEMENT = sa.select(sa.func.max(_COMPARISON.c.version)).where(
    _COMPARISON.c.name == sa.bindparam("name"))
_CELLS_STATEMENT = sa.select(
    _CELL.c.kind, _CELL.c.group_index, _CELL.c.key, _CELL.c.n, _CELL.c.sum_dev, _CELL.c.sum_dev2,
    _CELL.c.sum_den, _CELL.c.sum_den2, _CELL.c.sum_cross,
).where(_CELL.c.comparison_id == sa.bindparam("cid"))
_LAST_BOUNDARY_STATEMENT = (
    sa.select(_LOOK.c.boundary_look, _LOOK.c.fraction, _LOOK.c.boundary_z, _LOOK.c.futility_z, _LOOK.c.df,
              _LOOK.c.detail["bounds"])
    .where(_LOOK.c.comparison_id == sa.bindparam("cid"), _LOOK.c.boundary_look.is_not(None))
    .order_by(_LOOK.c.boundary_look.desc())
    .limit(1)
)
_BOUNDARY_LOOKS_STATEMENT = (
    sa.select(_LOOK.c.boundary_look, _LOOK.c.fraction, _LOOK.c.boundary_z, _LOOK.c.futility_z, _LOOK.c.df,
              _LOOK.c.detail["bounds"])
    .where(_LOOK.c.comparison_id == sa.bindparam("cid"), _LOOK.c.boundary_look.is_not(None),
           _LOOK.c.boundary_look <= sa.bindparam("count"))
    .order_by(_LOOK.c.boundary_look)
)
_INSERT_COMPARISON = sa.insert(_COMPARISON).returning(_COMPARISON.c.id)
_GUARDED_UPDATE = sa.update(_COMPARISON).where(
    _COMPARISON.c.id == sa.bindparam("guard_id"),
    _COMPARISON.c.looks_taken == sa.bindparam("guard_looks"),
    _COMPARISON.c.replans == sa.bindparam("guard_replans"),
    _COMPARISON.c.archived.is_(False))
_INSERT_LOOK = sa.insert(_LOOK).returning(_LOOK.c.id)
# A new display on a version without a look: only while no look has moved the version on.
_DISPLAY_UPDATE = sa.update(_COMPARISON).where(
    _COMPARISON.c.id == sa.bindparam("guard_id"),
    _COMPARISON.c.looks_taken == sa.bindparam("guard_looks"),
    _COMPARISON.c.archived.is_(False)).values(design=sa.bindparam("new_design"))


_CELL_SUMS = ("n", "sum_dev", "sum_dev2", "sum_den", "sum_den2", "sum_cross")


def _cell_values(cell) -> tuple:
    """A stored cell row's sums as the look keeps them: three, or six for a ratio comparison."""
    return tuple(cell[:3]) if cell[3] is None else tuple(cell)


def _cell_upsert(insert):
    """INSERT … ON CONFLICT DO UPDATE on the cell key (the dialects that have it)."""
    stmt = insert(_CELL)
    return stmt.on_conflict_do_update(
        index_elements=["comparison_id", "kind", "group_index", "key"],
        set_={name: stmt.excluded[name] for name in _CELL_SUMS})


_CELL_UPSERTS = {"sqlite": _cell_upsert(sqlite.insert), "postgresql": _cell_upsert(postgresql.insert)}

# The last testing look as the boundary needs it (a stored row or the one just written); the
# df of its statistic rebuilds a sequential t boundary. ``bounds``: the look's detail["bounds"]
# (its segment's own bounds), present after a replan.
BoundaryLookRow = namedtuple("BoundaryLookRow", "boundary_look fraction boundary_z futility_z df bounds",
                             defaults=(None, None))


@dataclass(frozen=True)
class KeptState:
    """The cells and last testing look as one process wrote them with its newest look.

    Valid only while the store's newest look still carries ``token`` and the comparison
    row's look count is ``looks_taken``.
    """

    token: str
    looks_taken: int
    cells: dict
    last_boundary_look: BoundaryLookRow | None


@dataclass(frozen=True)
class LookState:
    """What a look starts from: the active comparison row (None before the first look of a
    version), its running cells, its last testing look and the exclusions counted so far."""

    comparison: dict | None
    next_version: int
    cells: dict = field(default_factory=dict)
    last_boundary_look: BoundaryLookRow | None = None
    last_excluded: dict = field(default_factory=dict)
    last_volume_state: str | None = None   # the volume check's state at the newest look
    replans: tuple = ()             # the version's replans (plan_change rows), oldest first
    restart: dict | None = None     # a new version's start, from the archived version's restart

    @property
    def looks_taken(self) -> int:
        return 0 if self.comparison is None else self.comparison["looks_taken"]

    @property
    def version(self) -> int:
        return self.next_version if self.comparison is None else self.comparison["version"]


def _store_error(what, exc) -> StoreUnavailableError:
    return StoreUnavailableError(f"cannot {what} the history store: {str(exc.orig).splitlines()[0]}")


def read_state(engine, name: str, kept: Callable[[int], KeptState | None] | None = None) -> LookState:
    """The active comparison row, its cells and its last testing look (one short read).

    One statement reads the store's schema revision, the comparison row and its newest
    look together, so the schema check costs no extra round trip. ``kept(comparison_id)``
    may offer the state a process kept after its own previous look; it is used when that
    look is still the newest in the store (same look count and random state token),
    otherwise the cells and last testing look are read.
    """
    try:
        with engine.connect() as conn:
            try:
                top = conn.execute(_STATE_STATEMENT, {"name": name}).mappings().first()
            except DBAPIError:
                # No version table or missing columns (a store behind) or a real failure:
                # the schema check tells them apart and names the command to run.
                conn.rollback()
                ensure_current(conn)
                raise
            if top is None or top["revision"] != head_revision():
                ensure_current(conn)  # raises StoreBehindError with the right message
            if top["id"] is None:
                latest = conn.execute(_TOP_VERSION_STATEMENT, {"name": name}).scalar()
                restart = restart_note(conn, name, latest) if latest else None
                return LookState(None, (latest or 0) + 1, restart=restart)
            comparison = {k: top[k] for k in _COMPARISON_FIELDS}
            offered = kept(comparison["id"]) if kept is not None else None
            if (offered is not None and top["state_token"] is not None and offered.token == top["state_token"]
                    and offered.looks_taken == comparison["looks_taken"]):
                cells, last = offered.cells, offered.last_boundary_look
            else:
                cells = {(r[0], r[1], r[2]): _cell_values(r[3:])
                         for r in conn.execute(_CELLS_STATEMENT, {"cid": comparison["id"]})}
                found = conn.execute(_LAST_BOUNDARY_STATEMENT, {"cid": comparison["id"]}).first()
                last = None if found is None else BoundaryLookRow(*found)
            changes = tuple(replan_rows(conn, comparison["id"])) if comparison["replans"] else ()
    except DBAPIError as exc:
        raise _store_error("read", exc) from None
    return LookState(comparison, comparison["version"] + 1, cells, last, top["last_excluded"] or {},
                     top["last_volume_state"], changes)


def boundary_looks(engine, comparison_id: int, count: int) -> list[BoundaryLookRow]:
    """The first ``count`` testing looks of a comparison, in order."""
    try:
        with engine.connect() as conn:
            rows = conn.execute(_BOUNDARY_LOOKS_STATEMENT, {"cid": comparison_id, "count": count}).all()
    except DBAPIError as exc:
        raise _store_error("read", exc) from None
    return [BoundaryLookRow(*r) for r in rows]


@dataclass(frozen=True)
class AlertDraft:
    """An alert to write with the look: its kind, what it says, and the channels to notify."""

    kind: str
    payload: dict
    notify: tuple = ()


@dataclass(frozen=True)
class LookWrite:
    """Everything one look records, in one transaction."""

    name: str
    state: LookState            # what the look read (the guard: only the next look may be written)
    design: object              # the frozen monitor.design.Design (stored with the first look, and when
                                # its shift is fixed)
    design_hash: str
    settings: dict
    new_state: str
    stopped: bool
    look: dict                  # the Look row's values
    cells: dict                 # the merged running cells …
    changes: dict               # … and the keys this look changed
    watermark: dict
    as_of: datetime
    alert: AlertDraft | None = None
    volume_alert: AlertDraft | None = None  # a volume warning's first look raises one of its own


@dataclass(frozen=True)
class Written:
    look_id: int
    alert_id: str | None
    version: int
    comparison_id: int


def write_look(engine, w: LookWrite) -> Written:
    """Record a look whole or not at all: comparison row, look row, changed cells and alert."""
    look_number = w.look["look_number"]
    try:
        with engine.begin() as conn:
            comparison_id = _write_comparison(conn, w)
            look_id = conn.execute(_INSERT_LOOK, {"comparison_id": comparison_id, **w.look}).scalar_one()
            upsert_cells(conn, comparison_id, w.cells, w.changes)
            alert_id = None
            if w.alert is not None:
                alert_id = outbox.write_alert(
                    conn, comparison_id=comparison_id, comparison_name=w.name, look_id=look_id,
                    kind=w.alert.kind, created_at=w.as_of, payload=w.alert.payload, notify=w.alert.notify)
            if w.volume_alert is not None:
                outbox.write_alert(
                    conn, comparison_id=comparison_id, comparison_name=w.name, look_id=look_id,
                    kind=w.volume_alert.kind, created_at=w.as_of, payload=w.volume_alert.payload,
                    notify=w.volume_alert.notify)
    except IntegrityError:
        raise LookAlreadyRecordedError(
            f"comparison {w.name!r}: look {look_number} was recorded by another process "
            f"first; nothing was written") from None
    except OperationalError as exc:
        raise _store_error("write the look to", exc) from None
    return Written(look_id, alert_id, w.state.version, comparison_id)


def _write_comparison(conn, w: LookWrite) -> int:
    """Insert the comparison row at a version's first look, else move it on under the guard."""
    row = w.state.comparison
    if row is None:
        return conn.execute(_INSERT_COMPARISON, dict(
            name=w.name, version=w.state.version, design=w.design.to_stored(), design_hash=w.design_hash,
            settings=w.settings, state=w.new_state, looks_taken=1, watermark=w.watermark,
            created_at=w.as_of, last_look_at=w.as_of, stopped_at=w.as_of if w.stopped else None,
            archived=False)).scalar_one()
    update = {"state": w.new_state, "looks_taken": w.look["look_number"], "watermark": w.watermark,
              "last_look_at": w.as_of, "settings": w.settings}
    if w.stopped:
        update["stopped_at"] = w.as_of
    stored = w.design.to_stored()
    if ((w.design.shift is not None and row["design"].get("shift") is None)  # fixed at the first look with data
            or stored.get("display") != row["design"].get("display")):  # names or unit changed (display only)
        update["design"] = stored
    # The guard: only the look that follows the one we read may be written.
    done = conn.execute(_GUARDED_UPDATE, {**update, "guard_id": row["id"], "guard_looks": row["looks_taken"],
                                          "guard_replans": row.get("replans") or 0})
    if done.rowcount != 1:
        raise LookAlreadyRecordedError(
            f"comparison {w.name!r}: look {w.look['look_number']} was recorded by another "
            f"process first (or the comparison was restarted or replanned); nothing was written")
    return row["id"]


def upsert_cells(conn, comparison_id, cells, changes):
    """Write the cells this look changed (absolute values; the look's guard makes them safe)."""
    if not changes:
        return
    rows = []
    for k in changes:
        cell = cells[k]
        ratio = cell[3:] if len(cell) == 6 else (None, None, None)
        rows.append({"comparison_id": comparison_id, "kind": k[0], "group_index": k[1], "key": k[2],
                     "n": int(cell[0]), "sum_dev": float(cell[1]), "sum_dev2": float(cell[2]),
                     **{name: None if v is None else float(v)
                        for name, v in zip(("sum_den", "sum_den2", "sum_cross"), ratio)}})
    upsert = _CELL_UPSERTS.get(conn.dialect.name)
    if upsert is not None:
        conn.execute(upsert, rows)
        return
    for r in rows:  # other databases: update, else insert
        done = conn.execute(
            sa.update(_CELL).where(_CELL.c.comparison_id == r["comparison_id"], _CELL.c.kind == r["kind"],
                                   _CELL.c.group_index == r["group_index"], _CELL.c.key == r["key"])
            .values(**{name: r[name] for name in _CELL_SUMS}))
        if done.rowcount == 0:
            conn.execute(sa.insert(_CELL).values(**r))


def archive_active(engine, name: str) -> int:
    """Archive the active version of comparison ``name``; return that version's number."""
    with engine.begin() as conn:
        row = conn.execute(
            sa.select(_COMPARISON.c.id, _COMPARISON.c.version)
            .where(_COMPARISON.c.name == name, _COMPARISON.c.archived.is_(False))
            .order_by(_COMPARISON.c.version.desc()).limit(1)).first()
        if row is None:
            raise UnknownComparisonError(f"no active comparison named {name!r} in the store")
        conn.execute(sa.update(_COMPARISON).where(_COMPARISON.c.id == row.id).values(archived=True))
    return row.version


def write_display(engine, row: dict, display: dict) -> bool:
    """Record new display names and unit on the active version ``row`` without a look.

    For a version that takes no look now (it has stopped, or a check found nothing new): the
    stored design changes in its ``display`` alone (``display`` is the stored form, ``{}`` for
    none); no look row, no new version, nothing else of the row. Returns False when a look
    or an archive moved the version on first (that look stores the display itself).
    """
    design = {k: v for k, v in (row["design"] or {}).items() if k != "display"}
    if display:
        design["display"] = display
    try:
        with engine.begin() as conn:
            done = conn.execute(_DISPLAY_UPDATE, {"guard_id": row["id"], "guard_looks": row["looks_taken"],
                                                  "new_design": design})
    except OperationalError as exc:
        raise _store_error("record the display names in", exc) from None
    return done.rowcount == 1
