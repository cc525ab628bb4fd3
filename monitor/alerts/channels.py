"""Where alerts go: an abstract channel carrying the shared logic, and tiny variants.

A channel turns an alert into its own form and hands it over; the base class turns a
failure of the transport into one ``AlertDeliveryError`` whose text never holds a secret.
Adding a channel means a subclass with a ``type``, an ``__init__`` checking its options,
and ``_transmit``; ``build_channels`` learns its name.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import logging
import smtplib
from abc import ABC, abstractmethod
from email.message import EmailMessage
from pathlib import Path

import requests

from ..errors import AlertDeliveryError, InvalidArgumentError
from ..vocabulary import parse_duration
from .redaction import redact
from .wording import email_text, figure, webhook_body

__all__ = [
    "Channel",
    "LogChannel",
    "WebhookChannel",
    "EmailChannel",
    "build_channels",
    "sign_body",
    "SIGNATURE_HEADER",
    "ALERT_ID_HEADER",
]

SIGNATURE_HEADER = "X-Gapwatch-Signature"
ALERT_ID_HEADER = "X-Gapwatch-Alert-Id"


def sign_body(body: bytes, secret: str) -> str:
    """``sha256=<hex>``: HMAC-SHA256 of the raw body keyed with the channel's secret."""
    digest = hmac.new(secret.encode("utf-8"), body, hashlib.sha256).hexdigest()
    return f"sha256={digest}"


class Channel(ABC):
    """Somewhere an alert goes. ``send`` raises ``AlertDeliveryError`` on failure."""

    type: str = ""
    # Errors of the transport that mean "not delivered, try again later".
    transport_errors: tuple = (OSError,)
    # What failed, in the words of the error message.
    failure: str = "could not deliver the alert"

    def __init__(self, name: str):
        self.name = name

    def send(self, alert_id: str, payload: dict) -> None:
        """Deliver one alert (may be called again with the same id after a failure)."""
        try:
            self._transmit(alert_id, payload)
        except AlertDeliveryError:
            raise
        except self.transport_errors as exc:
            raise self._fail(self.failure, exc) from None

    @abstractmethod
    def _transmit(self, alert_id: str, payload: dict) -> None:
        """Hand one alert to the transport; raise one of ``transport_errors`` or ``_fail(...)``."""

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

    @property
    def failure(self):
        return f"could not append to {self.path}"

    def _transmit(self, alert_id, payload):
        fields = {
            "alert_id": alert_id,
            "comparison": payload.get("comparison"),
            "kind": payload.get("kind"),
            "decision": payload.get("decision"),
            "look": payload.get("look"),
            "estimate": figure(payload.get("estimate")),
            "interval": f"[{figure(payload.get('ci_low'))}, {figure(payload.get('ci_high'))}]",
        }
        text = " ".join(f"{k}={v}" for k, v in fields.items())
        self.logger.log(self.level, "alert %s message=%s", text, json.dumps(payload.get("message", "")))
        if self.path:
            with open(self.path, "ab") as handle:
                handle.write(webhook_body(alert_id, payload) + b"\n")


class WebhookChannel(Channel):
    """A signed JSON POST."""

    type = "webhook"
    transport_errors = (requests.RequestException,)
    failure = "could not reach the receiver"

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

    def _transmit(self, alert_id, payload):
        body = webhook_body(alert_id, payload)
        response = requests.post(self.url, data=body, headers=self.headers_for(alert_id, body), timeout=self.timeout)
        if not 200 <= response.status_code < 300:
            raise self._fail(f"receiver answered HTTP {response.status_code}")


class EmailChannel(Channel):
    """A plain-text e-mail through SMTP (optional STARTTLS and login)."""

    type = "email"
    transport_errors = (smtplib.SMTPException, OSError)
    failure = "could not send the e-mail"

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

    def _transmit(self, alert_id, payload):
        message = self.message_for(alert_id, payload)
        connect = smtplib.SMTP_SSL if self.ssl else smtplib.SMTP
        with connect(self.host, self.port, timeout=self.timeout) as smtp:
            if self.starttls and not self.ssl:
                smtp.starttls()
            if self.user and self.password:
                smtp.login(self.user, self.password)
            smtp.send_message(message)


def _timeout(name, options, default) -> float:
    """The channel's ``timeout`` in seconds (the configuration has usually converted it already)."""
    value = options.get("timeout")
    if value is None:
        return default
    try:
        return parse_duration(value)
    except ValueError as exc:
        raise InvalidArgumentError(f"channel {name!r}: timeout {exc}") from None


def build_channels(channel_configs, base_dir=None) -> dict[str, Channel]:
    """Channels from ``Config.channels`` (name -> object with ``type`` and ``options``).

    A relative log ``path`` is taken from ``base_dir`` (the configuration file's folder).
    """
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
                name, options.get("url"), options.get("secret"), _timeout(name, options, 5.0),
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
                _timeout(name, options, 10.0),
                options.get("ssl", False),
            )
        else:
            raise InvalidArgumentError(f"channel {name!r}: type must be log, webhook or email, got {kind!r}")
    return channels
