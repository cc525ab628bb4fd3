"""What the store says: comparisons, looks, cells and alerts as plain dicts.

The ``status``, ``history`` and ``alerts`` commands and the dashboard all read
the store through these functions, so a number printed on the command line
and the same number on a dashboard page cannot disagree. Every value handed
back is JSON-serialisable: datetimes become ISO 8601 strings in UTC and
non-finite floats become ``None``.

Only SQLAlchemy Core queries; every function opens one short connection.
"""

from __future__ import annotations

import math
from datetime import datetime, timedelta, timezone
from zoneinfo import ZoneInfo

import sqlalchemy as sa
from apscheduler.triggers.cron import CronTrigger
from apscheduler.triggers.interval import IntervalTrigger

from ..calendar import next_grid_tick
from ..design import Design
from ..errors import InvalidArgumentError, UnknownComparisonError
from ..vocabulary import (ALERT_STATES, DESIGN_EFFECT_WARNING, STATES, STOPPED_STATES, baseline_gap_words,
                          design_effect_warning, design_words, evidence_count, json_safe, method_words,
                          outlook_words, parse_duration, state_label)
from .engine import open_store
from .models import Alert, Cell, Comparison, Delivery, Look, LookCheck, Worker
from .plan_changes import plan_changes

__all__ = [
    "monitor_liveness",
    "STATES",
    "STOPPED_STATES",
    "ALERT_STATES",
    "state_label",
    "describe_seconds",
    "describe_wait",
    "clustering_figures",
    "comparison_status",
    "list_comparisons",
    "look_history",
    "plan_change_history",
    "plan_share",
    "get_comparison",
    "list_versions",
    "latest_look_time",
    "reference_time",
    "cells_by_kind",
    "excluded_by_reason",
    "list_alerts",
    "acknowledge_alert",
    "next_look_time",
    "adjusted_inference",
    "open_store",
]

# How many recent looks the event rate is measured over: long enough to smooth one slow
# look, short enough to follow a change of pace in the operation.
_RATE_LOOKS = 6


def describe_seconds(seconds):
    """A span in words a shift lead reads at a glance: ``"45 s"``, ``"12 min"``, ``"3.5 h"``, ``"2.1 days"``."""
    if seconds is None:
        return "unknown"
    seconds = float(seconds)
    if not math.isfinite(seconds):
        return "unknown"
    sign = "-" if seconds < 0 else ""
    seconds = abs(seconds)
    if seconds < 90:
        return f"{sign}{seconds:.0f} s"
    if seconds < 90 * 60:
        return f"{sign}{seconds / 60:.0f} min"
    if seconds < 36 * 3600:
        return f"{sign}{seconds / 3600:.1f} h"
    return f"{sign}{seconds / 86400:.1f} days"


def describe_wait(seconds):
    """How long until a look is due, in words: ``"in 12 min"``, or ``"due now"`` once its time has come."""
    return "due now" if seconds <= 0 else f"in {describe_seconds(seconds)}"


_CLUSTERING_KEYS = ("clusters", "design_effect", "effective_n")


def clustering_figures(row, formats):
    """The clustering figures a status or look row carries, as text, in the order they are shown.

    ``formats`` maps ``"clusters"``, ``"design_effect"`` and ``"effective_n"`` to a function
    writing that value; a figure the row does not carry (``None``) is left out.
    """
    return [formats[key](row[key]) for key in _CLUSTERING_KEYS if row[key] is not None]


# ---------------------------------------------------------------------------
# small converters


def _iso(value):
    if value is None:
        return None
    return value.astimezone(timezone.utc).isoformat()


def _num(value):
    if value is None:
        return None
    if isinstance(value, bool):
        return value
    if isinstance(value, int):
        return value
    value = float(value)
    return value if math.isfinite(value) else None


def _aware(value, name):
    if value is None:
        return None
    if not isinstance(value, datetime):
        raise InvalidArgumentError(f"{name} must be a datetime, got {value!r}")
    if value.tzinfo is None:
        raise InvalidArgumentError(f"{name} must be timezone-aware (UTC), got naive {value!r}")
    return value.astimezone(timezone.utc)


def _now(now):
    return _aware(now, "now") if now is not None else datetime.now(timezone.utc)


# ---------------------------------------------------------------------------
# schedule


