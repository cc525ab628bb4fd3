"""One look at a live comparison, end to end, recorded in one store transaction.

A look reads from the source only what is new since the comparison's
watermark (per 15-minute slot aggregates), rolls the slots into the stored
running cells (the total, local calendar days, clusters, pairs), computes the
fixed-sample statistic from the merged summaries, places it against the
alpha-spending boundary at the information reached, decides, and writes the
look row, the changed cells, the comparison's new state and any alert in a
single transaction. Nothing is written when the source cannot be read or the
write fails part way.

Choices worth knowing
---------------------
* **Information fraction.** Events so far over planned events per group,
  the smaller of the two groups (pairs over planned pairs for paired
  comparisons). Clustered comparisons use the same event fraction: an
  information fraction from ``1/variance`` would wobble with the variance
  estimate (and could fall), while events only grow; plan the events with the
  design effect in mind.
* **Which looks test.** A look tests against the boundary only when the
  fraction has grown since the last testing look and a statistic exists; other
  looks (no new information, too few clusters, a data problem) are recorded
  but spend nothing. ``Look.boundary_look`` numbers the testing looks, and the
  boundary is resumed from their recorded fractions and boundary values.
* **t-based methods** (Welch, pooled, paired, clustered) use the nominal-level
  approach: the look crosses when its one-sided p-value in a tested direction
  is at or below the boundary's nominal level. z-based methods (z,
  proportions) compare the statistic with the boundary directly.
* **Time** is passed in (``as_of``); the clock is read only to measure the
  look's duration. The cutoff is ``as_of − lateness``.
* **NULL pair or cluster keys.** With a ``pair_column`` or ``cluster_column``,
  events whose key is NULL belong to no pair or cluster: they are left out of
  every cell (the totals too, so n matches the statistic) and counted as
  excluded with reason ``null_key``.
* **Kept state.** Every look reads the schema revision, the comparison row and
  its newest look in one statement (so the store-behind refusal is checked at
  every look). The cells and the last testing look are kept in the process
  after each look it records, and the next look uses them only when the
  store's newest look still carries the random state token written with them;
  anything else (another worker's look, a restart, a re-created store, a
  failed write) makes the look read them from the store.
"""

from __future__ import annotations

import json
import math
import threading
import time as _time
import uuid
from collections import namedtuple
from dataclasses import asdict, dataclass, field
from datetime import date, datetime, time as clock_time, timedelta, timezone

import sqlalchemy as sa
from sqlalchemy.exc import DBAPIError, IntegrityError, OperationalError

from .config import ComparisonConfig, design_hash
from .errors import (DesignChangedError, InvalidArgumentError, LookAlreadyRecordedError,
                     StoreUnavailableError, UnknownComparisonError)
from .store.models import Alert, Cell, Comparison, Delivery, Look
from .stats.summaries import MomentSummary

__all__ = [
    "LookRecord",
    "take_look",
    "restart_comparison",
    "STOPPING_DECISIONS",
    "bucket_key",
    "bucket_end",
    "design_differences",
    "NULL_KEY",
]

UTC = timezone.utc
STOPPING_DECISIONS = ("difference_found", "no_material_difference", "plan_complete")
_Z_METHODS = ("z", "proportions")
_QUIET_STATES = ("collecting", "awaiting_clusters")
DESIGN_EFFECT_WARNING = 1.5
# Exclusion reason of events whose pair or cluster column is NULL (the source's reasons
# cover the value, group and time; this one is the look's, as only pairing gives it meaning).
NULL_KEY = "null_key"
# Core tables and statements built once: with bound parameters they compile once and
# SQLAlchemy's statement cache serves every later look (no ORM on the hot path).
_COMPARISON = Comparison.__table__
_LOOK = Look.__table__
_CELL = Cell.__table__
_VERSION_TABLE = sa.table("alembic_version", sa.column("version_num"))
_COMPARISON_FIELDS = ("id", "version", "design", "state", "looks_taken", "watermark", "stopped_at")
# The schema revision, the active comparison and its newest look in one round trip: the
# version table has one row, so the outer joins always return exactly one row.
_STATE_STATEMENT = (
    sa.select(_VERSION_TABLE.c.version_num.label("revision"),
              *(_COMPARISON.c[f] for f in _COMPARISON_FIELDS),
              _LOOK.c.excluded.label("last_excluded"),
              _LOOK.c.detail["state_token"].as_string().label("state_token"))
    .select_from(
        _VERSION_TABLE
        .outerjoin(_COMPARISON, sa.and_(_COMPARISON.c.name == sa.bindparam("name"),
                                        _COMPARISON.c.archived.is_(False)))
        .outerjoin(_LOOK, sa.and_(_LOOK.c.comparison_id == _COMPARISON.c.id,
                                  _LOOK.c.look_number == _COMPARISON.c.looks_taken)))
    .order_by(_COMPARISON.c.version.desc())
    .limit(1)
)
_TOP_VERSION_STATEMENT = sa.select(sa.func.max(_COMPARISON.c.version)).where(
    _COMPARISON.c.name == sa.bindparam("name"))
_CELLS_STATEMENT = sa.select(
    _CELL.c.kind, _CELL.c.group_index, _CELL.c.key, _CELL.c.n, _CELL.c.sum_dev, _CELL.c.sum_dev2
).where(_CELL.c.comparison_id == sa.bindparam("cid"))
_LAST_BOUNDARY_STATEMENT = (
    sa.select(_LOOK.c.boundary_look, _LOOK.c.fraction, _LOOK.c.boundary_z, _LOOK.c.futility_z)
    .where(_LOOK.c.comparison_id == sa.bindparam("cid"), _LOOK.c.boundary_look.is_not(None))
    .order_by(_LOOK.c.boundary_look.desc())
    .limit(1)
)
_BOUNDARY_LOOKS_STATEMENT = (
    sa.select(_LOOK.c.boundary_look, _LOOK.c.fraction, _LOOK.c.boundary_z, _LOOK.c.futility_z)
    .where(_LOOK.c.comparison_id == sa.bindparam("cid"), _LOOK.c.boundary_look.is_not(None),
           _LOOK.c.boundary_look <= sa.bindparam("count"))
    .order_by(_LOOK.c.boundary_look)
)
_INSERT_COMPARISON = sa.insert(_COMPARISON).returning(_COMPARISON.c.id)
_GUARDED_UPDATE = sa.update(_COMPARISON).where(
    _COMPARISON.c.id == sa.bindparam("guard_id"),
    _COMPARISON.c.looks_taken == sa.bindparam("guard_looks"),
    _COMPARISON.c.archived.is_(False))
