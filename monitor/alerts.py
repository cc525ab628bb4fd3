"""Alert channels and the outbox delivery loop.

An alert is written to the store in the same transaction as the look that
changed the state (the outbox); delivering it is a separate, repeatable step.
``deliver_pending`` picks due ``delivery`` rows, sends each through its
channel outside any transaction, and records the outcome in a short
transaction of its own: delivered, or retried later with exponential backoff,
or after the last attempt failed. The alert id travels with every attempt so
a receiver can drop repeats. Channels are a small abstract base with tiny
concrete variants: ``log``, ``webhook`` and ``email``.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import logging
import math
import re
import smtplib
import uuid
from abc import ABC, abstractmethod
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from email.message import EmailMessage

import requests
from sqlalchemy import and_, func, select, update
from sqlalchemy.dialects import postgresql, sqlite

from .errors import AlertDeliveryError, InvalidArgumentError
from .store.models import Alert, Comparison, Delivery, SourceHealth

__all__ = [
    "Channel",
    "LogChannel",
    "WebhookChannel",
    "EmailChannel",
    "build_channels",
    "sign_body",
    "webhook_body",
    "email_text",
    "deliver_pending",
    "backoff_seconds",
    "record_source_unreachable",
    "record_source_recovered",
    "source_backoff_until",
    "redact",
    "SIGNATURE_HEADER",
    "ALERT_ID_HEADER",
]

log = logging.getLogger("gapwatch.alerts")

SIGNATURE_HEADER = "X-Gapwatch-Signature"
ALERT_ID_HEADER = "X-Gapwatch-Alert-Id"

# Seconds before the first retry; each later retry waits twice as long, up to the cap.
FIRST_RETRY_SECONDS = 5.0
# How long a delivery picked by one worker stays invisible to the others while it is sent.
IN_FLIGHT_SECONDS = 120.0

_URL_PASSWORD = re.compile(r"(://[^:/@\s]*:)[^@\s]*@")


def redact(text, secrets=()) -> str:
    """``text`` with URL passwords and the given secret strings replaced by ``***``."""
    text = _URL_PASSWORD.sub(r"\1***@", str(text))
    for secret in secrets:
        if secret:
            text = text.replace(secret, "***")
    return text


# --------------------------------------------------------------------------- what an alert says

_DECISION_WORDS = {
    "difference_found": (
        "difference found",
        "The difference between {g1} and {g2} crossed the monitoring boundary at look {look}. "
        "The data so far are unlikely if the two groups did not differ, and the chance of such a "
        "false alarm is held at {alpha} across all the planned looks. It does not say why the groups "
        "differ, and an estimate taken at an early stop tends to overstate the size of the gap: "
        "read the interval, not only the estimate.",
    ),
    "no_material_difference": (
        "no material difference",
        "The difference between {g1} and {g2} crossed the futility boundary at look {look}: a "
        "difference as large as the one the plan was built to detect is now unlikely. It does not "
        "prove the groups are the same; a smaller difference, inside the interval, is still possible.",
    ),
    "plan_complete": (
        "plan complete without a difference",
        "The comparison of {g1} and {g2} reached its planned number of events at look {look} without "
        "crossing the boundary. No difference was shown at the planned size; that is not proof that "
        "none exists, and the interval shows which differences the data still allow.",
    ),
    "data_problem": (
        "data problem",
        "At look {look} the data for {g1} and {g2} could not support a test (for example an empty "
        "group, no spread in the values, or every row excluded). This says nothing about whether the "
        "groups differ; the comparison keeps looking and will resume when usable data arrive.",
    ),
    "awaiting_clusters": (
        "waiting for enough clusters",
        "The comparison of {g1} and {g2} has too few clusters for a test at look {look}. No decision "
        "is possible yet; this is not a signal about the groups.",
    ),
    "collecting": (
        "collecting again",
        "The comparison of {g1} and {g2} is collecting again at look {look}: no boundary has been "
        "crossed. This is not a signal of a difference or of its absence.",
    ),
}

_KIND_WORDS = {
    "source_unreachable": (
        "source unreachable",
        "The source database for this comparison has not answered since {since}; no looks are being "
        "recorded. This is an operations problem, not a signal about the groups. Looks resume by "
        "themselves when the source answers again, and no data are lost.",
    ),
    "source_recovered": (
        "source reachable again",
        "The source database for this comparison answers again and looks have resumed. This is not a "
        "signal about the groups.",
    ),
}


def _finite(value):
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def _clean(value):
    if isinstance(value, dict):
        return {str(k): _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    if isinstance(value, datetime):
        return value.isoformat()
    return _finite(value)


def webhook_body(alert_id: str, payload: dict) -> bytes:
    """The exact bytes POSTed for an alert: JSON, keys sorted, non-finite numbers as null.

    Always carries ``alert_id`` (the stable id), ``comparison``, ``kind``,
    ``decision``, ``look``, ``estimate`` and ``interval`` ([low, high]).
    """
    doc = _clean(dict(payload))
    doc["alert_id"] = alert_id
    for key in ("comparison", "kind", "decision", "look", "estimate", "ci_low", "ci_high"):
        doc.setdefault(key, None)
    doc["interval"] = [doc.get("ci_low"), doc.get("ci_high")]
    return json.dumps(doc, sort_keys=True, separators=(",", ":")).encode("utf-8")


def sign_body(body: bytes, secret: str) -> str:
    """``sha256=<hex>``: HMAC-SHA256 of the raw body keyed with the channel's secret."""
    digest = hmac.new(secret.encode("utf-8"), body, hashlib.sha256).hexdigest()
    return f"sha256={digest}"