def _schedule_trigger(every, start, tz_name):
    """The trigger for ``every``: an interval by the one duration rule, else a cron expression."""
    if every is None:
        return None
    try:
        seconds = parse_duration(every)
    except ValueError:
        return CronTrigger.from_crontab(str(every), timezone=ZoneInfo(tz_name) if tz_name else timezone.utc)
    if seconds <= 0:
        return None
    return IntervalTrigger(seconds=seconds, start_date=start, timezone=timezone.utc)


def next_look_time(every, *, last_look_at=None, created_at=None, now, timezone_name=None, tick_offset=None):
    """When the scheduler will next look, by APScheduler's own trigger arithmetic.

    ``every`` is interval seconds, a duration such as ``"10m"`` (by the configuration's
    own rule, so ``"600"`` or ``"2w"`` is no schedule), or a cron expression. With
    ``tick_offset`` (the comparison's place on its schedule's grid, recorded with each look)
    an interval comparison's next look is the first grid tick at least half an interval after
    the last look, as the scheduler's due rule has it. Returns an aware UTC datetime, or
    ``None`` when there is no usable schedule.
    """
    now = _aware(now, "now")
    if tick_offset is not None and last_look_at is not None:
        try:
            seconds = parse_duration(every)
        except ValueError:
            seconds = None
        if seconds is not None and seconds > 0:
            after = _aware(last_look_at, "last_look_at") + timedelta(seconds=seconds / 2)
            return next_grid_tick(seconds, float(tick_offset), after).astimezone(timezone.utc)
    start = last_look_at or created_at or now
    try:
        trigger = _schedule_trigger(every, start, timezone_name)
    except (ValueError, KeyError) as exc:  # an unreadable schedule is shown as unknown, not fatal
        del exc
        return None
    if trigger is None:
        return None
    fire = trigger.get_next_fire_time(last_look_at, now)
    return fire.astimezone(timezone.utc) if fire is not None else None


# ---------------------------------------------------------------------------
# comparisons


def _design(stored):
    """The comparison's :class:`Design`, or None for a row whose design cannot be read."""
    try:
        return Design.from_stored(stored)
    except (InvalidArgumentError, KeyError, TypeError, ValueError):
        return None


def _comparison_select():
    return sa.select(
        Comparison.id, Comparison.name, Comparison.version, Comparison.design,
        Comparison.settings, Comparison.state, Comparison.looks_taken, Comparison.created_at,
        Comparison.last_look_at, Comparison.stopped_at, Comparison.archived, Comparison.replans,
    )


def _comparison_filters(stmt, *, name_contains, states, since, until, archived):
    if archived is not None:
        stmt = stmt.where(Comparison.archived.is_(bool(archived)))
    if name_contains:
        stmt = stmt.where(Comparison.name.contains(str(name_contains), autoescape=True))
    if states:
        unknown = [s for s in states if s not in STATES]
        if unknown:
            raise InvalidArgumentError(f"states contains unknown state(s) {unknown!r}; known: {sorted(STATES)}")
        stmt = stmt.where(Comparison.state.in_(list(states)))
    # A comparison is "in" a date range when it was running at some point inside it.
    if since is not None:
        since = _aware(since, "since")
        stmt = stmt.where(sa.func.coalesce(Comparison.last_look_at, Comparison.created_at) >= since)
    if until is not None:
        until = _aware(until, "until")
        stmt = stmt.where(Comparison.created_at <= until)
    return stmt


def _recent_looks(conn, comparison_ids):
    """The last few looks of each comparison, oldest first, for the latest values and the rate."""
    if not comparison_ids:
        return {}
    stmt = (
        sa.select(
            Look.comparison_id, Look.look_number, Look.as_of, Look.n1, Look.n2, Look.estimate,
            Look.ci_low, Look.ci_high, Look.p_value, Look.statistic, Look.fraction,
            Look.boundary_z, Look.clusters, Look.design_effect, Look.effective_n,
            Look.decision, Look.warnings, Look.mean1, Look.mean2, Look.detail, Look.pairs,
        )
        .join(Comparison, Comparison.id == Look.comparison_id)
        .where(Look.comparison_id.in_(comparison_ids))
        .where(Look.look_number > Comparison.looks_taken - _RATE_LOOKS)
        .order_by(Look.comparison_id, Look.look_number)
    )
    recent = {}
    for row in conn.execute(stmt).mappings():
        recent.setdefault(row["comparison_id"], []).append(row)
    return recent