_INSERT_LOOK = sa.insert(_LOOK).returning(_LOOK.c.id)

# The last testing look as the boundary needs it (a stored row or the one just written).
_BoundaryLook = namedtuple("_BoundaryLook", "boundary_look fraction boundary_z futility_z")
# Guards the in-process caches below (the service looks from several threads).
_STATE_LOCK = threading.Lock()


@dataclass(frozen=True)
class LookRecord:
    """What one look recorded (a summary of the Look row)."""

    comparison: str
    version: int
    look: int
    as_of: datetime
    cutoff: datetime
    decision: str
    state: str
    n1: int
    n2: int
    pairs: int | None
    estimate: float | None
    standard_error: float | None
    statistic: float | None
    df: float | None
    p_value: float | None
    ci_low: float | None
    ci_high: float | None
    fraction: float | None
    boundary_z: float | None
    nominal_p: float | None
    boundary_look: int | None
    clusters: int | None
    design_effect: float | None
    effective_n: float | None
    new_events: int
    late_events: int
    excluded: dict
    warnings: tuple
    look_id: int
    alert_id: str | None
    duration_ms: float
    detail: dict = field(default_factory=dict, repr=False)

    def line(self) -> str:
        """One printable line: look number, decision, estimate and interval."""
        parts = [f"{self.comparison} v{self.version} look {self.look}: {self.decision}"]
        if self.estimate is not None:
            low = "-inf" if self.ci_low is None else f"{self.ci_low:.4g}"
            high = "inf" if self.ci_high is None else f"{self.ci_high:.4g}"
            parts.append(f"estimate {self.estimate:.4g} [{low}, {high}]")
        parts.append(f"n {self.n1}/{self.n2}")
        if self.pairs is not None:
            parts.append(f"pairs {self.pairs}")
        if self.fraction is not None:
            parts.append(f"fraction {self.fraction:.3f}")
        if self.p_value is not None:
            parts.append(f"p {self.p_value:.4g}")
        return "; ".join(parts)

    def to_dict(self) -> dict:
        out = asdict(self)
        out["as_of"] = self.as_of.isoformat()
        out["cutoff"] = self.cutoff.isoformat()
        out["warnings"] = list(self.warnings)
        return out


# --------------------------------------------------------------------------- buckets


def _local(slot: int, zone) -> datetime:
    return datetime.fromtimestamp(slot, tz=UTC).astimezone(zone)


def _midnight(day: date, zone) -> datetime:
    return datetime.combine(day, clock_time(0, 0), tzinfo=zone)


def _shift_times(shift_starts):
    return sorted(clock_time(int(s[:2]), int(s[3:5])) for s in shift_starts)


def bucket_key(slot: int, kind: str, zone, shift_starts=()) -> str:
    """The local calendar bucket holding a slot: ``hour``, ``day``, ``week`` or ``shift``.

    Days and weeks are keyed by their local date (weeks by their Monday); hours
    and shifts by their local start with its UTC offset (unambiguous across a
    daylight-saving change).
    """
    local = _local(slot, zone)
    if kind == "day":
        return local.date().isoformat()
    if kind == "week":
        return (local.date() - timedelta(days=local.weekday())).isoformat()
    if kind == "hour":
        return local.replace(minute=0, second=0, microsecond=0).isoformat(timespec="minutes")
    if kind == "shift":
        starts = _shift_times(shift_starts)
        today = local.date()
        begun = [s for s in starts if s <= local.time()]
        if begun:
            start = datetime.combine(today, begun[-1], tzinfo=zone)
        else:
            start = datetime.combine(today - timedelta(days=1), starts[-1], tzinfo=zone)
        return start.isoformat(timespec="minutes")
    raise InvalidArgumentError(f"bucket kind must be hour, day, week or shift; got {kind!r}")


def bucket_end(key: str, kind: str, zone, shift_starts=()) -> datetime:
    """When the bucket keyed ``key`` closes (aware UTC)."""
    if kind == "day":
        end = _midnight(date.fromisoformat(key) + timedelta(days=1), zone)
    elif kind == "week":
        end = _midnight(date.fromisoformat(key) + timedelta(days=7), zone)
    elif kind == "hour":
        end = datetime.fromisoformat(key) + timedelta(hours=1)
    elif kind == "shift":
        start = datetime.fromisoformat(key).astimezone(zone)
        starts = _shift_times(shift_starts)
        later = [s for s in starts if s > start.time()]
        if later:
            end = datetime.combine(start.date(), later[0], tzinfo=zone)
        else:
            end = datetime.combine(start.date() + timedelta(days=1), starts[0], tzinfo=zone)
    else:
        raise InvalidArgumentError(f"bucket kind must be hour, day, week or shift; got {kind!r}")
    return end.astimezone(UTC)


# --------------------------------------------------------------------------- design


def _normalised(design: dict) -> dict:
    return json.loads(json.dumps(design, default=str))


def _comparable(design: dict) -> dict:
    """The part of a design that must not change: derived figures left out."""
    d = {k: v for k, v in design.items() if k != "shift"}
    plan = d.get("plan")
    if isinstance(plan, dict):
        # Plan figures are computed from the inputs; the inputs and the planned count decide.
        d["plan"] = {k: v for k, v in plan.items() if k != "figures"}
    return d


# The configured design in JSON normal form, per ComparisonConfig object (frozen, so the
# design cannot change under it); a reloaded configuration brings new objects.
_CONFIGURED: dict = {}
_CONFIGURED_SIZE = 256