def _fmt(value, digits=4):
    if value is None:
        return "n/a"
    if isinstance(value, float):
        return f"{value:.{digits}g}"
    return str(value)


def email_text(alert_id: str, payload: dict) -> tuple[str, str]:
    """Subject and plain-text body of an alert e-mail."""
    comparison = payload.get("comparison", "?")
    kind = payload.get("kind") or "state_change"
    decision = payload.get("decision")
    groups = payload.get("groups") or ["group 1", "group 2"]
    g1, g2 = (str(groups[0]), str(groups[1])) if len(groups) >= 2 else ("group 1", "group 2")
    if kind in _KIND_WORDS:
        title, meaning = _KIND_WORDS[kind]
    else:
        title, meaning = _DECISION_WORDS.get(
            decision, (str(decision), "The comparison changed state at look {look}.")
        )
    meaning = meaning.format(
        g1=g1, g2=g2, look=payload.get("look", "?"),
        alpha=_fmt(payload["alpha"], 3) if payload.get("alpha") else "the planned level",
        since=payload.get("failing_since", "?"),
    )
    subject = f"gapwatch: {comparison} - {title}"
    lines = [meaning, ""]
    if payload.get("message"):
        lines += [str(payload["message"]), ""]
    if kind not in _KIND_WORDS:
        lines += [
            f"Comparison: {comparison} (version {payload.get('version', '?')})",
            f"Look: {payload.get('look', '?')} as of {payload.get('as_of', '?')}",
            f"Estimate ({g1} minus {g2}): {_fmt(payload.get('estimate'))}",
            f"Interval: {_fmt(payload.get('ci_low'))} to {_fmt(payload.get('ci_high'))}",
            f"p-value at this look: {_fmt(payload.get('p_value'))}",
            f"Events: {g1} {payload.get('n1', '?')}, {g2} {payload.get('n2', '?')}; "
            f"information fraction {_fmt(payload.get('fraction'), 3)}",
        ]
    else:
        lines += [f"Comparison: {comparison}"]
        if payload.get("error"):
            lines += [f"Last error: {payload['error']}"]
    lines += ["", f"Alert id: {alert_id} (the same id on every repeat of this alert)"]
    return subject, "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- channels


class Channel(ABC):
    """Somewhere an alert goes. ``send`` raises ``AlertDeliveryError`` on failure."""

    type: str = ""

    def __init__(self, name: str):
        self.name = name

    @abstractmethod
    def send(self, alert_id: str, payload: dict) -> None:
        """Deliver one alert (may be called again with the same id after a failure)."""

    def secrets(self) -> tuple[str, ...]:
        """Strings that must never appear in a log line or an error message."""
        return ()

    def _fail(self, what, exc=None) -> AlertDeliveryError:
        detail = f": {type(exc).__name__}: {exc}" if exc is not None else ""
        return AlertDeliveryError(redact(f"channel {self.name!r} ({self.type}) {what}{detail}", self.secrets()))

    def __repr__(self):
        return f"{type(self).__name__}(name={self.name!r})"