def _rates(looks):
    """Events per hour per group and fraction per second over the recent looks."""
    if len(looks) < 2:
        return None, None, None
    first, last = looks[0], looks[-1]
    seconds = (last["as_of"] - first["as_of"]).total_seconds()
    if seconds <= 0:
        return None, None, None
    rate1 = (last["n1"] - first["n1"]) / seconds * 3600.0
    rate2 = (last["n2"] - first["n2"]) / seconds * 3600.0
    fraction_rate = None
    if last["fraction"] is not None and first["fraction"] is not None:
        fraction_rate = (last["fraction"] - first["fraction"]) / seconds
    return rate1, rate2, fraction_rate


def adjusted_inference(detail):
    """The inference recorded at a stop, in one shape: estimate, p_value, ci_low, ci_high, note.

    ``estimate`` is the median-unbiased estimate and ``p_value`` the
    stagewise-ordering p-value; ``None`` when the look recorded none.
    """
    if not isinstance(detail, dict):
        return None
    raw = detail.get("after_stop")
    if not isinstance(raw, dict):
        return None
    ci = raw.get("adjusted_ci") or [None, None]
    out = {
        "estimate": _num(raw.get("median_unbiased_estimate")),
        "p_value": _num(raw.get("p_value")),
        "ci_low": _num(ci[0]) if len(ci) > 0 else None,
        "ci_high": _num(ci[1]) if len(ci) > 1 else None,
        "naive_estimate": _num(raw.get("naive_estimate")),
        "stop_look": raw.get("stop_look"),
        "note": raw.get("note"),
    }
    return out


def before_after_words(design, detail) -> str | None:
    """The baseline gap of a before/after comparison in words (None for other comparisons).

    "before the change, hollin was 7.1 seconds slower than saltmarsh (interval 5.2 to 9.0)",
    and, once there are events after the start, what the change itself is.
    """
    if design is None or not design.before_after:
        return None
    figures = (detail or {}).get("before_after") or {}
    gap = figures.get("baseline_gap") or {}
    low, high = (list(gap.get("ci") or []) + [None, None])[:2]
    return baseline_gap_words(list(design.display.names(design.groups)), gap.get("estimate"), low, high,
                              value_column=design.measure.value_column, metric=design.metric)


_LATEST_FIGURES = ("mean1", "mean2", "estimate", "ci_low", "ci_high", "p_value", "statistic", "boundary_z",
                   "fraction")


def _latest(last) -> dict:
    """The newest look's figures (zero events and no figures before the first look)."""
    if last is None:
        return {"n1": 0, "n2": 0, **dict.fromkeys(_LATEST_FIGURES), "decision": None, "clusters": None,
                "pairs": None, "design_effect": None, "effective_n": None}
    return {"n1": last["n1"], "n2": last["n2"], **{k: _num(last[k]) for k in _LATEST_FIGURES},
            "decision": last["decision"], "clusters": last["clusters"], "pairs": last["pairs"],
            "design_effect": _num(last["design_effect"]), "effective_n": _num(last["effective_n"])}


def _progress(last, stopped, fraction_rate):
    """Seconds until the plan completes and when, at the recent pace (None when unknown)."""
    if last is None or stopped or last["fraction"] is None:
        return None, None
    if last["fraction"] >= 1:
        return 0.0, None
    if fraction_rate and fraction_rate > 0:
        remaining = (1.0 - last["fraction"]) / fraction_rate
        return remaining, last["as_of"] + timedelta(seconds=remaining)
    return None, None


def _last_interval(last, looks) -> dict:
    """The newest valid interval among the recent looks, with its estimate and look number.

    A look that tested nothing (no new information, a data problem) records no interval;
    the last valid one keeps being shown rather than a blank.
    """
    shown = last
    if last is not None and last["ci_low"] is None and last["ci_high"] is None:
        shown = next((lk for lk in reversed(looks) if lk["ci_low"] is not None or lk["ci_high"] is not None), last)
    if shown is None:
        return {"estimate": None, "ci_low": None, "ci_high": None, "interval_look": None}
    return {"estimate": _num(shown["estimate"]), "ci_low": _num(shown["ci_low"]), "ci_high": _num(shown["ci_high"]),
            "interval_look": shown["look_number"]}


def _warnings(last, design, name=None) -> list[str]:
    """The newest look's warnings, plus the clustering advice (its consequence and remedy) when the
    design effect calls for it."""
    warnings = [str(w) for w in (last["warnings"] or [])] if last is not None else []
    deff = last["design_effect"] if last is not None else None
    clustered = design is not None and design.clustered
    if (deff is not None and deff > DESIGN_EFFECT_WARNING and not clustered
            and not any("design effect" in w.lower() for w in warnings)):
        warnings.append(design_effect_warning(deff, name))
    return warnings