def _configured_design(c: ComparisonConfig) -> dict:
    entry = _CONFIGURED.get(id(c))
    if entry is None or entry[0] is not c:
        entry = (c, _normalised(c.design()))
        with _STATE_LOCK:
            if len(_CONFIGURED) >= _CONFIGURED_SIZE:
                _CONFIGURED.pop(next(iter(_CONFIGURED)), None)
            _CONFIGURED[id(c)] = entry
    # Shared: callers copy before adding the shift (nothing else in a design is changed).
    return entry[1]


def design_differences(frozen: dict, configured: dict) -> list[str]:
    """Keys whose values differ between a frozen design and the configured one."""
    a, b = _comparable(_normalised(frozen)), _comparable(_normalised(configured))
    return sorted(k for k in set(a) | set(b) if a.get(k) != b.get(k))


# --------------------------------------------------------------------------- helpers


def _finite_or_none(x):
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _float_col(x):
    """For Float columns: nan becomes NULL, infinities are kept."""
    if x is None:
        return None
    x = float(x)
    return None if math.isnan(x) else x


def _json_safe(value):
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {str(k): _json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_json_safe(v) for v in value]
    if isinstance(value, (str, int, bool)) or value is None:
        return value
    if hasattr(value, "item"):  # numpy scalars
        return _json_safe(value.item())
    return str(value)


def _aware(moment, name) -> datetime:
    if not isinstance(moment, datetime):
        raise InvalidArgumentError(f"{name} must be a datetime; got {moment!r}")
    if moment.tzinfo is None or moment.utcoffset() is None:
        raise InvalidArgumentError(f"{name} must be timezone-aware; got {moment.isoformat()}")
    return moment.astimezone(UTC)


@dataclass
class _Stat:
    """What the statistic step produced."""

    estimate: float | None = None
    standard_error: float | None = None
    statistic: float | None = None
    df: float | None = None
    p_value: float | None = None
    p_upper: float | None = None
    p_lower: float | None = None
    fixed: dict | None = None
    clusters: int | None = None
    pairs: int | None = None
    cluster_design_effect: float | None = None
    problem: str | None = None       # a data problem (the decision is data_problem)
    waiting: str | None = None       # not enough data yet (collecting / awaiting_clusters)
    awaiting_clusters: bool = False

    @property
    def testable(self) -> bool:
        return (self.problem is None and self.waiting is None and self.statistic is not None
                and not math.isnan(self.statistic))


# --------------------------------------------------------------------------- the look


def take_look(config, comparison, *, as_of, engine, source=None, holder=None):
    """Take one look at a comparison and record it.

    Parameters
    ----------
    config : Config
        The loaded configuration.
    comparison : ComparisonConfig or str
        The comparison (or its name).
    as_of : datetime
        Aware "now" of the look; the cutoff is ``as_of − lateness``.
    engine : sqlalchemy.engine.Engine
        The history store (must be at the current migration).
    source : monitor.source.reader.Source, optional
        An open source; by default one is opened for the comparison's source
        and disposed of afterwards.
    holder : str, optional
        When given, the look holds the comparison's claim (lease) under this
        name for its duration; a caller that claims by itself passes None.

    Returns
    -------
    LookRecord or None
        None when the comparison has stopped (it looks no more).

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
    """
    started = _time.perf_counter()
    if isinstance(comparison, str):
        comparison = config.comparison(comparison)
    if not isinstance(comparison, ComparisonConfig):
        raise InvalidArgumentError(f"comparison must be a ComparisonConfig or a name; got {comparison!r}")
    as_of = _aware(as_of, "as_of")
    if holder is None:
        return _look(config, comparison, as_of, engine, source, started)
    from .store.claims import claim

    with claim(engine, comparison.name, holder, now=as_of, seconds=config.service.lease_seconds):
        return _look(config, comparison, as_of, engine, source, started)


def _look(config, c: ComparisonConfig, as_of, engine, source, started):
    timings = {}
    t_read = _time.perf_counter()
    configured = _configured_design(c)
    state = _read_state(engine, c.name)
    timings["store_read"] = (_time.perf_counter() - t_read) * 1000.0
    row = state["comparison"]
    if row is not None:
        if row["state"] in STOPPING_DECISIONS or row["stopped_at"] is not None:
            return None
        # The stored design came back from JSON, so it is already in normal form: compare
        # directly, and name the differing keys only when there are some.
        same = _comparable(row["design"]) == _comparable(configured)
        changed = [] if same else design_differences(row["design"], configured)
        if changed:
            raise DesignChangedError(
                f"comparison {c.name!r}: the design frozen at its first look (version {row['version']}) "
                f"differs from the configuration in: {', '.join(changed)}. To start anew, give the "
                f"comparison a new name, or run `gapwatch restart {c.name}` (archives version "
                f"{row['version']}; the next look starts version {row['version'] + 1} with the new design)")
        design = dict(row["design"])
    else:
        design = dict(configured)
        design["shift"] = None

    from .source.reader import Source, Watermark

    t_source = _time.perf_counter()
    own_source = source is None
    if own_source:
        try:
            source_config = config.sources[c.source]
        except KeyError:
            raise UnknownComparisonError(f"comparison {c.name!r} names unknown source {c.source!r}") from None
        source = Source(source_config.url, name=c.source)
    try:
        shift = design.get("shift")
        if shift is None:
            if c.metric == "proportion":
                shift = 0.0  # exact success counts
            else:
                shift = source.first_value(c.source_spec(0.0))
            design["shift"] = None if shift is None else float(shift)
        spec = c.source_spec(design["shift"] or 0.0)
        watermark = Watermark.from_dict(row["watermark"]) if row is not None and row["watermark"] else None
        cutoff = as_of - timedelta(seconds=c.lateness_seconds)
        if watermark is not None and cutoff < watermark.cutoff:
            cutoff = watermark.cutoff  # never read backwards: an earlier as_of adds nothing
        batch = source.read_cells(spec, watermark, cutoff)
        if design["shift"] is None and batch.cells:
            # Rows arrived between the two reads: the cells are about 0, so 0 is the shift.
            design["shift"] = 0.0
    finally:
        if own_source:
            source.dispose()

    timings["source"] = (_time.perf_counter() - t_source) * 1000.0
    return _decide_and_record(config, c, as_of, engine, state, design, batch, cutoff, started, timings)