class LogChannel(Channel):
    """One structured log line per alert; with ``path``, also one JSON line appended to that file."""

    type = "log"

    def __init__(self, name: str, path=None, level="warning", logger_name: str = "gapwatch.alert"):
        super().__init__(name)
        self.logger = logging.getLogger(logger_name)
        level_number = logging.getLevelName(str(level).upper())
        if not isinstance(level_number, int):
            raise InvalidArgumentError(f"channel {name!r}: level must be debug, info, warning or error, got {level!r}")
        self.level = level_number
        self.path = path

    def send(self, alert_id, payload):
        fields = {
            "alert_id": alert_id,
            "comparison": payload.get("comparison"),
            "kind": payload.get("kind"),
            "decision": payload.get("decision"),
            "look": payload.get("look"),
            "estimate": _fmt(payload.get("estimate")),
            "interval": f"[{_fmt(payload.get('ci_low'))}, {_fmt(payload.get('ci_high'))}]",
        }
        text = " ".join(f"{k}={v}" for k, v in fields.items())
        self.logger.log(self.level, "alert %s message=%s", text, json.dumps(payload.get("message", "")))
        if self.path:
            try:
                with open(self.path, "ab") as handle:
                    handle.write(webhook_body(alert_id, payload) + b"\n")
            except OSError as exc:
                raise self._fail(f"could not append to {self.path}", exc) from None


class WebhookChannel(Channel):
    """A signed JSON POST."""

    type = "webhook"

    def __init__(self, name: str, url: str, secret: str | None = None, timeout: float = 5.0, headers=None):
        super().__init__(name)
        if not url or not str(url).startswith(("http://", "https://")):
            raise InvalidArgumentError(f"channel {name!r}: url must start with http:// or https://, got {url!r}")
        self.url = url
        self.secret = secret or None
        self.timeout = float(timeout)
        self.extra_headers = {str(k): str(v) for k, v in dict(headers or {}).items()}

    def secrets(self):
        # Extra headers often carry tokens: treat their values as secrets too.
        return tuple(v for v in (self.secret, *self.extra_headers.values()) if v)

    def headers_for(self, alert_id: str, body: bytes) -> dict:
        headers = dict(self.extra_headers)
        headers.update({"Content-Type": "application/json", ALERT_ID_HEADER: alert_id, "User-Agent": "gapwatch"})
        if self.secret:
            headers[SIGNATURE_HEADER] = sign_body(body, self.secret)
        return headers

    def send(self, alert_id, payload):
        body = webhook_body(alert_id, payload)
        try:
            response = requests.post(self.url, data=body, headers=self.headers_for(alert_id, body), timeout=self.timeout)
        except requests.RequestException as exc:
            raise self._fail("could not reach the receiver", exc) from None
        if not 200 <= response.status_code < 300:
            raise self._fail(f"receiver answered HTTP {response.status_code}")


class EmailChannel(Channel):
    """A plain-text e-mail through SMTP (optional STARTTLS and login)."""

    type = "email"

    def __init__(self, name, host, port=25, sender=None, recipients=(), user=None, password=None,
                 starttls=False, timeout=10.0, ssl=False):
        super().__init__(name)
        if not host:
            raise InvalidArgumentError(f"channel {name!r}: host must be given, got {host!r}")
        if isinstance(recipients, str):
            recipients = [recipients]
        if not recipients:
            raise InvalidArgumentError(f"channel {name!r}: recipients must list at least one address, got {recipients!r}")
        if not sender:
            raise InvalidArgumentError(f"channel {name!r}: sender must be given, got {sender!r}")
        self.host, self.port = host, int(port)
        self.sender, self.recipients = sender, list(recipients)
        self.user, self.password = user or None, password or None
        self.starttls = bool(starttls)
        self.ssl = bool(ssl)
        self.timeout = float(timeout)

    def secrets(self):
        return (self.password,) if self.password else ()

    def message_for(self, alert_id, payload) -> EmailMessage:
        subject, body = email_text(alert_id, payload)
        message = EmailMessage()
        message["Subject"] = subject
        message["From"] = self.sender
        message["To"] = ", ".join(self.recipients)
        # Stable per alert, so mail clients thread repeats together.
        message["Message-ID"] = f"<{alert_id}@gapwatch>"
        message[ALERT_ID_HEADER] = alert_id
        message.set_content(body)
        return message

    def send(self, alert_id, payload):
        message = self.message_for(alert_id, payload)
        try:
            connect = smtplib.SMTP_SSL if self.ssl else smtplib.SMTP
            with connect(self.host, self.port, timeout=self.timeout) as smtp:
                if self.starttls and not self.ssl:
                    smtp.starttls()
                if self.user and self.password:
                    smtp.login(self.user, self.password)
                smtp.send_message(message)
        except (smtplib.SMTPException, OSError) as exc:
            raise self._fail("could not send the e-mail", exc) from None


def _seconds(value, default):
    if value is None:
        return default
    if isinstance(value, timedelta):
        return value.total_seconds()
    if isinstance(value, (int, float)):
        return float(value)
    text = str(value).strip().lower()
    units = {"ms": 0.001, "s": 1, "m": 60, "h": 3600, "d": 86400}
    for unit in ("ms", "s", "m", "h", "d"):
        if text.endswith(unit) and text[: -len(unit)].replace(".", "", 1).isdigit():
            return float(text[: -len(unit)]) * units[unit]
    return float(text)