def _days_since_start(design, last):
    """Days since the start a before/after comparison's evidence rests on (None for other designs)."""
    if design is None or not design.before_after:
        return None
    detail = (last["detail"] or {}) if last is not None else {}
    return detail.get("days", (detail.get("before_after") or {}).get("clusters_after"))


def _display_fields(design, groups, settings, last):
    """Names and unit as shown, and the count the evidence is made of (pairs, clusters) beside events.

    ``labels`` are the design's display names (else the group values); ``evidence`` is
    ``{"noun", "count"}`` when the evidence is counted in pairs or clusters, else None.
    ``days`` is the hook for comparisons whose evidence is counted in days.
    """
    display = design.display if design is not None else None
    labels = list(display.names(groups)) if display is not None else (settings.get("labels") or list(groups))
    unit = (display.unit if display is not None else "") or str(settings.get("unit") or "")
    counted = evidence_count(
        method=design.method if design is not None else None,
        clustered=design is not None and design.clustered,
        pairs=last["pairs"] if last is not None else None,
        clusters=last["clusters"] if last is not None else None,
        days=_days_since_start(design, last))
    evidence = None if counted is None else {"noun": counted[0], "count": counted[1]}
    stored = design.to_stored() if design is not None else {}
    clustering = stored.get("clustering") or {}
    return {"labels": [str(x) for x in labels], "unit": unit, "evidence": evidence,
            "method_words": (method_words(design.method, clustered_by=clustering.get("cluster_by")
                                          or clustering.get("cluster_column")) if design is not None else None),
            "design_words": design_words(stored, labels) if design is not None else None}


def plan_share(look):
    """A look's share of the plan it was measured against: its fraction, or after a replan the
    fraction over the new plan's end (``detail["plan"]["share"]``)."""
    plan = (look["detail"] or {}).get("plan") or {}
    return plan["share"] if plan.get("share") is not None else look["fraction"]


def _outlook(looks):
    """The newest look's projected completion with the newest conditional powers (a look that
    tested nothing recorded no conditional power: the last testing look's stand)."""
    if not looks:
        return None
    out = dict((looks[-1]["detail"] or {}).get("outlook") or {})
    for look in reversed(looks):
        earlier = (look["detail"] or {}).get("outlook") or {}
        for key in ("current_estimate", "planned_difference"):
            if key not in out and earlier.get(key) is not None:
                out[key] = earlier[key]
        if "current_estimate" in out:
            break
    return json_safe(out) or None


def _status_row(comp, looks, now):
    design = _design(comp["design"])
    # The share of the (current) plan is what people read as "fraction".
    looks = [dict(look, fraction=plan_share(look)) for look in looks]
    settings = comp["settings"] or {}
    every = settings.get("every", settings.get("schedule"))
    last = looks[-1] if looks else None
    stopped = comp["state"] in STOPPED_STATES
    rate1, rate2, fraction_rate = _rates(looks)
    remaining, completes_at = _progress(last, stopped, fraction_rate)
    next_look = None
    if not stopped and not comp["archived"]:
        next_look = next_look_time(
            every, last_look_at=comp["last_look_at"], created_at=comp["created_at"], now=now,
            timezone_name=design.measure.timezone if design is not None else None,
            tick_offset=settings.get("tick_offset"),
        )
    groups = design.groups if design is not None else settings.get("groups") or []
    volume = (last["detail"] or {}).get("volume") if last is not None else None
    return {
        "id": comp["id"],
        "name": comp["name"],
        "version": comp["version"],
        "state": comp["state"],
        "state_label": state_label(comp["state"]),
        "stopped": stopped,
        "archived": bool(comp["archived"]),
        "looks": comp["looks_taken"],
        "groups": [str(g) for g in groups],
        **_display_fields(design, [str(g) for g in groups], settings, last),
        **_design_fields(design),
        "description": settings.get("description") or None,
        "every": every,
        **_latest(last),
        **_last_interval(last, looks),
        # After a replan, the current plan's events (the look records them).
        **({"planned_per_group": last["detail"]["planned_per_group"]}
           if last is not None and (last["detail"] or {}).get("planned_per_group") else {}),
        "warnings": _warnings(last, design, comp["name"]),
        # The volume check of the newest look: ok, warning or not_yet_measurable, with its figures.
        "volume_state": (volume or {}).get("state"),
        "volume": json_safe(volume) if volume else None,
        "created_at": _iso(comp["created_at"]),
        "last_look_at": _iso(comp["last_look_at"] or (last["as_of"] if last is not None else None)),
        "stopped_at": _iso(comp["stopped_at"]),
        "next_look_at": _iso(next_look),
        "events_per_hour": [_num(rate1), _num(rate2)] if rate1 is not None else None,
        "seconds_to_plan": _num(remaining),
        "plan_completes_at": _iso(completes_at),
        "adjusted": adjusted_inference(last["detail"]) if last is not None else None,
        "start": None if design is None or design.window is None else design.window.start,
        "baseline": before_after_words(design, last["detail"] if last is not None else None),
        "before_after": json_safe((last["detail"] or {}).get("before_after")) if last is not None else None,
        "outlook": None if stopped else _outlook(looks),
        "outlook_words": None if stopped else outlook_words(_outlook(looks)),
        "replans": comp.get("replans") or 0,
    }