def _read_state(engine, name):
    """The active comparison row, its cells and its last testing look (one short read).

    One statement reads the store's schema revision, the comparison row and
    its newest look together, so the schema check costs no extra round trip.
    The cells and the last testing look come from the state this process kept
    after its own previous look when that look is still the newest in the
    store (same comparison row, look count and the look's random state token);
    otherwise they are read.
    """
    from .store.engine import ensure_current, head_revision

    try:
        with engine.connect() as conn:
            try:
                top = conn.execute(_STATE_STATEMENT, {"name": name}).mappings().first()
            except DBAPIError:
                # No version table or missing columns (a store behind) or a real failure:
                # the schema check tells them apart and names the command to run.
                conn.rollback()
                ensure_current(conn)
                raise
            if top is None or top["revision"] != head_revision():
                ensure_current(conn)  # raises StoreBehindError with the right message
            if top["id"] is None:
                latest = conn.execute(_TOP_VERSION_STATEMENT, {"name": name}).scalar()
                return {"comparison": None, "next_version": (latest or 0) + 1, "cells": {},
                        "last_boundary_look": None, "last_excluded": {}}
            comp = {k: top[k] for k in _COMPARISON_FIELDS}
            kept = _take_kept_state(engine, comp["id"])
            if (kept is not None and top["state_token"] is not None and kept.token == top["state_token"]
                    and kept.looks_taken == comp["looks_taken"]):
                cells, last_boundary_look = kept.cells, kept.last_boundary_look
            else:
                cells = {(kind, gi, key): (n, s1, s2)
                         for kind, gi, key, n, s1, s2 in conn.execute(_CELLS_STATEMENT, {"cid": comp["id"]})}
                found = conn.execute(_LAST_BOUNDARY_STATEMENT, {"cid": comp["id"]}).first()
                last_boundary_look = None if found is None else _BoundaryLook(*found)
    except DBAPIError as exc:
        raise StoreUnavailableError(f"cannot read the history store: {str(exc.orig).splitlines()[0]}") from None
    return {"comparison": comp, "cells": cells, "last_boundary_look": last_boundary_look,
            "last_excluded": top["last_excluded"] or {}}


@dataclass(frozen=True)
class _RolledUp:
    """A batch's slot cells rolled into changes of stored cells, keyed (kind, group_index, key)."""

    changes: dict
    null_key: int = 0        # events whose pair/cluster column is NULL: excluded, not rolled up
    null_key_late: int = 0   # of those, late events


def _roll_up(c: ComparisonConfig, batch) -> _RolledUp:
    """Slot cells → changes to stored cells.

    With a pair or cluster column, an event whose key is NULL belongs to no
    pair or cluster. Filing it under an empty key would invent a pair (or a
    cluster) of unrelated events, so it is left out of every cell, the total
    included (n then matches the paired or clustered statistic), and counted
    as excluded with reason ``null_key``.
    """
    zone = c.zone
    changes: dict = {}
    memo: dict = {}
    needs_key = c.key_column is not None
    null_key = null_key_late = 0

    def bucket(slot, kind):
        k = (slot, kind)
        if k not in memo:
            memo[k] = bucket_key(slot, kind, zone, c.shift_starts)
        return memo[k]

    def add(kind, gi, key, cell):
        entry = changes.setdefault((kind, gi, key), [0, 0.0, 0.0])
        entry[0] += cell.n
        entry[1] += cell.sum_dev
        entry[2] += cell.sum_dev2

    clustered, cluster_column, cluster_by = c.clustered, c.cluster_column, c.cluster_by
    paired, pair_column, pair_by = c.paired, c.pair_column, c.pair_by
    for cell in batch.cells:
        if needs_key and cell.key is None:
            null_key += cell.n
            null_key_late += cell.late
            continue
        add("total", cell.group_index, "", cell)
        add("day", cell.group_index, bucket(cell.slot, "day"), cell)
        column_key = "" if cell.key is None else str(cell.key)
        if clustered:
            add("cluster", cell.group_index, column_key if cluster_column else bucket(cell.slot, cluster_by), cell)
        if paired:
            add("pair", cell.group_index, column_key if pair_column else bucket(cell.slot, pair_by), cell)
    return _RolledUp(changes, null_key, null_key_late)


def _merge(stored: dict, changes: dict) -> dict:
    merged = dict(stored)
    for k, (n, s1, s2) in changes.items():
        old = merged.get(k, (0, 0.0, 0.0))
        merged[k] = (old[0] + n, old[1] + s1, old[2] + s2)
    return merged


def _summary(cells, kind, gi, key, shift):
    n, s1, s2 = cells.get((kind, gi, key), (0, 0.0, 0.0))
    return MomentSummary(int(n), float(shift), float(s1), float(s2))


def _of_kind(cells, kind):
    return [(gi, key, v) for (k, gi, key), v in cells.items() if k == kind]


def _one_sided_ps(statistic, df):
    """(P[T >= t], P[T <= t]) under no difference; scipy.special keeps this to microseconds."""
    from scipy import special

    if df is None:
        return float(special.ndtr(-statistic)), float(special.ndtr(statistic))
    return float(special.stdtr(df, -statistic)), float(special.stdtr(df, statistic))


def _t_critical(nominal_p, df):
    """The t value with upper tail ``nominal_p`` (``-stdtrit(df, p)`` keeps tiny tails exact)."""
    from scipy import special

    critical = float(-special.stdtrit(df, nominal_p))
    # stdtrit gives +inf for a tail of 0 (or ~1e-300 at small df): the boundary is then out of reach.
    return critical if critical > 0 else math.inf


