"""Alerts: what they say (``wording``), where they go (``channels``), how they get there (``delivery``).

An alert is written to the store in the same transaction as the look (or source-health
record) that raised it, by the store's one alert writer (``monitor.store.outbox``);
delivering it is a separate, repeatable step. ``source_health`` counts failed source reads
and raises one alert per outage.
"""

from .channels import (ALERT_ID_HEADER, SIGNATURE_HEADER, Channel, EmailChannel, LogChannel, WebhookChannel,
                       build_channels, sign_body)
from .delivery import FIRST_RETRY_SECONDS, IN_FLIGHT_SECONDS, backoff_seconds, deliver_pending
from .redaction import redact
from .source_health import record_source_recovered, record_source_unreachable, source_backoff_until
from .wording import email_text, webhook_body

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
    "FIRST_RETRY_SECONDS",
    "IN_FLIGHT_SECONDS",
]
