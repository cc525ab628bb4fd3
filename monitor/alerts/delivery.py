"""Outbox delivery: send each due delivery through its channel, retrying with backoff.

``deliver_pending`` picks due ``delivery`` rows, sends each through its channel outside
any transaction, and records the outcome in a short transaction of its own: delivered, or
retried later with exponential backoff, or failed after the last attempt. The alert id
travels with every attempt so a receiver can drop repeats.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from datetime import datetime, timedelta

from sqlalchemy import select, update

from ..errors import AlertDeliveryError, InvalidArgumentError
from ..store.models import Alert, Delivery
from ..vocabulary import as_utc
from .redaction import redact

__all__ = ["deliver_pending", "backoff_seconds", "FIRST_RETRY_SECONDS", "IN_FLIGHT_SECONDS"]

log = logging.getLogger("gapwatch.alerts")

# Seconds before the first retry; each later retry waits twice as long, up to the cap.
FIRST_RETRY_SECONDS = 5.0
# How long a delivery picked by one worker stays invisible to the others while it is sent.
IN_FLIGHT_SECONDS = 120.0


def _as_utc(moment, name) -> datetime:
    try:
        return as_utc(moment, name)
    except ValueError as exc:
        raise InvalidArgumentError(str(exc)) from None


def backoff_seconds(attempts: int, *, first: float = FIRST_RETRY_SECONDS, cap: float = 600.0) -> float:
    """Wait before the next try after ``attempts`` failures: first, 2*first, 4*first, ... up to cap."""
    if attempts < 1:
        return 0.0
    return float(min(cap, first * 2.0 ** min(attempts - 1, 60)))


@dataclass
class _Picked:
    delivery_id: int
    alert_id: str
    channel: str
    attempts: int
    payload: dict = field(default_factory=dict)


def _pick_due(engine, *, now, limit, in_flight) -> list[_Picked]:
    """Due deliveries, each made invisible to other workers while we send it."""
    with engine.begin() as conn:
        rows = conn.execute(
            select(Delivery.id, Delivery.alert_id, Delivery.channel, Delivery.attempts,
                   Delivery.next_attempt_at, Alert.payload)
            .join(Alert, Alert.id == Delivery.alert_id)
            .where(Delivery.state == "pending", Delivery.next_attempt_at <= now)
            .order_by(Delivery.next_attempt_at, Delivery.id)
            .limit(limit)
        ).all()
    picked = []
    for row in rows:
        # Compare-and-set on the attempt count: if another worker picked the row
        # first, it already counted the attempt and our update matches nothing.
        with engine.begin() as conn:
            result = conn.execute(
                update(Delivery)
                .where(Delivery.id == row.id, Delivery.state == "pending",
                       Delivery.attempts == row.attempts)
                .values(next_attempt_at=now + timedelta(seconds=in_flight), attempts=row.attempts + 1)
            )
        if result.rowcount == 1:
            picked.append(_Picked(row.id, row.alert_id, row.channel, row.attempts + 1, dict(row.payload or {})))
    return picked


def _settle_alert(conn, alert_id):
    """An alert is delivered when all its deliveries are, failed as soon as one has failed."""
    states = [s for (s,) in conn.execute(select(Delivery.state).where(Delivery.alert_id == alert_id))]
    if states and all(s == "delivered" for s in states):
        new = "delivered"
    elif any(s == "failed" for s in states):
        new = "failed"
    else:
        return
    # An acknowledged alert stays acknowledged.
    conn.execute(update(Alert).where(Alert.id == alert_id, Alert.state.in_(("pending", "delivered", "failed")))
                 .values(state=new))


def deliver_pending(engine, channels, *, now, max_attempts: int = 8, max_backoff: float = 600.0,
                    first_backoff: float = FIRST_RETRY_SECONDS, limit: int = 100,
                    in_flight: float = IN_FLIGHT_SECONDS) -> int:
    """Send every due delivery once; return how many were delivered.

    Parameters
    ----------
    engine : sqlalchemy.engine.Engine
        The history store.
    channels : dict
        Channel name -> ``Channel``. A delivery whose channel is not configured
        counts as a failed attempt (it may come back in a later configuration).
    now : datetime
        Aware "now": which deliveries are due, and when retries fall due.
    max_attempts : int
        After this many failed attempts a delivery, and its alert, is failed.
    max_backoff : float
        Cap, in seconds, of the exponential wait between attempts.
    first_backoff : float
        Wait after the first failure, doubled after each further one.

    Notes
    -----
    Network I/O happens outside any store transaction. Errors are logged with
    secrets redacted and never raised: one bad channel does not stop the others.
    """
    now = _as_utc(now, "now")
    if not (isinstance(max_attempts, int) and max_attempts >= 1):
        raise InvalidArgumentError(f"max_attempts must be a positive integer, got {max_attempts!r}")
    channels = dict(channels or {})
    all_secrets = tuple(s for ch in channels.values() for s in ch.secrets())
    delivered = 0
    for item in _pick_due(engine, now=now, limit=limit, in_flight=in_flight):
        channel = channels.get(item.channel)
        error = None
        try:
            if channel is None:
                raise AlertDeliveryError(f"channel {item.channel!r} is not configured")
            channel.send(item.alert_id, item.payload)
        except Exception as exc:  # noqa: BLE001 - a channel failure must not stop the loop
            error = redact(str(exc) if isinstance(exc, AlertDeliveryError) else f"{type(exc).__name__}: {exc}",
                           all_secrets)
        with engine.begin() as conn:
            if error is None:
                conn.execute(update(Delivery).where(Delivery.id == item.delivery_id)
                             .values(state="delivered", delivered_at=now, last_error=None))
                delivered += 1
                log.info("alert delivered alert_id=%s channel=%s attempt=%d",
                         item.alert_id, item.channel, item.attempts)
            elif item.attempts >= max_attempts:
                conn.execute(update(Delivery).where(Delivery.id == item.delivery_id)
                             .values(state="failed", last_error=error))
                log.error("alert delivery failed for good alert_id=%s channel=%s attempts=%d error=%s",
                          item.alert_id, item.channel, item.attempts, error)
            else:
                wait = backoff_seconds(item.attempts, first=first_backoff, cap=max_backoff)
                conn.execute(update(Delivery).where(Delivery.id == item.delivery_id)
                             .values(next_attempt_at=now + timedelta(seconds=wait), last_error=error))
                log.warning("alert delivery will be retried alert_id=%s channel=%s attempt=%d retry_in_s=%.0f error=%s",
                            item.alert_id, item.channel, item.attempts, wait, error)
            _settle_alert(conn, item.alert_id)
    return delivered