def _design_fields(design):
    if design is None:
        return dict.fromkeys(("method", "metric", "alternative", "alpha", "spending", "planned_per_group",
                              "plan", "null_difference"))
    return {
        "method": design.method,
        "metric": design.metric,
        "alternative": design.alternative,
        "alpha": _num(design.alpha),
        "spending": design.spending,
        "planned_per_group": design.planned_per_group,
        "plan": json_safe(design.plan.to_stored()),
        "null_difference": _num(design.null_difference),
    }


def list_comparisons(
    engine, *, name_contains=None, states=None, since=None, until=None, archived=False, now=None
):
    """Status rows of the comparisons matching the filters, by name then version.

    ``archived``: ``False`` (default) only live versions, ``True`` only
    archived ones, ``None`` both. ``since``/``until`` keep comparisons that
    were running at some time in that range.
    """
    now = _now(now)
    stmt = _comparison_filters(
        _comparison_select(), name_contains=name_contains, states=states, since=since,
        until=until, archived=archived,
    ).order_by(Comparison.name, Comparison.version)
    with engine.connect() as conn:
        comps = list(conn.execute(stmt).mappings())
        recent = _recent_looks(conn, [c["id"] for c in comps])
    return [_status_row(c, recent.get(c["id"], []), now) for c in comps]


def comparison_status(engine, *, include_archived=False, now=None):
    """One status row per comparison (archived versions too when asked).

    Keys include name, version, state, state_label, looks, n1, n2, estimate,
    ci_low, ci_high, p_value, fraction, last_look_at, next_look_at,
    seconds_to_plan, groups, method, metric, clusters, design_effect,
    effective_n and warnings.
    """
    return list_comparisons(engine, archived=None if include_archived else False, now=now)


def _find_comparison(conn, name, version):
    stmt = _comparison_select().where(Comparison.name == name)
    if version is None:
        # The live version if there is one, else the newest archived one.
        stmt = stmt.order_by(Comparison.archived, Comparison.version.desc()).limit(1)
    else:
        stmt = stmt.where(Comparison.version == int(version))
    row = conn.execute(stmt).mappings().first()
    if row is None:
        known = sorted(conn.execute(sa.select(Comparison.name).distinct()).scalars())
        what = f"{name!r}" if version is None else f"{name!r} version {version}"
        hint = f"; known: {', '.join(known)}" if known else "; the store holds no comparisons yet"
        raise UnknownComparisonError(f"no comparison {what} in the store{hint}")
    return row


def latest_look_time(engine):
    """The ``as_of`` of the newest look in the store (aware UTC), or ``None`` when there is none."""
    with engine.connect() as conn:
        return conn.execute(sa.select(sa.func.max(Look.as_of))).scalar()


# How far behind this machine's clock the newest look may be before times are read against it.
_STALE_STORE = timedelta(days=1)


def reference_time(engine, now):
    """The "now" that relative times ("5 min ago", "in 10 min") are read against, and why.

    Normally ``now`` itself. When the newest look in the store is ahead of
    ``now``, or more than a day behind it (a simulated clock such as the demo's,
    a skewed server, or a service that stopped looking), the newest look's time
    is used instead and the second value is a sentence saying so; otherwise it
    is ``None``.
    """
    now = _aware(now, "now")
    newest = latest_look_time(engine)
    if newest is None or timedelta(0) <= now - newest <= _STALE_STORE:
        return now, None
    if newest > now:
        gap = f"{describe_seconds((newest - now).total_seconds())} ahead of"
    else:
        gap = f"{describe_seconds((now - newest).total_seconds())} behind"
    note = (f"The newest look in the store ({newest.strftime('%Y-%m-%d %H:%M UTC')}) is {gap} this "
            "machine's clock (a simulated clock, or no looks lately): times are read against that look.")
    return newest, note


