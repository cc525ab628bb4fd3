"""One look at a live comparison, end to end: claim → read state → source read → decide → record.

A look reads from the source only what is new since the comparison's watermark (per
15-minute slot aggregates), rolls the slots into the running cells (``cells``), weighs
and decides from them (``decision``, pure), and writes the look row, the changed cells,
the comparison's new state and any alert in a single store transaction
(``monitor.store.looks``). Nothing is written when the source cannot be read or the write
fails part way.

* **Time** is passed in (``as_of``; a time without a zone is UTC); the clock is read only
  to measure the look's duration. The cutoff is ``as_of − lateness``.
* **NULL pair or cluster keys.** With a ``pair_column`` or ``cluster_column``, events
  whose key is NULL belong to no pair or cluster: they are left out of every cell (the
  totals too, so n matches the statistic) and counted as excluded with reason ``null_key``.
* **Kept state.** Every look reads the schema revision, the comparison row and its newest
  look in one statement (so the store-behind refusal is checked at every look). What a
  process keeps between its looks lives in the ``LookMemory`` passed in (see ``memory``).
"""

from __future__ import annotations

import time
import uuid
from dataclasses import replace
from datetime import timedelta
from functools import partial

from ..config import ComparisonConfig
from ..design import Design
from ..errors import AsOfBeforeLastLookError, DesignChangedError, InvalidArgumentError, UnknownComparisonError
from ..source.reader import Source, SourceSpec, Watermark
from ..stats.adaptive import AdaptiveBoundary
from ..store.claims import claim
from ..store.workers import record_check
from ..store.looks import (AlertDraft, BoundaryLookRow, KeptState, LookWrite, archive_active, boundary_looks,
                           read_state, write_display, write_look)
from ..alerts.wording import decision_payload, volume_payload, volume_warnings
from ..vocabulary import STOPPED_STATES, as_utc, json_safe
from .cells import BASELINE_READ, counts, merge, roll_up, roll_up_baseline
from .decision import LookInputs, alert_kind, decide, resumed_boundary, weigh
from .design_check import display_to_record, frozen_design
from .memory import LookMemory
from .plan import plan_state, resume_boundary
from .record import LookRecord, QuietCheck
from .row import LookMoment, look_detail, look_row
from .volume import assess_volume

__all__ = ["take_look"]

# Stores whose float columns give back exactly the double written (the kept state must
# equal what a read would return); elsewhere every look reads its state.
_EXACT_FLOAT_STORES = ("sqlite", "postgresql")


class _Stopwatch:
    """Milliseconds spent in each step of a look, and since it started."""

    def __init__(self, started: float):
        self.started = self.mark = started
        self.laps: dict = {}

    def lap(self, name: str) -> None:
        now = time.perf_counter()
        self.laps[name] = (now - self.mark) * 1000.0
        self.mark = now

    def total(self) -> float:
        return (time.perf_counter() - self.started) * 1000.0