def _statistic(c: ComparisonConfig, design, cells, s1, s2, cutoff, excluded_total) -> _Stat:
    from .stats import fixed

    common = dict(null_difference=design["null_difference"], alternative=design["alternative"],
                  alpha=design["alpha"])
    st = _Stat()
    if s1.n == 0 and s2.n == 0:
        if excluded_total:
            st.problem = "every row read so far is excluded as bad"
        else:
            st.waiting = "no events yet"
        return st
    if s1.n == 0 or s2.n == 0:
        empty = design["groups"][0 if s1.n == 0 else 1]
        st.problem = f"group {empty!r} has no valid events"
        return st

    if c.paired:
        pairing = design["pairing"]
        by = pairing["pair_by"]
        means = {}
        for gi, key, (n, sd, _s2) in _of_kind(cells, "pair"):
            if n > 0:
                means.setdefault(key, {})[gi] = design["shift"] + sd / n
        diffs = []
        for key in sorted(means):
            m = means[key]
            if 0 in m and 1 in m:
                if by is not None and bucket_end(key, by, c.zone, pairing["shift_starts"]) > cutoff:
                    continue  # the bucket is still open: its means may move
                diffs.append(m[0] - m[1])
        st.pairs = len(diffs)
        if len(diffs) < 2:
            st.waiting = f"{len(diffs)} complete pair(s) so far; a paired test needs at least 2"
            return st
        result = fixed.from_summaries("paired", MomentSummary.from_values(diffs), None, **common)
    elif c.clustered:
        from .stats.clustered import cluster_robust_difference

        rows = [(gi, key, v) for gi, key, v in _of_kind(cells, "cluster") if v[0] > 0]
        rows.sort(key=lambda r: (r[0], r[1]))
        shift = design["shift"] or 0.0
        result = cluster_robust_difference(
            [r[0] for r in rows], [r[1] for r in rows], [r[2][0] for r in rows],
            [r[2][1] for r in rows], shift, sum_dev2=[r[2][2] for r in rows], **common)
        st.clusters = int(result.clusters)
        st.cluster_design_effect = _finite_or_none(result.design_effect)
        st.estimate, st.standard_error = float(result.estimate), _finite_or_none(result.standard_error)
        st.statistic, st.df, st.p_value = float(result.statistic), float(result.df), float(result.p_value)
        st.fixed = _json_safe(result.to_dict())
        if result.clusters < design["min_clusters"]:
            st.waiting = (f"{result.clusters} clusters so far; decisions start at "
                          f"{design['min_clusters']} (min_clusters)")
            st.awaiting_clusters = True
            return st
        if result.degenerate or not math.isfinite(result.standard_error) or result.standard_error == 0:
            st.problem = "the cluster-level spread is zero or undefined: " + "; ".join(result.notes)
            return st
        st.p_upper, st.p_lower = _one_sided_ps(result.statistic, result.df)
        return st
    else:
        method = design["method"]
        if method in ("welch", "pooled") and (s1.n < 2 or s2.n < 2):
            st.waiting = "each group needs at least 2 events for a variance"
            return st
        sigmas = design.get("sigmas")
        result = fixed.from_summaries(method, s1, s2, sigmas=tuple(sigmas) if sigmas else None, **common)

    st.estimate = float(result.estimate)
    st.standard_error = _finite_or_none(result.standard_error)
    st.statistic = float(result.statistic)
    st.df = None if result.df is None else float(result.df)
    st.p_value = float(result.p_value)
    st.fixed = _json_safe(result.to_dict())
    if (result.degenerate or result.standard_error is None or not math.isfinite(result.standard_error)
            or result.standard_error == 0 or math.isnan(result.statistic)):
        st.problem = "zero variance: every value is the same, no test is possible"
        return st
    st.p_upper, st.p_lower = _one_sided_ps(result.statistic, result.df)
    return st


def _futility_spec(design):
    if not design.get("futility"):
        return None
    from .stats.boundaries import FutilitySpec

    plan = design["plan"]
    figures = plan.get("figures") or {}
    drift = figures.get("drift")
    power = (plan.get("inputs") or {}).get("power")
    if drift is None or power is None:
        return None
    return FutilitySpec(design["spending"], 1.0 - power, drift)


def _design_effect(design, cells, s1, s2):
    """Day-level design effect and effective n (None when it cannot be measured)."""
    if s1.n < 2 or s2.n < 2:
        return None
    # Sorted by (group, day) so the sums run in one order whatever order the cells came in.
    rows = sorted((gi, key, v[0], v[1], v[2]) for (kind, gi, key), v in cells.items()
                  if kind == "day" and v[0] > 0)
    if len({r[1] for r in rows}) < 2:
        return None
    from .stats.clustered import design_effect

    groups, keys, n, sum_dev, sum_dev2 = zip(*rows)
    try:
        de = design_effect({"groups": groups, "keys": keys, "n": n, "sum_dev": sum_dev,
                            "sum_dev2": sum_dev2, "shift": design["shift"] or 0.0})
    except InvalidArgumentError:
        return None
    if not math.isfinite(de.design_effect):
        return None
    return de


