"""What an alert says: the words of each decision and source alert, the e-mail text, the webhook body.

Kept apart from the channels (how an alert travels) so the wording can be read, reviewed and
tested on its own, and every channel says the same thing.
"""

from __future__ import annotations

import json
from datetime import datetime

from ..vocabulary import json_safe, outlook_words

__all__ = [
    "figure",
    "decision_message",
    "decision_payload",
    "volume_warnings",
    "volume_payload",
    "source_unreachable_message",
    "source_recovered_message",
    "source_payload",
    "webhook_body",
    "email_text",
]

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
    "volume": (
        "events below their usual volume",
        "At look {look} a group's events fell short of what its weekday usually brings (or the share "
        "between the groups moved beyond its usual swing). The comparison keeps looking and its "
        "decision is unchanged; check that every event still reaches the table.",
    ),
}


def figure(value, digits=4) -> str:
    """A figure as shown in an alert: ``n/a`` for none, floats to ``digits`` significant digits."""
    if value is None:
        return "n/a"
    if isinstance(value, float):
        return f"{value:.{digits}g}"
    return str(value)


def _bound(value, infinite: str) -> str:
    return infinite if value is None else f"{value:.4g}"


def decision_message(name: str, kind: str, values: dict, design) -> str:
    """One sentence on what a look decided (``values`` are the look row's values, ``design`` its Design)."""
    groups = design.groups
    look = values["look_number"]
    if kind == "difference_found":
        low, high = values["ci_low"], values["ci_high"]
        interval = ""
        if low is not None or high is not None:
            interval = (f" (repeated {100 * (1 - design.alpha):.0f}% interval "
                        f"{_bound(low, '-inf')} to {_bound(high, 'inf')})")
        return (f"{name}: {groups[0]} minus {groups[1]} differs by {values['estimate']:.4g}{interval} at look "
                f"{look}, with {values['n1']} and {values['n2']} events.")
    if kind == "no_material_difference":
        return (f"{name}: no material difference between {groups[0]} and {groups[1]} at look "
                f"{look} (futility boundary crossed).")
    if kind == "plan_complete":
        return (f"{name}: the planned events were reached at look {look} without "
                f"a difference being found.")
    if kind == "data_problem":
        why = values["warnings"][0] if values["warnings"] else "the data cannot support a test"
        return f"{name}: data problem at look {look}: {why}."
    return f"{name}: now {kind.replace('_', ' ')} at look {look}."


def decision_payload(name: str, version: int, kind: str, values: dict, design, as_of: datetime) -> dict:
    """The stored payload of an alert raised by a look (the alert id is added when it is written).

    ``fraction`` is the share of the current plan (after a replan, of the new plan);
    ``outlook`` says when the plan completes and the chance of a finding by then, when the
    look recorded them.
    """
    detail = values.get("detail") or {}
    share = (detail.get("plan") or {}).get("share")
    payload = {
        "comparison": name, "version": version, "kind": kind,
        "decision": values["decision"], "look": values["look_number"], "as_of": as_of.isoformat(),
        "estimate": values["estimate"], "ci_low": values["ci_low"], "ci_high": values["ci_high"],
        "p_value": values["p_value"], "fraction": values["fraction"] if share is None else share,
        "n1": values["n1"], "n2": values["n2"], "groups": list(design.groups),
        "message": decision_message(name, kind, values, design),
    }
    outlook = outlook_words(detail.get("outlook"))
    if outlook:
        payload["outlook"] = outlook
    return payload


def volume_warnings(verdict: dict) -> list:
    """The verdict's warnings in words, one per group or share that warned."""
    if verdict.get("state") != "warning":
        return []
    out = []
    for g in verdict["groups"]:
        if g["warn"] and g["share_of_usual"] is not None:
            out.append(f"events from {g['group']} fell to {100 * g['share_of_usual']:.0f} % of their usual "
                       f"{verdict['weekday']} volume since {g['since']}")
    share = verdict["share"]
    if share["warn"] and share["share"] is not None:
        first = verdict["groups"][0]["group"]
        out.append(f"{first} brought {100 * share['share']:.0f} % of today's events; "
                   f"{100 * share['expected']:.0f} % expected (normal days {100 * share['low']:.0f}–"
                   f"{100 * share['high']:.0f} %)")
    return out if out else ["events arrive unlike their usual volume"]


def volume_payload(name: str, version: int, look_number: int, warnings, verdict: dict, as_of: datetime) -> dict:
    """The stored payload of a volume alert: what fell short, in words, with the figures."""
    return {
        "comparison": name, "version": version, "kind": "volume", "decision": None, "look": look_number,
        "as_of": as_of.isoformat(), "estimate": None, "ci_low": None, "ci_high": None,
        "volume": verdict,
        "message": (f"Comparison {name}: " + "; ".join(warnings) + ". The comparison keeps looking; "
                    "check that every event still reaches the table."),
    }


def source_unreachable_message(name: str, since: datetime) -> str:
    return (f"The source for comparison {name} has not answered since {since.isoformat()}; "
            f"no looks are being recorded until it does.")


def source_recovered_message(name: str) -> str:
    return f"The source for comparison {name} answers again; looks have resumed."


def source_payload(name: str, version: int | None, kind: str, now: datetime, **extra) -> dict:
    """The stored payload of a source alert: no look, no figures, the outage in ``extra``."""
    return {
        "comparison": name, "version": version, "kind": kind, "decision": None, "look": None,
        "as_of": now.isoformat(), "estimate": None, "ci_low": None, "ci_high": None, **extra,
    }


def webhook_body(alert_id: str, payload: dict) -> bytes:
    """The exact bytes POSTed for an alert: JSON, keys sorted, non-finite numbers as null.

    Always carries ``alert_id`` (the stable id), ``comparison``, ``kind``,
    ``decision``, ``look``, ``estimate`` and ``interval`` ([low, high]).
    """
    doc = json_safe(dict(payload))
    doc["alert_id"] = alert_id
    for key in ("comparison", "kind", "decision", "look", "estimate", "ci_low", "ci_high"):
        doc.setdefault(key, None)
    doc["interval"] = [doc.get("ci_low"), doc.get("ci_high")]
    return json.dumps(doc, sort_keys=True, separators=(",", ":")).encode("utf-8")


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
        alpha=figure(payload["alpha"], 3) if payload.get("alpha") else "the planned level",
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
            f"Estimate ({g1} minus {g2}): {figure(payload.get('estimate'))}",
            f"Interval: {figure(payload.get('ci_low'))} to {figure(payload.get('ci_high'))}",
            f"p-value at this look: {figure(payload.get('p_value'))}",
            f"Events: {g1} {payload.get('n1', '?')}, {g2} {payload.get('n2', '?')}; "
            f"information fraction {figure(payload.get('fraction'), 3)}",
        ]
        if payload.get("outlook"):
            lines += [f"Outlook: {payload['outlook'][0].upper()}{payload['outlook'][1:]}."]
    else:
        lines += [f"Comparison: {comparison}"]
        if payload.get("error"):
            lines += [f"Last error: {payload['error']}"]
    lines += ["", f"Alert id: {alert_id} (the same id on every repeat of this alert)"]
    return subject, "\n".join(lines) + "\n"