# A monitor that has not checked any comparison for this many of its shortest interval looks dead.
QUIET_INTERVALS = 3


def _interval_seconds(every):
    """Seconds of an interval schedule; None for a cron expression or nothing readable."""
    if isinstance(every, (int, float)):
        return float(every)
    try:
        return parse_duration(every)
    except (ValueError, TypeError, InvalidArgumentError):
        return None


def monitor_liveness(engine, *, now):
    """Whether any ``gapwatch run`` worker is still looking, read from checks and heartbeats (wall time).

    Returns ``{"quiet": bool, "message": str | None, "last_check_at", "last_beat_at",
    "workers_alive", "interval_seconds"}``. ``quiet`` is true when workers have run on this
    store but none has checked an open comparison for ``QUIET_INTERVALS`` of the shortest
    interval; the message then says so plainly (a store filled only by ``gapwatch look`` from
    outside the service has no workers and no message). Looks' own times play no part, so a
    simulated clock (the demo's) changes nothing here.
    """
    now = _aware(now, "now")
    with engine.connect() as conn:
        settings = conn.execute(sa.select(Comparison.settings).where(
            Comparison.archived.is_(False), Comparison.stopped_at.is_(None),
            Comparison.state.not_in(list(STOPPED_STATES)))).scalars().all()
        last_check = conn.execute(sa.select(sa.func.max(LookCheck.checked_at))).scalar()
        beats = conn.execute(sa.select(Worker.holder, Worker.beat_at, Worker.stopped_at)).all()
    intervals = [i for i in (_interval_seconds((st or {}).get("every")) for st in settings) if i]
    interval = min(intervals) if intervals else None
    last_beat = max((b.beat_at for b in beats), default=None)
    alive = [b for b in beats if b.stopped_at is None and interval is not None
             and (now - b.beat_at).total_seconds() <= QUIET_INTERVALS * max(interval, 10.0)]
    out = {"quiet": False, "message": None, "last_check_at": _iso(last_check), "last_beat_at": _iso(last_beat),
           "workers_alive": len(alive), "interval_seconds": interval}
    if interval is None or not beats:
        return out
    since = last_check or min(b.beat_at for b in beats)
    silent = (now - since).total_seconds()
    if silent <= QUIET_INTERVALS * interval:
        return out
    out["quiet"] = True
    checked = ("never checked a comparison" if last_check is None
               else f"last checked a comparison {describe_seconds(silent)} ago")
    workers = ("no worker is running" if not alive else
               f"{len(alive)} worker{'s' if len(alive) != 1 else ''} alive but not looking")
    out["message"] = (f"No worker has looked for {describe_seconds(silent)} (over {QUIET_INTERVALS} intervals "
                      f"of {describe_seconds(interval)}): the monitor {checked}; {workers}. "
                      f"Start `gapwatch run` or see its log.")
    return out


def list_versions(engine, name):
    """The stored versions of one comparison: version, state, archived, looks."""
    stmt = (
        sa.select(Comparison.version, Comparison.state, Comparison.archived, Comparison.looks_taken,
                  Comparison.created_at)
        .where(Comparison.name == name).order_by(Comparison.version)
    )
    with engine.connect() as conn:
        return [
            {"version": r.version, "state": r.state, "archived": bool(r.archived),
             "looks": r.looks_taken, "created_at": _iso(r.created_at)}
            for r in conn.execute(stmt)
        ]


def get_comparison(engine, name, version=None, *, now=None):
    """A comparison's status row plus its frozen design, settings and watermark."""
    now = _now(now)
    with engine.connect() as conn:
        comp = _find_comparison(conn, name, version)
        recent = _recent_looks(conn, [comp["id"]])
        watermark = conn.execute(
            sa.select(Comparison.watermark).where(Comparison.id == comp["id"])
        ).scalar_one()
    row = _status_row(comp, recent.get(comp["id"], []), now)
    row["design"] = json_safe(comp["design"] or {})
    row["settings"] = json_safe(comp["settings"] or {})
    row["watermark"] = json_safe(watermark)
    row["plan_changes"] = plan_change_history(engine, name, comp["version"])
    return row