def _decide_and_record(config, c, as_of, engine, state, design, batch, cutoff, started, timings):
    t_compute = _time.perf_counter()
    from .stats.boundaries import MIN_INCREMENT, futility_decision, nominal_decision
    from .stats.inference import median_unbiased_estimate, repeated_confidence_interval, stagewise_p_value

    row = state["comparison"]
    shift = design["shift"] or 0.0
    rolled = _roll_up(c, batch)
    changes = rolled.changes
    cells = _merge(state["cells"], changes)
    s1 = _summary(cells, "total", 0, "", shift)
    s2 = _summary(cells, "total", 1, "", shift)

    excluded_new = {reason: int(count) for reason, count in batch.excluded.items()}
    if rolled.null_key:
        excluded_new[NULL_KEY] = rolled.null_key
    new_events = int(batch.new_events) - rolled.null_key
    late_events = int(batch.late_events) - rolled.null_key_late
    excluded = dict(state["last_excluded"])
    for reason, count in excluded_new.items():
        excluded[reason] = excluded.get(reason, 0) + count
    warnings = []
    st = _statistic(c, design, cells, s1, s2, cutoff, sum(excluded.values()))

    planned = int(design["plan"]["planned_per_group"])
    if c.paired:
        fraction = (st.pairs or 0) / planned
    else:
        fraction = min(s1.n, s2.n) / planned

    decision = "collecting"
    boundary = None
    boundary_number = None
    ci = (None, None)
    detail = {"shift": shift, "planned_per_group": planned, "excluded_new": excluded_new}
    if st.fixed is not None:
        detail["fixed"] = st.fixed
    if st.cluster_design_effect is not None:
        detail["cluster_design_effect"] = st.cluster_design_effect

    last_boundary = state["last_boundary_look"]
    last_fraction = last_boundary.fraction if last_boundary is not None else 0.0
    if st.problem:
        decision = "data_problem"
        warnings.append(st.problem)
    elif st.awaiting_clusters:
        decision = "awaiting_clusters"
        warnings.append(st.waiting)
    elif st.waiting:
        warnings.append(st.waiting)
    elif st.testable and fraction - last_fraction >= MIN_INCREMENT:
        futility = _futility_spec(design)
        design_key = design_hash(_comparable(design))  # once per look: both cache steps need it
        seq = _resumed_boundary(engine, row, design, design_key, state, futility)
        boundary = seq.add_look(fraction)
        boundary_number = len(seq.looks)
        if design["method"] in _Z_METHODS and not c.clustered:
            z = st.statistic
            alt = design["alternative"]
            crossed = (z >= boundary.z if alt == "greater" else z <= -boundary.z if alt == "less"
                       else abs(z) >= boundary.z)
        else:
            crossed = nominal_decision(st.p_upper, st.p_lower, boundary, design["alternative"])
        if crossed:
            decision = "difference_found"
        elif futility is not None and futility_decision(st.p_upper, st.p_lower, boundary,
                                                        seq.futility_direction):
            decision = "no_material_difference"
        elif boundary.final:
            decision = "plan_complete"
        # Repeated confidence interval: the boundary on the statistic's own scale.
        if math.isfinite(boundary.z):
            critical = boundary.z if st.df is None else _t_critical(boundary.nominal_p, st.df)
            ci = repeated_confidence_interval(st.estimate, st.standard_error, critical, design["alternative"])
            ci = tuple(_finite_or_none(x) for x in ci)
        if decision in STOPPING_DECISIONS:
            detail["after_stop"] = _after_stop(seq, st, fraction, design,
                                               stagewise_p_value, median_unbiased_estimate)
    elif st.testable:
        warnings.append("no new information since the last testing look; nothing spent at this look")

    de = _design_effect(design, cells, s1, s2)
    if de is not None and not c.clustered and de.design_effect > DESIGN_EFFECT_WARNING:
        warnings.append(f"design effect {de.design_effect:.1f} at day level: events are not independent; "
                        f"set cluster_by = \"day\"")
    if late_events:
        detail["late_events"] = late_events

    new_state = decision
    information = (1.0 / st.standard_error ** 2) if st.standard_error else None
    look_number = (row["looks_taken"] if row is not None else 0) + 1
    look_values = dict(
        look_number=look_number, as_of=as_of, cutoff=cutoff, recorded_at=as_of,
        arrival_watermark=None if batch.watermark.arrival is None else json.dumps(batch.watermark.arrival),
        n1=s1.n, n2=s2.n, mean1=_finite_or_none(s1.mean), mean2=_finite_or_none(s2.mean),
        sd1=_finite_or_none(s1.sd), sd2=_finite_or_none(s2.sd), pairs=st.pairs,
        new_events=new_events, late_events=late_events, excluded=excluded,
        estimate=_float_col(st.estimate), standard_error=_float_col(st.standard_error),
        statistic=_float_col(st.statistic), df=_float_col(st.df), p_value=_float_col(st.p_value),
        information=_float_col(information), fraction=fraction,
        boundary_z=None if boundary is None else _float_col(boundary.z),
        futility_z=None if boundary is None else _float_col(boundary.futility_z),
        nominal_p=None if boundary is None else _float_col(boundary.nominal_p),
        cumulative_alpha=None if boundary is None else _float_col(boundary.cumulative_alpha),
        ci_low=ci[0], ci_high=ci[1], clusters=st.clusters,
        design_effect=None if de is None else float(de.design_effect),
        effective_n=None if de is None else _finite_or_none(de.effective_total),
        decision=decision, boundary_look=boundary_number, warnings=_json_safe(warnings),
    )
    previous_state = row["state"] if row is not None else "collecting"
    alert_kind = None
    if new_state != previous_state and not (new_state in _QUIET_STATES and previous_state in _QUIET_STATES):
        alert_kind = new_state

    look_values["duration_ms"] = (_time.perf_counter() - started) * 1000.0
    timings["compute"] = (_time.perf_counter() - t_compute) * 1000.0
    detail["timings_ms"] = {k: round(v, 3) for k, v in timings.items()}
    # Random, not from the clock: tells the next look whether the store's newest look is this one.
    detail["state_token"] = uuid.uuid4().hex
    look_values["detail"] = _json_safe(detail)
    t_write = _time.perf_counter()
    look_id, alert_id, version, comparison_id = _record(
        engine, c, config, state, design, look_values, cells, changes, batch, new_state, alert_kind, as_of)
    if boundary is not None:
        # Recorded values as stored (a float column may round): the cache must match them.
        _remember_boundary(engine, comparison_id, design_key, seq)
    if engine.dialect.name in _EXACT_FLOAT_STORES:
        last_boundary_look = state["last_boundary_look"] if boundary is None else _BoundaryLook(
            boundary_number, look_values["fraction"], look_values["boundary_z"], look_values["futility_z"])
        _keep_state(engine, comparison_id,
                    _KeptState(detail["state_token"], look_number, cells, last_boundary_look))
    timings["write"] = (_time.perf_counter() - t_write) * 1000.0
    return LookRecord(
        comparison=c.name, version=version, look=look_number, as_of=as_of, cutoff=cutoff,
        decision=decision, state=new_state, n1=s1.n, n2=s2.n, pairs=st.pairs,
        estimate=look_values["estimate"], standard_error=look_values["standard_error"],
        statistic=look_values["statistic"], df=look_values["df"], p_value=look_values["p_value"],
        ci_low=ci[0], ci_high=ci[1], fraction=fraction, boundary_z=look_values["boundary_z"],
        nominal_p=look_values["nominal_p"], boundary_look=boundary_number, clusters=st.clusters,
        design_effect=look_values["design_effect"], effective_n=look_values["effective_n"],
        new_events=new_events, late_events=late_events, excluded=excluded,
        warnings=tuple(warnings), look_id=look_id, alert_id=alert_id,
        duration_ms=(_time.perf_counter() - started) * 1000.0, detail=look_values["detail"],
    )


