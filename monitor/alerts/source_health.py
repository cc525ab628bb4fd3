"""Source health: count a comparison's failed source reads, alert once per outage, back off.

The alert rows themselves are written by the store's one alert writer, in the same
transaction as the health record that decides them.
"""

from __future__ import annotations

import logging
from datetime import datetime, timedelta

from sqlalchemy import func, select, update
from sqlalchemy.dialects import postgresql, sqlite

from ..store.models import Comparison, SourceHealth
from ..store.outbox import write_alert
from .delivery import backoff_seconds
from .redaction import redact
from .wording import source_payload, source_recovered_message, source_unreachable_message

__all__ = ["record_source_unreachable", "record_source_recovered", "source_backoff_until"]

log = logging.getLogger("gapwatch.alerts")


def _insert_ignore(engine, table, values):
    dialect = engine.dialect.name
    if dialect == "postgresql":
        return postgresql.insert(table).values(**values).on_conflict_do_nothing()
    if dialect == "sqlite":
        return sqlite.insert(table).values(**values).on_conflict_do_nothing()
    return None


def _source_alert(conn, *, name, kind, now, notify, **extra) -> str:
    """Write a source alert on the comparison's newest version (if it has one yet)."""
    comparison = conn.execute(
        select(Comparison.id, Comparison.version).where(Comparison.name == name)
        .order_by(Comparison.version.desc()).limit(1)
    ).first()
    payload = source_payload(name, comparison.version if comparison else None, kind, now, **extra)
    return write_alert(conn, comparison_id=comparison.id if comparison else None, comparison_name=name,
                       look_id=None, kind=kind, created_at=now, payload=payload, notify=notify)


def record_source_unreachable(engine, name: str, error: str, *, now: datetime, alert_after: float,
                              notify=(), secrets=()) -> str | None:
    """Record one failed look at comparison ``name`` because its source failed.

    Keeps ``source_health`` (first failure, count, last error, last attempt)
    and, once the source has been failing for ``alert_after`` seconds, writes
    ONE ``source_unreachable`` alert (with a delivery per ``notify`` channel)
    in the same transaction. Returns the new alert id, or ``None``.
    """
    error = redact(error, secrets)[:2000]
    insert = _insert_ignore(engine, SourceHealth, {"comparison_name": name, "failures": 0, "alerted": False})
    with engine.begin() as conn:
        if insert is not None:
            conn.execute(insert)
        elif conn.execute(select(SourceHealth.comparison_name).where(SourceHealth.comparison_name == name)).first() is None:
            conn.execute(SourceHealth.__table__.insert().values(comparison_name=name, failures=0, alerted=False))
        conn.execute(
            update(SourceHealth).where(SourceHealth.comparison_name == name)
            .values(failing_since=func.coalesce(SourceHealth.failing_since, now),
                    failures=SourceHealth.failures + 1, last_error=error, last_attempt_at=now)
        )
        since = conn.execute(select(SourceHealth.failing_since).where(SourceHealth.comparison_name == name)).scalar_one()
        if (now - since).total_seconds() < alert_after:
            return None
        # Only the worker whose update flips the flag writes the alert.
        flipped = conn.execute(
            update(SourceHealth).where(SourceHealth.comparison_name == name, SourceHealth.alerted.is_(False))
            .values(alerted=True)
        ).rowcount
        if flipped != 1:
            return None
        alert_id = _source_alert(conn, name=name, kind="source_unreachable", now=now, notify=tuple(notify),
                                 failing_since=since.isoformat(), error=error,
                                 message=source_unreachable_message(name, since))
    log.warning("source unreachable alert written comparison=%s alert_id=%s", name, alert_id)
    return alert_id


def record_source_recovered(engine, name: str, *, now: datetime, notify=()) -> str | None:
    """A look at ``name`` succeeded: clear its failure record.

    Writes a ``source_recovered`` alert only when a ``source_unreachable``
    alert was sent for this outage. Returns that alert's id, or ``None``.
    """
    with engine.begin() as conn:
        row = conn.execute(
            select(SourceHealth.failing_since, SourceHealth.alerted).where(SourceHealth.comparison_name == name)
        ).first()
        if row is None or (row.failing_since is None and not row.alerted):
            return None
        was_alerted, since = row.alerted, row.failing_since
        conn.execute(update(SourceHealth).where(SourceHealth.comparison_name == name)
                     .values(failing_since=None, failures=0, alerted=False, last_attempt_at=now))
        if not was_alerted:
            return None
        alert_id = _source_alert(conn, name=name, kind="source_recovered", now=now, notify=tuple(notify),
                                 failing_since=since.isoformat() if since else None,
                                 message=source_recovered_message(name))
    log.info("source recovered alert written comparison=%s alert_id=%s", name, alert_id)
    return alert_id


def source_backoff_until(engine, name: str, *, first: float, cap: float) -> datetime | None:
    """When comparison ``name`` may next try its source, or ``None`` if it is healthy."""
    with engine.connect() as conn:
        row = conn.execute(
            select(SourceHealth.failures, SourceHealth.last_attempt_at, SourceHealth.failing_since)
            .where(SourceHealth.comparison_name == name)
        ).first()
    if row is None or row.failing_since is None or not row.failures or row.last_attempt_at is None:
        return None
    return row.last_attempt_at + timedelta(seconds=backoff_seconds(row.failures, first=first, cap=cap))
