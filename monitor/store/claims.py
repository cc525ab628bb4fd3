"""Claims: which worker may look at a comparison right now.

A claim is one row of the ``lease`` table, taken in one short transaction by
a single guarded upsert, so two workers racing for the same comparison cannot
both win: the row is inserted when absent, and overwritten only when it has
expired or already belongs to the caller. A worker that dies holding a claim
simply loses it when it expires. The lease is an efficiency measure (no two
workers waste a source query on the same look); correctness rests on the
unique (comparison_id, look_number) constraint the look relies on, which
turns a late second writer into ``LookAlreadyRecordedError``.
"""

from __future__ import annotations

import logging
import os
import secrets
import socket
import threading
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import datetime, timedelta

from sqlalchemy import delete, or_, select, update
from sqlalchemy import insert as core_insert
from sqlalchemy.exc import IntegrityError
from sqlalchemy.dialects import postgresql, sqlite

from ..errors import ClaimHeldError, InvalidArgumentError
from .models import Lease

log = logging.getLogger("gapwatch.claims")

__all__ = ["Claim", "claim", "try_claim", "release", "renew", "current_holder", "make_holder"]


@dataclass(frozen=True)
class Claim:
    """A claim taken: who holds which comparison until when."""

    name: str
    holder: str
    expires_at: datetime


def make_holder() -> str:
    """A worker identity unique across machines and restarts: ``host:pid:random``."""
    return f"{socket.gethostname()}:{os.getpid()}:{secrets.token_hex(4)}"


def _check(name, holder, now, seconds):
    if not isinstance(name, str) or not name:
        raise InvalidArgumentError(f"name must be a non-empty string, got {name!r}")
    if not isinstance(holder, str) or not holder:
        raise InvalidArgumentError(f"holder must be a non-empty string, got {holder!r}")
    if not isinstance(now, datetime) or now.tzinfo is None:
        raise InvalidArgumentError(f"now must be an aware datetime, got {now!r}")
    if not (isinstance(seconds, (int, float)) and seconds > 0):
        raise InvalidArgumentError(f"seconds must be a positive number, got {seconds!r}")


def _insert_for(engine):
    dialect = engine.dialect.name
    if dialect == "postgresql":
        return postgresql.insert
    if dialect == "sqlite":
        return sqlite.insert
    return None


def try_claim(engine, name: str, holder: str, *, now: datetime, seconds: float) -> Claim | None:
    """Take (or extend) the claim on ``name`` if it is free, expired or ours.

    Returns the ``Claim`` when taken, ``None`` when another worker holds a live
    claim. One short transaction.
    """
    _check(name, holder, now, seconds)
    expires = now + timedelta(seconds=seconds)
    insert = _insert_for(engine)
    with engine.begin() as conn:
        if insert is not None:
            # INSERT ... ON CONFLICT DO UPDATE ... WHERE: the database decides the
            # race. On PostgreSQL a concurrent upsert waits on the row lock and
            # re-checks the WHERE against the committed row; SQLite serialises
            # writers, so the statement sees the winner's row.
            stmt = insert(Lease).values(comparison_name=name, holder=holder, expires_at=expires)
            stmt = stmt.on_conflict_do_update(
                index_elements=[Lease.comparison_name],
                set_={"holder": stmt.excluded.holder, "expires_at": stmt.excluded.expires_at},
                where=or_(Lease.expires_at < now, Lease.holder == holder),
            ).returning(Lease.holder)
            won = conn.execute(stmt).scalar_one_or_none()
            return Claim(name, holder, expires) if won == holder else None
        # Other databases: a guarded update, then an insert that the primary
        # key refuses when someone else got there first.
        result = conn.execute(
            update(Lease)
            .where(Lease.comparison_name == name, or_(Lease.expires_at < now, Lease.holder == holder))
            .values(holder=holder, expires_at=expires)
        )
        if result.rowcount == 1:
            return Claim(name, holder, expires)
        exists = conn.execute(select(Lease.holder).where(Lease.comparison_name == name)).first()
        if exists is not None:
            return None
    try:
        with engine.begin() as conn:
            conn.execute(core_insert(Lease).values(comparison_name=name, holder=holder, expires_at=expires))
    except IntegrityError:
        return None
    return Claim(name, holder, expires)


def renew(engine, taken: Claim, *, now: datetime, seconds: float) -> Claim | None:
    """Extend a claim we still hold; ``None`` if it was lost (expired and taken)."""
    return try_claim(engine, taken.name, taken.holder, now=now, seconds=seconds)


def release(engine, name: str, holder: str) -> bool:
    """Give the claim back, only if it is still ours. Returns whether a row was removed."""
    with engine.begin() as conn:
        result = conn.execute(delete(Lease).where(Lease.comparison_name == name, Lease.holder == holder))
        return result.rowcount == 1


def current_holder(engine, name: str, *, now: datetime) -> str | None:
    """The holder of a live claim on ``name``, or ``None`` when it is free."""
    with engine.connect() as conn:
        row = conn.execute(select(Lease.holder, Lease.expires_at).where(Lease.comparison_name == name)).first()
    if row is None or row.expires_at < now:
        return None
    return row.holder


def _keep_renewed(engine, taken, seconds, clock, stop):
    """Extend the claim every third of its length until ``stop`` is set."""
    while not stop.wait(seconds / 3.0):
        try:
            if try_claim(engine, taken.name, taken.holder, now=clock(), seconds=seconds) is None:
                log.warning("claim lost comparison=%s holder=%s (it expired and another worker took it)",
                            taken.name, taken.holder)
                return
        except Exception as exc:  # noqa: BLE001 - a failed renewal only lets the claim expire
            log.warning("claim renewal failed comparison=%s error=%s", taken.name, type(exc).__name__)


@contextmanager
def claim(engine, name: str, holder: str, *, now: datetime, seconds: float, renew_clock=None):
    """Hold the claim on comparison ``name`` for the ``with`` block.

    Parameters
    ----------
    engine : sqlalchemy.engine.Engine
        The history store.
    name : str
        Comparison name.
    holder : str
        This worker's identity (see ``make_holder``).
    now : datetime
        Aware "now" against which expiry is judged; injected so tests can freeze it.
    seconds : float
        How long the claim lasts if never released (a crashed worker's claim
        frees itself after this).
    renew_clock : callable, optional
        When given (a function returning the aware "now"), a background thread
        extends the claim every ``seconds / 3`` while the block runs, so a
        look slower than ``seconds`` keeps its claim; a dead worker's claim
        still expires, since nobody renews it.

    Raises
    ------
    ClaimHeldError
        Another worker holds a live claim on ``name``.

    Examples
    --------
    >>> with claim(engine, "pick-seconds", make_holder(), now=now, seconds=120):  # doctest: +SKIP
    ...     take_look(...)
    """
    taken = try_claim(engine, name, holder, now=now, seconds=seconds)
    if taken is None:
        raise ClaimHeldError(f"comparison {name!r} is claimed by another worker")
    stop = threading.Event()
    renewer = None
    if renew_clock is not None:
        renewer = threading.Thread(target=_keep_renewed, args=(engine, taken, seconds, renew_clock, stop),
                                   name=f"claim-renewal:{name}", daemon=True)
        renewer.start()
    try:
        yield taken
    finally:
        stop.set()
        if renewer is not None:
            renewer.join()
        try:
            release(engine, name, holder)
        except Exception:  # noqa: BLE001 - an unreleased claim only expires later
            pass