# Boundaries after their latest look, per comparison id, so a long-running service
# does not re-integrate every earlier look each time (resume costs grow with looks).
_BOUNDARY_CACHE: dict = {}
_BOUNDARY_CACHE_SIZE = 256

# The cells and last testing look as this process wrote them, per (store, comparison id),
# so the next look need not read hundreds of day cells back. An entry is used only when
# the store's newest look still carries the random state token written with it: a look
# recorded by another process, a restart (new comparison row) or a re-created store
# (same ids, different token) all make the next look read the store instead.
_STATE_CACHE: dict = {}
_STATE_CACHE_SIZE = 256
# Stores whose float columns give back exactly the double written (the kept state must
# equal what a read would return); elsewhere every look reads its state.
_EXACT_FLOAT_STORES = ("sqlite", "postgresql")


@dataclass(frozen=True)
class _KeptState:
    token: str
    looks_taken: int
    cells: dict
    last_boundary_look: object


def _keep_state(engine, comparison_id, kept: _KeptState):
    with _STATE_LOCK:
        if len(_STATE_CACHE) >= _STATE_CACHE_SIZE:
            _STATE_CACHE.pop(next(iter(_STATE_CACHE)), None)
        _STATE_CACHE[(str(engine.url), comparison_id)] = kept


def _take_kept_state(engine, comparison_id):
    """The kept state, taken out so no other look can use it meanwhile (put back after the write)."""
    with _STATE_LOCK:
        return _STATE_CACHE.pop((str(engine.url), comparison_id), None)


def _resumed_boundary(engine, row, design, design_key, state, futility):
    """A SequentialBoundary standing at the recorded testing looks.

    The cached object is taken out of the cache (so no other look can use it
    meanwhile) and put back only once this look is recorded.
    """
    from .stats.boundaries import SequentialBoundary

    last = state["last_boundary_look"]
    count = last.boundary_look if last is not None else 0
    key = (str(engine.url), row["id"], design_key) if row is not None else None
    cached = _BOUNDARY_CACHE.pop(key, None) if key is not None else None
    if cached is not None:
        looks = cached.looks
        if len(looks) == count and (count == 0 or (looks[-1].fraction == last.fraction
                                                   and looks[-1].z == last.boundary_z)):
            return cached
    # Only the looks this look's read saw: another process may have recorded more since.
    recorded = _boundary_looks(engine, row["id"], count) if count else []
    return SequentialBoundary.resume(
        design["alpha"], design["spending"], design["alternative"],
        [r.fraction for r in recorded], [r.boundary_z for r in recorded],
        futility_z=[(-math.inf if r.futility_z is None else r.futility_z) for r in recorded]
        if futility is not None else None,
        futility=futility)


def _boundary_looks(engine, comparison_id, count):
    with engine.connect() as conn:
        return conn.execute(_BOUNDARY_LOOKS_STATEMENT, {"cid": comparison_id, "count": count}).all()


def _remember_boundary(engine, comparison_id, design_key, seq):
    with _STATE_LOCK:
        if len(_BOUNDARY_CACHE) >= _BOUNDARY_CACHE_SIZE:
            _BOUNDARY_CACHE.pop(next(iter(_BOUNDARY_CACHE)), None)
        # Keyed by store too: two stores may both hold a comparison with id 1.
        _BOUNDARY_CACHE[(str(engine.url), comparison_id, design_key)] = seq


def _after_stop(seq, st, fraction, design, stagewise_p_value, median_unbiased_estimate):
    """Stagewise-ordering p-value and median-unbiased estimate at the stop look."""
    from scipy import special

    fractions = [b.fraction for b in seq.looks]
    upper = [b.z for b in seq.looks]
    # t statistics enter the z-scale calculation through their one-sided p-value.
    if st.df is None:
        z = st.statistic
    else:
        z = float(-special.ndtri(st.p_upper)) if 0 < st.p_upper < 1 else math.copysign(40.0, st.statistic)
    out = {"stop_look": len(fractions), "z_observed": z}
    try:
        out["p_value"] = stagewise_p_value(fractions, upper, len(fractions), z, design["alternative"])
        if st.standard_error:
            info_max = 1.0 / (st.standard_error ** 2 * fraction)
            est = median_unbiased_estimate(fractions, upper, len(fractions), z, info_max,
                                           design["alternative"], alpha=design["alpha"])
            out["median_unbiased_estimate"] = est.estimate
            out["adjusted_ci"] = list(est.ci)
            # The look's own estimate: for t statistics the z-scale figure differs slightly.
            out["naive_estimate"] = st.estimate
    except (InvalidArgumentError, ValueError, RuntimeError) as exc:  # numerical trouble: keep the look
        out["note"] = f"adjusted inference unavailable: {exc}"
    return out


# --------------------------------------------------------------------------- the write


_UPSERTS: dict = {}


def _upsert_statement(dialect_name):
    """INSERT … ON CONFLICT DO UPDATE for the cell key (SQLite and PostgreSQL), built once."""
    stmt = _UPSERTS.get(dialect_name)
    if stmt is None:
        if dialect_name == "sqlite":
            from sqlalchemy.dialects.sqlite import insert
        else:
            from sqlalchemy.dialects.postgresql import insert
        stmt = insert(_CELL)
        stmt = stmt.on_conflict_do_update(
            index_elements=["comparison_id", "kind", "group_index", "key"],
            set_={"n": stmt.excluded.n, "sum_dev": stmt.excluded.sum_dev, "sum_dev2": stmt.excluded.sum_dev2})
        _UPSERTS[dialect_name] = stmt
    return stmt