def take_look(config, comparison, *, as_of, engine, source=None, holder=None, memory=None, checked_at=None,
              checked_by=None):
    """Take one look at a comparison and record it.

    Parameters
    ----------
    config : Config
        The loaded configuration.
    comparison : ComparisonConfig or str
        The comparison (or its name).
    as_of : datetime
        "Now" of the look (a time without a zone is UTC); the cutoff is ``as_of − lateness``.
    engine : sqlalchemy.engine.Engine
        The history store (must be at the current migration).
    source : monitor.source.reader.Source, optional
        An open source; by default one is opened for the comparison's source
        and disposed of afterwards.
    holder : str, optional
        When given, the look holds the comparison's claim (lease) under this
        name for its duration; a caller that claims by itself passes None.
    memory : LookMemory, optional
        What this process keeps between its looks (one per process); without one the
        look reads everything from the store and keeps nothing.
    checked_at : datetime, optional
        Wall time of the check, recorded for a quiet look (default ``as_of``); the
        service passes the real time, which its schedule runs on.
    checked_by : str, optional
        Who checked, recorded for a quiet look (default ``holder``): the service claims by
        itself and names its worker here.

    Returns
    -------
    LookRecord, QuietCheck or None
        None when the comparison has stopped (it looks no more); a ``QuietCheck`` when
        the source held nothing new since the last look: the check is recorded (the
        ``look_check`` row: when, up to which cutoff, from which watermark) and no look
        row is written, so the last look's figures and interval stand.

    Raises
    ------
    SourceUnavailableError, SourceSchemaError
        The source could not be read; nothing was recorded.
    DesignChangedError
        The configured design differs from the one frozen at the first look.
    StoreBehindError
        The store's schema is not current (`gapwatch db upgrade`).
    LookAlreadyRecordedError
        Another look for this comparison was recorded first; nothing was written.
    AsOfBeforeLastLookError
        ``as_of`` is earlier than the comparison's last look; nothing was read or written.
    """
    stopwatch = _Stopwatch(time.perf_counter())
    if isinstance(comparison, str):
        comparison = config.comparison(comparison)
    if not isinstance(comparison, ComparisonConfig):
        raise InvalidArgumentError(f"comparison must be a ComparisonConfig or a name; got {comparison!r}")
    try:
        as_of = as_utc(as_of, "as_of")
    except ValueError as exc:
        raise InvalidArgumentError(str(exc)) from None
    memory = memory if memory is not None else LookMemory()
    if holder is None:
        return _look(config, comparison, as_of, engine, source, memory, stopwatch, checked_at, checked_by)
    with claim(engine, comparison.name, holder, now=as_of, seconds=config.service.lease_seconds):
        return _look(config, comparison, as_of, engine, source, memory, stopwatch, checked_at, checked_by or holder)