def plan_change_history(engine, name, version=None):
    """The replans and restarts of one comparison version, oldest first, as plain dicts."""
    with engine.connect() as conn:
        comp = _find_comparison(conn, name, version)
        rows = plan_changes(conn, comp["id"])
    out = []
    for r in rows:
        record = r["record"] or {}
        item = {"number": r["number"], "kind": r["kind"], "made_at": _iso(r["made_at"]), "made_by": r["made_by"],
                "reason": r["reason"], "after_look": r["after_look"],
                "old_plan": json_safe(r["old_plan"]), "new_plan": json_safe(r["new_plan"])}
        if r["kind"] == "replan":
            item["conditional_error"] = _num((record.get("error_upper") or 0.0) + (record.get("error_lower") or 0.0))
            item["method"] = record.get("method")
        else:
            item["from_start"] = bool(record.get("from_start"))
        out.append(item)
    return out


# ---------------------------------------------------------------------------
# looks


def look_history(engine, name, version=None):
    """Every look of one comparison (the live version unless ``version`` is given), in order."""
    with engine.connect() as conn:
        comp = _find_comparison(conn, name, version)
        rows = conn.execute(
            sa.select(*Look.__table__.columns).where(Look.comparison_id == comp["id"])
            .order_by(Look.look_number)
        ).mappings().all()
    history = []
    previous = {}
    for r in rows:
        # Look.excluded holds running totals by reason; what this look added is in the detail
        # (or, for looks written without it, the change from the look before).
        excluded = json_safe(r["excluded"] or {})
        detail = r["detail"] or {}
        if isinstance(detail.get("excluded_new"), dict):
            excluded_new = json_safe(detail["excluded_new"])
        else:
            excluded_new = {k: v - previous.get(k, 0) for k, v in excluded.items() if v - previous.get(k, 0) > 0}
        previous = excluded
        history.append({
            "name": comp["name"],
            "version": comp["version"],
            "look": r["look_number"],
            "as_of": _iso(r["as_of"]),
            "cutoff": _iso(r["cutoff"]),
            "recorded_at": _iso(r["recorded_at"]),
            "n1": r["n1"],
            "n2": r["n2"],
            "mean1": _num(r["mean1"]),
            "mean2": _num(r["mean2"]),
            "sd1": _num(r["sd1"]),
            "sd2": _num(r["sd2"]),
            "pairs": r["pairs"],
            "new_events": r["new_events"],
            "late_events": r["late_events"],
            "excluded": excluded,
            "excluded_total": int(sum(v for v in excluded.values() if isinstance(v, (int, float)))),
            "excluded_new": excluded_new,
            "estimate": _num(r["estimate"]),
            "standard_error": _num(r["standard_error"]),
            "statistic": _num(r["statistic"]),
            "df": _num(r["df"]),
            "p_value": _num(r["p_value"]),
            "information": _num(r["information"]),
            "fraction": _num(r["fraction"]),
            "plan_share": _num(plan_share(r)),
            "plan_end": _num(((detail.get("plan") or {}).get("end")) or 1.0),
            "boundary_z": _num(r["boundary_z"]),
            "futility_z": _num(r["futility_z"]),
            "nominal_p": _num(r["nominal_p"]),
            "cumulative_alpha": _num(r["cumulative_alpha"]),
            "ci_low": _num(r["ci_low"]),
            "ci_high": _num(r["ci_high"]),
            "clusters": r["clusters"],
            "design_effect": _num(r["design_effect"]),
            "effective_n": _num(r["effective_n"]),
            "decision": r["decision"],
            "warnings": [str(w) for w in (r["warnings"] or [])],
            "detail": json_safe(detail),
            "adjusted": adjusted_inference(detail),
            "baseline": before_after_words(_design(comp["design"]), detail),
            "duration_ms": _num(r["duration_ms"]),
        })
    return history


def excluded_by_reason(engine, name, version=None):
    """Rows excluded by each look, per reason, as long rows: look, as_of, reason, count, running_total."""
    out = []
    for look in look_history(engine, name, version):
        for reason, count in sorted(look["excluded_new"].items()):
            out.append({"look": look["look"], "as_of": look["as_of"], "reason": reason, "count": count,
                        "running_total": look["excluded"].get(reason, count)})
    return out


