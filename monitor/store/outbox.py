"""The one writer of alert rows: an alert and one delivery per channel, in the caller's transaction.

Decision alerts (written with the look that changed the state) and source alerts (written
with the source-health record) both come here, so one rule holds for every alert:

* with channels to notify, the alert is ``pending`` and each channel gets a pending
  delivery due at once;
* with none (``notify = []``), the alert is on record and nobody is left to tell, so it is
  written ``delivered`` with no deliveries. A pending alert without deliveries would stay
  pending for ever, since delivery only ever settles an alert through its deliveries.
"""

from __future__ import annotations

import uuid
from datetime import datetime

import sqlalchemy as sa

from ..vocabulary import json_safe
from .models import Alert, Delivery

__all__ = ["write_alert", "initial_alert_state"]

_INSERT_ALERT = sa.insert(Alert.__table__)
_INSERT_DELIVERY = sa.insert(Delivery.__table__)


def initial_alert_state(notify) -> str:
    """The state a new alert is written in: pending with channels to notify, else delivered."""
    return "pending" if notify else "delivered"


def write_alert(conn, *, comparison_id: int | None, comparison_name: str, look_id: int | None, kind: str,
                created_at: datetime, payload: dict, notify=()) -> str:
    """Write one alert and its deliveries on ``conn`` (inside the caller's transaction).

    ``payload`` is what the alert says (see ``monitor.alerts.wording``); the new alert's id
    is put first in it, so a receiver always finds the stable id. Returns that id.
    """
    alert_id = str(uuid.uuid4())
    channels = list(notify or ())
    conn.execute(_INSERT_ALERT, dict(
        id=alert_id, comparison_id=comparison_id, comparison_name=comparison_name, look_id=look_id,
        kind=kind, created_at=created_at, payload=json_safe({"alert_id": alert_id, **payload}),
        state=initial_alert_state(channels), acknowledged_at=None, acknowledged_by=None))
    if channels:
        conn.execute(_INSERT_DELIVERY, [
            {"alert_id": alert_id, "channel": channel, "state": "pending", "attempts": 0,
             "next_attempt_at": created_at}
            for channel in channels])
    return alert_id
