"""How one alert reads on the Alerts page: the whole message, where it went, who acknowledged it."""

from __future__ import annotations

import html
from urllib.parse import quote

from monitor.vocabulary import state_label

__all__ = ["ALERT_STATE_WORDS", "alert_card", "alert_label", "delivery_text"]

ALERT_STATE_WORDS = {
    "pending": "waiting to be delivered",
    "delivered": "delivered",
    "failed": "delivery failed",
    "acknowledged": "acknowledged",
}


def _stamp(iso):
    return iso[:16].replace("T", " ") + " UTC" if iso else "—"


def delivery_text(delivery):
    tries = delivery["attempts"]
    return f"{delivery['channel']}: {delivery['state']} ({tries} {'try' if tries == 1 else 'tries'})"


def alert_label(alert):
    """One line naming an alert: comparison, kind, when raised, state."""
    return (f"{alert['comparison']} · {alert['kind'].replace('_', ' ')} · {_stamp(alert['created_at'])} · "
            f"{ALERT_STATE_WORDS.get(alert['state'], alert['state'])}")


def alert_card(alert):
    """The alert as HTML: a head line, the whole message (wrapped, never cut), deliveries and acknowledgement."""
    state = alert["state"]
    head = [
        f'<span class="gw-alert-state gw-alert-{html.escape(state)}">'
        f'{html.escape(ALERT_STATE_WORDS.get(state, state))}</span>',
        f'<a href="comparison?name={quote(alert["comparison"])}" target="_self">{html.escape(alert["comparison"])}</a>',
        html.escape(alert["kind"].replace("_", " ")),
    ]
    if alert.get("decision") and alert["decision"] != alert["kind"]:
        head.append(html.escape(state_label(alert["decision"])))
    if alert.get("look") is not None:
        head.append(f"look {html.escape(str(alert['look']))}")
    head.append(f"raised {_stamp(alert['created_at'])}")
    channels = ", ".join(delivery_text(d) for d in alert["deliveries"]) or "no channel"
    foot = [f"channels: {channels}"]
    if alert.get("acknowledged_at"):
        foot.append(f"acknowledged by {alert['acknowledged_by']} at {_stamp(alert['acknowledged_at'])}")
    message = alert.get("message") or "(the alert carries no message)"
    return (f'<div class="gw-alert"><div class="gw-alert-head">{" · ".join(head)}</div>'
            f'<div class="gw-alert-message">{html.escape(message)}</div>'
            f'<div class="gw-sub">{html.escape(" · ".join(foot))}</div></div>')