def cells_by_kind(engine, name, version=None):
    """The running summaries of one comparison, grouped by kind (total, day, cluster, pair).

    Each cell carries group_index, group, key, n and the mean recovered from
    the shifted sums (the shift is the design's ``shift``).
    """
    with engine.connect() as conn:
        comp = _find_comparison(conn, name, version)
        rows = conn.execute(
            sa.select(Cell.kind, Cell.group_index, Cell.key, Cell.n, Cell.sum_dev, Cell.sum_dev2)
            .where(Cell.comparison_id == comp["id"])
            .order_by(Cell.kind, Cell.key, Cell.group_index)
        ).all()
    design = _design(comp["design"])
    shift = (design.shift or 0.0) if design is not None else 0.0
    groups = [str(g) for g in design.groups] if design is not None else []
    out = {}
    for r in rows:
        mean = shift + r.sum_dev / r.n if r.n else None
        variance = None
        if r.n and r.n > 1:
            variance = max(r.sum_dev2 - r.sum_dev * r.sum_dev / r.n, 0.0) / (r.n - 1)
        out.setdefault(r.kind, []).append({
            "group_index": r.group_index,
            "group": groups[r.group_index] if r.group_index < len(groups) else str(r.group_index),
            "key": r.key,
            "n": r.n,
            "mean": _num(mean),
            "sd": _num(math.sqrt(variance)) if variance is not None else None,
        })
    return out


# ---------------------------------------------------------------------------
# alerts


def _alert_dict(alert, deliveries):
    payload = json_safe(alert["payload"] or {})
    return {
        "id": alert["id"],
        "comparison": alert["comparison_name"],
        "comparison_id": alert["comparison_id"],
        "look_id": alert["look_id"],
        "look": payload.get("look"),
        "kind": alert["kind"],
        "decision": payload.get("decision"),
        "created_at": _iso(alert["created_at"]),
        "state": alert["state"],
        "acknowledged_at": _iso(alert["acknowledged_at"]),
        "acknowledged_by": alert["acknowledged_by"],
        "message": payload.get("message"),
        "payload": payload,
        "deliveries": [
            {
                "channel": d["channel"],
                "state": d["state"],
                "attempts": d["attempts"],
                "next_attempt_at": _iso(d["next_attempt_at"]),
                "delivered_at": _iso(d["delivered_at"]),
                "last_error": d["last_error"],
            }
            for d in deliveries
        ],
    }


def _deliveries_for(conn, alert_ids):
    if not alert_ids:
        return {}
    out = {}
    stmt = (
        sa.select(*Delivery.__table__.columns)
        .where(Delivery.alert_id.in_(alert_ids)).order_by(Delivery.alert_id, Delivery.channel)
    )
    for d in conn.execute(stmt).mappings():
        out.setdefault(d["alert_id"], []).append(d)
    return out


def list_alerts(engine, states=None, *, comparison=None, limit=None):
    """Alerts, newest first, each with its deliveries; optionally only some states."""
    if isinstance(states, str):
        states = [states]
    stmt = sa.select(*Alert.__table__.columns)
    if states:
        unknown = [s for s in states if s not in ALERT_STATES]
        if unknown:
            raise InvalidArgumentError(f"states contains unknown alert state(s) {unknown!r}; known: {list(ALERT_STATES)}")
        stmt = stmt.where(Alert.state.in_(list(states)))
    if comparison:
        stmt = stmt.where(Alert.comparison_name == comparison)
    stmt = stmt.order_by(Alert.created_at.desc(), Alert.id)
    if limit is not None:
        stmt = stmt.limit(int(limit))
    with engine.connect() as conn:
        alerts = conn.execute(stmt).mappings().all()
        deliveries = _deliveries_for(conn, [a["id"] for a in alerts])
    return [_alert_dict(a, deliveries.get(a["id"], [])) for a in alerts]


def acknowledge_alert(engine, alert_id, *, by, now):
    """Mark an alert acknowledged by someone; acknowledging twice keeps the first record.

    Raises ``InvalidArgumentError`` naming the id when no alert has it.
    """
    now = _aware(now, "now")
    if not isinstance(by, str) or not by.strip():
        raise InvalidArgumentError(f"by must name who acknowledges, got {by!r}")
    by = by.strip()[:200]
    with engine.begin() as conn:
        alert = conn.execute(
            sa.select(*Alert.__table__.columns).where(Alert.id == str(alert_id))
        ).mappings().first()
        if alert is None:
            raise InvalidArgumentError(f"alert_id {alert_id!r}: no alert with that id in the store")
        if alert["state"] != "acknowledged":
            conn.execute(
                sa.update(Alert).where(Alert.id == alert["id"])
                .values(state="acknowledged", acknowledged_at=now, acknowledged_by=by)
            )
            alert = conn.execute(
                sa.select(*Alert.__table__.columns).where(Alert.id == alert["id"])
            ).mappings().first()
        deliveries = _deliveries_for(conn, [alert["id"]])
    return _alert_dict(alert, deliveries.get(alert["id"], []))