def _look(config, c: ComparisonConfig, as_of, engine, source, memory: LookMemory, stopwatch: _Stopwatch,
          checked_at=None, holder=None):
    configured = memory.configured_design(c)
    state = read_state(engine, c.name, kept=partial(memory.take_state, engine))
    stopwatch.lap("store_read")
    row = state.comparison
    if row is not None and (row["state"] in STOPPED_STATES or row["stopped_at"] is not None):
        _record_display(engine, row, configured)
        return None
    if row is not None and row["last_look_at"] is not None and as_of < row["last_look_at"]:
        raise AsOfBeforeLastLookError(
            f"comparison {c.name!r}: as-of {as_of.isoformat()} is before its last look "
            f"(look {row['looks_taken']} as of {row['last_look_at'].isoformat()}); history never goes back")
    try:
        design = frozen_design(c.name, row, configured)
    except DesignChangedError:
        if not _groups_without_rows(state):
            raise
        # A configured group never had a row (a typo'd group name, or a site not live yet) and
        # nothing was tested: the design was never really frozen. The version that waited is
        # archived as it stands and the configuration as it is now starts the next one, reading
        # the table from its start (the rows a typo left out as unknown_group are read again).
        archive_active(engine, c.name)
        state = read_state(engine, c.name)
        row = state.comparison
        design = frozen_design(c.name, row, configured)
        restart = None   # not a restart: the new version reads the table from its start
    else:
        restart = state.restart
    batch, cutoff, design, baseline = _read_source(config, c, design, row, as_of, source, restart, state.cells)
    stopwatch.lap("source")

    rolled = roll_up(design, batch)
    if baseline:
        rolled.changes.update(baseline)
    cells = merge(state.cells, rolled.changes)
    look_counts = counts(batch, rolled, state.last_excluded)
    if row is not None and not (look_counts.new_events or look_counts.late_events or baseline
                                or any(look_counts.excluded_new.values())):
        _record_display(engine, row, design)
        return _quiet(engine, c, state, as_of, cutoff, checked_at, holder)
    last = state.last_boundary_look
    stored = design.to_stored()
    plan = plan_state(stored, state.replans)
    evidence = weigh(LookInputs(design, cells, cutoff, sum(look_counts.excluded.values()),
                                last.fraction if last is not None else 0.0, plan))
    key = design.fingerprint() if evidence.tests or row is None else None
    boundary = (_resumed_boundary(engine, memory, state, design, stored, key, evidence.futility, plan)
                if evidence.tests else None)
    decision = decide(evidence, boundary)

    moment = LookMoment(state.looks_taken + 1, as_of, cutoff, batch.watermark.arrival)
    values = look_row(moment, evidence, decision, look_counts)
    waiting = _groups_without_rows(state, design, cells)
    if waiting:
        values["warnings"] = list(values["warnings"]) + [
            f"group {', '.join(repr(g) for g in waiting)} has had no row in {c.table!r} yet: the design is not "
            f"frozen until every group has had one (a corrected group name is then accepted)"]
    alert = alert_kind(row["state"] if row is not None else "collecting", decision.decision)
    values["duration_ms"] = stopwatch.total()
    stopwatch.lap("compute")
    detail = look_detail(evidence, decision, look_counts)
    # The volume check warns and alerts (once per warning episode) but never stops the comparison.
    volume = assess_volume(design, cells, cutoff, c.expected_share)
    detail["volume"], detail["volume_state"] = volume, volume["state"]
    volume_alert = None
    if volume["state"] == "warning" and state.last_volume_state != "warning":
        volume_alert = AlertDraft("volume", volume_payload(c.name, state.version, moment.look_number,
                                                           volume_warnings(volume), volume, as_of),
                                  tuple(c.notify))
    if row is None and restart is not None:
        detail["restart"] = _restart_detail(restart)
        if restart["from_start"]:
            values["warnings"] = values["warnings"] + [
                f"restarted from the start: the data version {restart['after_version']} tested are "
                f"tested again (its false alarms add to this version's)"]
    detail["timings_ms"] = {k: round(v, 3) for k, v in stopwatch.laps.items()}
    # Random, not from the clock: tells the next look whether the store's newest look is this one.
    detail["state_token"] = token = uuid.uuid4().hex
    values["detail"] = json_safe(detail)

    written = write_look(engine, LookWrite(
        name=c.name, state=state, design=design, design_hash=key, settings=json_safe(_settings(config, c)),
        new_state=decision.decision, stopped=decision.stopped, look=values, cells=cells,
        changes=rolled.changes, watermark=batch.watermark.to_dict(), as_of=as_of,
        alert=None if alert is None else AlertDraft(
            alert, decision_payload(c.name, state.version, alert, values, design, as_of,
                                    dashboard_url=getattr(config, "dashboard_url", None)), tuple(c.notify)),
        volume_alert=volume_alert))
    if boundary is not None:
        # Recorded values as stored (a float column may round): the kept boundary must match them.
        memory.keep_boundary(engine, written.comparison_id, _boundary_key(key, state), boundary)
    if engine.dialect.name in _EXACT_FLOAT_STORES:
        if decision.boundary is not None:
            last = BoundaryLookRow(decision.boundary_number, values["fraction"], values["boundary_z"],
                                   values["futility_z"], values["df"],
                                   (values.get("detail") or {}).get("bounds"))
        memory.keep_state(engine, written.comparison_id, KeptState(token, moment.look_number, cells, last))
    return _record(c, written, moment, evidence, decision, values, stopwatch)


def _settings(config, c) -> dict:
    """The comparison's settings as stored with a look, with its place on the schedule's grid."""
    settings = c.settings()
    place = (getattr(config, "places", None) or {}).get(c.name)
    if place is not None:
        settings["tick_offset"] = place
    return settings


def _record_display(engine, row, configured: Design) -> None:
    """Names and unit changed in the configuration, recorded on a version that takes no look now."""
    display = display_to_record(row, configured)
    if display is not None:
        write_display(engine, row, display)


def _quiet(engine, c, state, as_of, cutoff, checked_at, holder) -> QuietCheck:
    """Record that the comparison was checked and found nothing new (no look row, nothing spent).

    The watermark stays where the last look left it, so the next look reads from there.
    """
    row = state.comparison
    watermark = Watermark.from_dict(row["watermark"]) if row["watermark"] else None
    n1, n2 = (state.cells.get(("total", i, ""), (0, 0.0, 0.0))[0] for i in (0, 1))
    quiet = QuietCheck(comparison=c.name, version=row["version"], look=row["looks_taken"], as_of=as_of,
                       cutoff=cutoff, read_from=None if watermark is None else watermark.cutoff,
                       state=row["state"], n1=int(n1), n2=int(n2))
    record_check(engine, c.name, checked_at=checked_at or as_of, as_of=as_of, holder=holder, outcome="quiet",
                 detail=json_safe({"version": quiet.version, "look": quiet.look, "cutoff": cutoff.isoformat(),
                                   "read_from": None if quiet.read_from is None else quiet.read_from.isoformat(),
                                   "new_events": 0}))
    return quiet