def build_channels(channel_configs, base_dir=None) -> dict[str, Channel]:
    """Channels from ``Config.channels`` (name -> object with ``type`` and ``options``).

    A relative log ``path`` is taken from ``base_dir`` (the configuration file's folder).
    """
    from pathlib import Path

    channels = {}
    for name, cfg in dict(channel_configs or {}).items():
        kind = getattr(cfg, "type", None)
        options = dict(getattr(cfg, "options", None) or {})
        if kind == "log":
            path = options.get("path")
            if path and base_dir is not None and not Path(path).is_absolute():
                path = str(Path(base_dir) / path)
            channels[name] = LogChannel(name, path, options.get("level", "warning"))
        elif kind == "webhook":
            channels[name] = WebhookChannel(
                name, options.get("url"), options.get("secret"), _seconds(options.get("timeout"), 5.0),
                options.get("headers"),
            )
        elif kind == "email":
            channels[name] = EmailChannel(
                name,
                options.get("host"),
                options.get("port", 25),
                options.get("sender"),
                options.get("recipients", ()),
                options.get("user"),
                options.get("password"),
                options.get("starttls", False),
                _seconds(options.get("timeout"), 10.0),
                options.get("ssl", False),
            )
        else:
            raise InvalidArgumentError(f"channel {name!r}: type must be log, webhook or email, got {kind!r}")
    return channels


# --------------------------------------------------------------------------- delivery


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
    if not isinstance(now, datetime) or now.tzinfo is None:
        raise InvalidArgumentError(f"now must be an aware datetime, got {now!r}")
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


# --------------------------------------------------------------------------- source health


def _insert_ignore(engine, table, values):
    dialect = engine.dialect.name
    if dialect == "postgresql":
        return postgresql.insert(table).values(**values).on_conflict_do_nothing()
    if dialect == "sqlite":
        return sqlite.insert(table).values(**values).on_conflict_do_nothing()
    return None


def _new_alert(conn, *, name, kind, now, payload, notify):
    comparison = conn.execute(
        select(Comparison.id, Comparison.version).where(Comparison.name == name)
        .order_by(Comparison.version.desc()).limit(1)
    ).first()
    alert_id = str(uuid.uuid4())
    body = {
        "alert_id": alert_id,
        "comparison": name,
        "version": comparison.version if comparison else None,
        "kind": kind,
        "decision": None,
        "look": None,
        "as_of": now.isoformat(),
        "estimate": None,
        "ci_low": None,
        "ci_high": None,
        **payload,
    }
    conn.execute(Alert.__table__.insert().values(
        id=alert_id, comparison_id=comparison.id if comparison else None, comparison_name=name,
        look_id=None, kind=kind, created_at=now, payload=body, state="pending",
    ))
    for channel in notify:
        conn.execute(Delivery.__table__.insert().values(
            alert_id=alert_id, channel=channel, state="pending", attempts=0, next_attempt_at=now,
        ))
    if not notify:
        # Nowhere to send it: it is on record, which is all delivery would add.
        conn.execute(update(Alert).where(Alert.id == alert_id).values(state="delivered"))
    return alert_id


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
        message = (f"The source for comparison {name} has not answered since {since.isoformat()}; "
                   f"no looks are being recorded until it does.")
        alert_id = _new_alert(conn, name=name, kind="source_unreachable", now=now, notify=tuple(notify),
                              payload={"failing_since": since.isoformat(), "error": error, "message": message})
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
        message = f"The source for comparison {name} answers again; looks have resumed."
        alert_id = _new_alert(conn, name=name, kind="source_recovered", now=now, notify=tuple(notify),
                              payload={"failing_since": since.isoformat() if since else None, "message": message})
    log.info("source recovered alert written comparison=%s alert_id=%s", name, alert_id)
    return alert_id


def source_backoff_until(engine, name: str, *, first: float, cap: float) -> datetime | None:
    """When comparison ``name`` may next try its source, or ``None`` if it is healthy."""
    with engine.connect() as conn:
        row = conn.execute(
            select(SourceHealth.failures, SourceHealth.last_attempt_at, SourceHealth.failing_since)
            .where(and_(SourceHealth.comparison_name == name))
        ).first()
    if row is None or row.failing_since is None or not row.failures or row.last_attempt_at is None:
        return None
    return row.last_attempt_at + timedelta(seconds=backoff_seconds(row.failures, first=first, cap=cap))