def _upsert_cells(conn, comparison_id, cells, changes):
    """Write the cells this look changed (absolute values; the look's guard makes them safe)."""
    if not changes:
        return
    rows = [{"comparison_id": comparison_id, "kind": k[0], "group_index": k[1], "key": k[2],
             "n": int(cells[k][0]), "sum_dev": float(cells[k][1]), "sum_dev2": float(cells[k][2])}
            for k in changes]
    name = conn.dialect.name
    if name in ("sqlite", "postgresql"):
        conn.execute(_upsert_statement(name), rows)
        return
    for r in rows:  # other databases: update, else insert
        done = conn.execute(
            sa.update(Cell).where(Cell.comparison_id == r["comparison_id"], Cell.kind == r["kind"],
                                  Cell.group_index == r["group_index"], Cell.key == r["key"])
            .values(n=r["n"], sum_dev=r["sum_dev"], sum_dev2=r["sum_dev2"]))
        if done.rowcount == 0:
            conn.execute(sa.insert(Cell).values(**r))


def _alert_message(c, kind, values, design):
    groups = design["groups"]
    est = values["estimate"]
    if kind == "difference_found":
        low, high = values["ci_low"], values["ci_high"]
        interval = ""
        if low is not None or high is not None:
            interval = (f" (repeated {100 * (1 - design['alpha']):.0f}% interval "
                        f"{'-inf' if low is None else f'{low:.4g}'} to {'inf' if high is None else f'{high:.4g}'})")
        return (f"{c.name}: {groups[0]} minus {groups[1]} differs by {est:.4g}{interval} at look "
                f"{values['look_number']}, with {values['n1']} and {values['n2']} events.")
    if kind == "no_material_difference":
        return (f"{c.name}: no material difference between {groups[0]} and {groups[1]} at look "
                f"{values['look_number']} (futility boundary crossed).")
    if kind == "plan_complete":
        return (f"{c.name}: the planned events were reached at look {values['look_number']} without "
                f"a difference being found.")
    if kind == "data_problem":
        why = values["warnings"][0] if values["warnings"] else "the data cannot support a test"
        return f"{c.name}: data problem at look {values['look_number']}: {why}."
    return f"{c.name}: now {kind.replace('_', ' ')} at look {values['look_number']}."


def _record(engine, c, config, state, design, values, cells, changes, batch, new_state, alert_kind, as_of):
    row = state["comparison"]
    stopped = new_state in STOPPING_DECISIONS
    settings = _json_safe(c.settings())
    try:
        with engine.begin() as conn:
            if row is None:
                version = state["next_version"]
                comparison_id = conn.execute(
                    _INSERT_COMPARISON, dict(
                        name=c.name, version=version, design=design,
                        design_hash=design_hash(_comparable(design)), settings=settings,
                        state=new_state, looks_taken=1, watermark=batch.watermark.to_dict(),
                        created_at=as_of, last_look_at=as_of, stopped_at=as_of if stopped else None,
                        archived=False,
                    )
                ).scalar_one()
            else:
                version, comparison_id = row["version"], row["id"]
                update = {"state": new_state, "looks_taken": values["look_number"],
                          "watermark": batch.watermark.to_dict(), "last_look_at": as_of,
                          "settings": settings}
                if stopped:
                    update["stopped_at"] = as_of
                if design.get("shift") is not None and row["design"].get("shift") is None:
                    update["design"] = design  # the shift is fixed at the first look with data
                # The guard: only the look that follows the one we read may be written.
                done = conn.execute(
                    _GUARDED_UPDATE, {**update, "guard_id": comparison_id, "guard_looks": row["looks_taken"]})
                if done.rowcount != 1:
                    raise LookAlreadyRecordedError(
                        f"comparison {c.name!r}: look {values['look_number']} was recorded by another "
                        f"process first (or the comparison was restarted); nothing was written")
            look_id = conn.execute(_INSERT_LOOK, {"comparison_id": comparison_id, **values}).scalar_one()
            _upsert_cells(conn, comparison_id, cells, changes)
            alert_id = None
            if alert_kind is not None:
                alert_id = _write_alert(conn, c, design, comparison_id, version, look_id, values,
                                        alert_kind, as_of)
    except IntegrityError:
        raise LookAlreadyRecordedError(
            f"comparison {c.name!r}: look {values['look_number']} was recorded by another process "
            f"first; nothing was written") from None
    except OperationalError as exc:
        raise StoreUnavailableError(
            f"cannot write the look to the history store: {str(exc.orig).splitlines()[0]}") from None
    return look_id, alert_id, version, comparison_id


def _write_alert(conn, c, design, comparison_id, version, look_id, values, kind, as_of):
    alert_id = str(uuid.uuid4())
    payload = _json_safe({
        "alert_id": alert_id, "comparison": c.name, "version": version, "kind": kind,
        "decision": values["decision"], "look": values["look_number"], "as_of": as_of.isoformat(),
        "estimate": values["estimate"], "ci_low": values["ci_low"], "ci_high": values["ci_high"],
        "p_value": values["p_value"], "fraction": values["fraction"], "n1": values["n1"],
        "n2": values["n2"], "groups": list(design["groups"]),
        "message": _alert_message(c, kind, values, design),
    })
    conn.execute(sa.insert(Alert.__table__), dict(
        id=alert_id, comparison_id=comparison_id, comparison_name=c.name, look_id=look_id, kind=kind,
        created_at=as_of, payload=payload, state="pending", acknowledged_at=None, acknowledged_by=None))
    channels = list(c.notify)
    if channels:
        conn.execute(sa.insert(Delivery.__table__), [
            {"alert_id": alert_id, "channel": ch, "state": "pending", "attempts": 0, "next_attempt_at": as_of}
            for ch in channels])
    return alert_id


# --------------------------------------------------------------------------- restart


def restart_comparison(engine, name: str) -> dict:
    """Archive the active version of a comparison; the next look starts version + 1.

    History is never rewritten: the archived version keeps its looks, cells and alerts.
    Returns ``{"name", "archived_version", "next_version"}``.
    """
    from .store.engine import ensure_current

    ensure_current(engine)
    with engine.begin() as conn:
        row = conn.execute(
            sa.select(Comparison.id, Comparison.version)
            .where(Comparison.name == name, Comparison.archived.is_(False))
            .order_by(Comparison.version.desc()).limit(1)).first()
        if row is None:
            raise UnknownComparisonError(f"no active comparison named {name!r} in the store")
        conn.execute(sa.update(Comparison).where(Comparison.id == row.id).values(archived=True))
    return {"name": name, "archived_version": row.version, "next_version": row.version + 1}