def _groups_without_rows(state, design=None, cells=None) -> list[str]:
    """The design's groups that never had a valid row, while no look has tested: [] once the design is frozen."""
    if state.last_boundary_look is not None:
        return []
    if design is None:
        if state.comparison is None:
            return []
        groups, cells = list(state.comparison["design"].get("groups") or []), state.cells
    else:
        groups = list(design.groups)
    return [g for i, g in enumerate(groups) if cells.get(("total", i, ""), (0, 0.0, 0.0))[0] == 0]


def _read_source(config, c: ComparisonConfig, design: Design, row, as_of, source, restart=None, stored_cells=()):
    """The batch of new slot cells up to the cutoff, the design with its shift fixed at the first data,
    and a before/after comparison's baseline cells when this look reads them (else None).

    The first look of a restarted comparison's new version starts after the archived
    version's watermark, unless the restart was made ``--from-start``. A before/after
    comparison also reads its baseline, once: at the first look whose cutoff has passed
    the baseline's end (its cells are returned as changes, frozen from then on; rows dated
    in it that arrive later are counted as ``before_start``).
    """
    own_source = source is None
    if own_source:
        try:
            source_config = config.sources[c.source]
        except KeyError:
            raise UnknownComparisonError(f"comparison {c.name!r} names unknown source {c.source!r}") from None
        source = Source(source_config.url, name=c.source)
    try:
        if design.shift is None:
            # Proportions keep exact success counts; means shift by a value near the data.
            shift = 0.0 if design.metric == "proportion" else source.first_value(
                SourceSpec.from_design(design, shift=0.0, arrival_column=c.arrival_column))
            design = design.with_shift(shift)
        if design.ratio is not None and design.shift_den is None:
            spec = SourceSpec.from_design(design, shift=0.0, arrival_column=c.arrival_column)
            # The denominator read as the values: a shift near the units, hours or runs.
            design = design.with_shift_den(source.first_value(replace(
                spec, value_column=spec.denominator_column, metric="mean", denominator_column=None,
                valid_range=None)))
        spec = SourceSpec.from_design(design, arrival_column=c.arrival_column)
        if row is not None:
            watermark = Watermark.from_dict(row["watermark"]) if row["watermark"] else None
        elif restart is not None and not restart["from_start"] and restart["watermark"]:
            watermark = Watermark.from_dict(restart["watermark"])
        else:
            watermark = None
        cutoff = as_of - timedelta(seconds=c.lateness_seconds)
        if watermark is not None and cutoff < watermark.cutoff:
            cutoff = watermark.cutoff  # never read backwards: an earlier as_of adds nothing
        batch = source.read_cells(spec, watermark, cutoff)
        if design.shift is None and batch.cells:
            # Rows arrived between the two reads: the cells are about 0, so 0 is the shift.
            design = design.with_shift(0.0)
        if design.ratio is not None and design.shift_den is None and batch.cells:
            design = design.with_shift_den(0.0)
        baseline = None
        if design.before_after and BASELINE_READ not in stored_cells:
            # Until the baseline is frozen, rows dated before the start are the baseline's to
            # read (a first look before the start has passed sets an arrival watermark from
            # NULL times alone): only rows arriving after the look that froze it are before_start.
            batch = _without_before_start(batch)
            window = design.window.moments()
            if cutoff >= window["baseline_to"]:
                baseline_spec = replace(SourceSpec.from_design(design, arrival_column=c.arrival_column),
                                        start=window["baseline_from"], end=window["baseline_to"])
                baseline_batch = source.read_cells(baseline_spec, None, window["baseline_to"])
                baseline = roll_up_baseline(design, baseline_batch)
                batch = _with_baseline_arrivals(batch, baseline_batch)
    finally:
        if own_source:
            source.dispose()
    return batch, cutoff, design, baseline


def _without_before_start(batch):
    if "before_start" not in batch.excluded:
        return batch
    return replace(batch, excluded={k: v for k, v in batch.excluded.items() if k != "before_start"})


def _with_baseline_arrivals(batch, baseline_batch):
    """The batch with its arrival watermark raised past the baseline's rows, and their bad rows counted.

    Baseline rows read now must never come back as late rows dated before the start.
    """
    arrival = batch.watermark.arrival
    seen = baseline_batch.watermark.arrival
    if seen is not None and (arrival is None or _later(seen, arrival)):
        batch = replace(batch, watermark=Watermark(batch.watermark.cutoff, seen))
    if baseline_batch.excluded:
        excluded = dict(batch.excluded)
        for reason, count in baseline_batch.excluded.items():
            excluded[reason] = excluded.get(reason, 0) + count
        batch = replace(batch, excluded=excluded)
    return batch


def _later(a, b) -> bool:
    try:
        return a > b
    except TypeError:
        return str(a) > str(b)


def _boundary_key(key, state) -> str:
    """Kept boundaries are keyed by design and replans: a replan makes a kept one stale."""
    replans = state.comparison["replans"] if state.comparison is not None else 0
    return f"{key}:{replans}"


def _resumed_boundary(engine, memory: LookMemory, state, design: Design, stored: dict, key, futility, plan):
    """The boundary standing at the recorded testing looks: the design's sequential boundary
    while the plan is the original one, an ``AdaptiveBoundary`` with the replans applied after a change.

    The one kept in memory is used when it stands at the last recorded testing look;
    otherwise it is resumed from the testing looks this look's read saw (another process
    may have recorded more since).
    """
    last = state.last_boundary_look
    count = last.boundary_look if last is not None else 0
    row = state.comparison
    kept = memory.take_boundary(engine, row["id"], _boundary_key(key, state)) if row is not None else None
    if kept is not None and len(kept.looks) == count and (count == 0 or (
            kept.looks[-1].fraction == last.fraction
            and (isinstance(kept, AdaptiveBoundary) or kept.looks[-1].z == last.boundary_z))):
        return kept
    recorded = boundary_looks(engine, row["id"], count) if count else []
    if plan.replans:
        return resume_boundary(stored, plan, futility, [r._asdict() for r in recorded])
    return resumed_boundary(design, recorded, futility)


def _restart_detail(restart: dict) -> dict:
    """How this version began: after the archived version's watermark, or from the start again."""
    out = {"after_version": restart["after_version"], "from_start": restart["from_start"]}
    mark = restart.get("watermark") or {}
    if not restart["from_start"] and mark.get("cutoff"):
        out["starts_after"] = mark["cutoff"]
    for key in ("made_by", "reason"):
        if restart.get(key):
            out[key] = restart[key]
    return out


def _record(c, written, moment: LookMoment, evidence, decision, values, stopwatch) -> LookRecord:
    low, high = decision.interval
    return LookRecord(
        comparison=c.name, version=written.version, look=moment.look_number, as_of=moment.as_of,
        cutoff=moment.cutoff, decision=decision.decision, state=decision.decision,
        n1=evidence.s1.n, n2=evidence.s2.n, pairs=evidence.stat.pairs,
        estimate=values["estimate"], standard_error=values["standard_error"], statistic=values["statistic"],
        df=values["df"], p_value=values["p_value"], ci_low=low, ci_high=high, fraction=evidence.fraction,
        boundary_z=values["boundary_z"], nominal_p=values["nominal_p"], boundary_look=decision.boundary_number,
        clusters=evidence.stat.clusters, design_effect=values["design_effect"], effective_n=values["effective_n"],
        new_events=values["new_events"], late_events=values["late_events"], excluded=values["excluded"],
        warnings=tuple(values["warnings"]), look_id=written.look_id, alert_id=written.alert_id,
        duration_ms=stopwatch.total(), detail=values["detail"],
    )
