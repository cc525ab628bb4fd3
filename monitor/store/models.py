"""The history store's schema: the single source of truth for Alembic.

Every datetime is stored as naive UTC and handed back timezone-aware (UTC),
so SQLite and PostgreSQL behave the same.
"""

from __future__ import annotations

from datetime import datetime, timezone

from sqlalchemy import (
    JSON,
    Boolean,
    DateTime,
    Float,
    ForeignKey,
    Integer,
    MetaData,
    String,
    Text,
    TypeDecorator,
    UniqueConstraint,
    Index,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column, relationship

__all__ = [
    "Base",
    "UTCDateTime",
    "Comparison",
    "Look",
    "Cell",
    "Alert",
    "Delivery",
    "Lease",
    "SourceHealth",
    "LookCheck",
    "Worker",
    "PlanChange",
]

NAMING_CONVENTION = {
    "ix": "ix_%(column_0_label)s",
    "uq": "uq_%(table_name)s_%(column_0_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}


class UTCDateTime(TypeDecorator):
    """Aware UTC datetimes in, aware UTC datetimes out; naive UTC on disk."""

    impl = DateTime
    cache_ok = True

    def process_bind_param(self, value, dialect):
        if value is None:
            return None
        if value.tzinfo is None:
            raise ValueError(f"naive datetime {value!r} given to the store; pass an aware UTC time")
        return value.astimezone(timezone.utc).replace(tzinfo=None)

    def process_result_value(self, value, dialect):
        if value is None:
            return None
        return value.replace(tzinfo=timezone.utc)


class Base(DeclarativeBase):
    metadata = MetaData(naming_convention=NAMING_CONVENTION)


class Comparison(Base):
    """One version of one configured comparison, with its design frozen at the first look."""

    __tablename__ = "comparison"
    __table_args__ = (UniqueConstraint("name", "version"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    name: Mapped[str] = mapped_column(String(200), index=True)
    version: Mapped[int] = mapped_column(Integer, default=1)
    # The statistical design (method, alpha, spending, plan, groups, alternative, shift, ...).
    design: Mapped[dict] = mapped_column(JSON)
    design_hash: Mapped[str] = mapped_column(String(64))
    # Non-design settings as last seen (source, table, schedule, notify): shown, never frozen.
    settings: Mapped[dict] = mapped_column(JSON, default=dict)
    state: Mapped[str] = mapped_column(String(40), default="collecting")
    looks_taken: Mapped[int] = mapped_column(Integer, default=0)
    # Where the next look starts reading: {"cutoff": iso, "arrival": value-or-null}.
    watermark: Mapped[dict | None] = mapped_column(JSON, nullable=True)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime())
    last_look_at: Mapped[datetime | None] = mapped_column(UTCDateTime(), nullable=True)
    stopped_at: Mapped[datetime | None] = mapped_column(UTCDateTime(), nullable=True)
    archived: Mapped[bool] = mapped_column(Boolean, default=False)
    # Replans made so far: a look guards its write on it, so a look worked out before a replan
    # is never recorded after it (see monitor.store.plan_changes).
    replans: Mapped[int] = mapped_column(Integer, default=0, server_default="0")

    looks: Mapped[list["Look"]] = relationship(back_populates="comparison", order_by="Look.look_number")


class Look(Base):
    """One recorded look: written whole, in the same transaction as its cells and alerts."""

    __tablename__ = "look"
    __table_args__ = (UniqueConstraint("comparison_id", "look_number"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    comparison_id: Mapped[int] = mapped_column(ForeignKey("comparison.id", ondelete="CASCADE"), index=True)
    look_number: Mapped[int] = mapped_column(Integer)
    as_of: Mapped[datetime] = mapped_column(UTCDateTime())
    cutoff: Mapped[datetime] = mapped_column(UTCDateTime())
    recorded_at: Mapped[datetime] = mapped_column(UTCDateTime())
    # Arrival-column watermark after this look (for replay by `verify`).
    arrival_watermark: Mapped[str | None] = mapped_column(String(100), nullable=True)

    n1: Mapped[int] = mapped_column(Integer)
    n2: Mapped[int] = mapped_column(Integer)
    mean1: Mapped[float | None] = mapped_column(Float, nullable=True)
    mean2: Mapped[float | None] = mapped_column(Float, nullable=True)
    sd1: Mapped[float | None] = mapped_column(Float, nullable=True)
    sd2: Mapped[float | None] = mapped_column(Float, nullable=True)
    pairs: Mapped[int | None] = mapped_column(Integer, nullable=True)
    new_events: Mapped[int] = mapped_column(Integer, default=0)
    late_events: Mapped[int] = mapped_column(Integer, default=0)
    excluded: Mapped[dict] = mapped_column(JSON, default=dict)

    estimate: Mapped[float | None] = mapped_column(Float, nullable=True)
    standard_error: Mapped[float | None] = mapped_column(Float, nullable=True)
    statistic: Mapped[float | None] = mapped_column(Float, nullable=True)
    df: Mapped[float | None] = mapped_column(Float, nullable=True)
    p_value: Mapped[float | None] = mapped_column(Float, nullable=True)
    information: Mapped[float | None] = mapped_column(Float, nullable=True)
    fraction: Mapped[float | None] = mapped_column(Float, nullable=True)
    boundary_z: Mapped[float | None] = mapped_column(Float, nullable=True)
    futility_z: Mapped[float | None] = mapped_column(Float, nullable=True)
    nominal_p: Mapped[float | None] = mapped_column(Float, nullable=True)
    cumulative_alpha: Mapped[float | None] = mapped_column(Float, nullable=True)
    ci_low: Mapped[float | None] = mapped_column(Float, nullable=True)
    ci_high: Mapped[float | None] = mapped_column(Float, nullable=True)

    clusters: Mapped[int | None] = mapped_column(Integer, nullable=True)
    design_effect: Mapped[float | None] = mapped_column(Float, nullable=True)
    effective_n: Mapped[float | None] = mapped_column(Float, nullable=True)

    decision: Mapped[str] = mapped_column(String(40))
    # Which boundary look this was (1, 2, ...) when the look tested against a
    # boundary; None when it only collected (no new information, too few
    # clusters, a data problem). The boundary is resumed from these looks only.
    boundary_look: Mapped[int | None] = mapped_column(Integer, nullable=True)
    warnings: Mapped[list] = mapped_column(JSON, default=list)
    # Everything else: the fixed-sample result, adjusted inference after a stop, timings.
    detail: Mapped[dict] = mapped_column(JSON, default=dict)
    duration_ms: Mapped[float | None] = mapped_column(Float, nullable=True)

    comparison: Mapped[Comparison] = relationship(back_populates="looks")


class Cell(Base):
    """A running summary: counts and shifted sums for one group in one bucket.

    ``kind`` is ``total`` (key ''), ``day`` (local calendar day, for the design
    effect), ``cluster`` (the clustering key) or ``pair`` (the pairing key).
    For a ratio comparison ``sum_dev``/``sum_dev2`` are the numerator's.
    """

    __tablename__ = "cell"

    comparison_id: Mapped[int] = mapped_column(
        ForeignKey("comparison.id", ondelete="CASCADE"), primary_key=True
    )
    kind: Mapped[str] = mapped_column(String(16), primary_key=True)
    group_index: Mapped[int] = mapped_column(Integer, primary_key=True)
    key: Mapped[str] = mapped_column(String(200), primary_key=True)
    n: Mapped[int] = mapped_column(Integer)
    sum_dev: Mapped[float] = mapped_column(Float)
    sum_dev2: Mapped[float] = mapped_column(Float)
    # Ratio comparisons only (NULL otherwise): the denominator's shifted sums and the
    # cross-product with the numerator (whose sums are sum_dev and sum_dev2).
    sum_den: Mapped[float | None] = mapped_column(Float, nullable=True)
    sum_den2: Mapped[float | None] = mapped_column(Float, nullable=True)
    sum_cross: Mapped[float | None] = mapped_column(Float, nullable=True)


class Alert(Base):
    """An outbox row: written with the look that changed the state, delivered later."""

    __tablename__ = "alert"
    __table_args__ = (Index("ix_alert_state_created", "state", "created_at"),)

    # A stable id (uuid4 text): receivers drop repeats by it.
    id: Mapped[str] = mapped_column(String(36), primary_key=True)
    comparison_id: Mapped[int | None] = mapped_column(
        ForeignKey("comparison.id", ondelete="CASCADE"), nullable=True, index=True
    )
    comparison_name: Mapped[str] = mapped_column(String(200))
    look_id: Mapped[int | None] = mapped_column(ForeignKey("look.id", ondelete="SET NULL"), nullable=True)
    kind: Mapped[str] = mapped_column(String(40))
    created_at: Mapped[datetime] = mapped_column(UTCDateTime())
    payload: Mapped[dict] = mapped_column(JSON)
    # pending | delivered | failed | acknowledged
    state: Mapped[str] = mapped_column(String(20), default="pending")
    acknowledged_at: Mapped[datetime | None] = mapped_column(UTCDateTime(), nullable=True)
    acknowledged_by: Mapped[str | None] = mapped_column(String(200), nullable=True)

    deliveries: Mapped[list["Delivery"]] = relationship(back_populates="alert")


class Delivery(Base):
    """One alert through one channel, with its retry bookkeeping."""

    __tablename__ = "delivery"
    __table_args__ = (UniqueConstraint("alert_id", "channel"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    alert_id: Mapped[str] = mapped_column(ForeignKey("alert.id", ondelete="CASCADE"), index=True)
    channel: Mapped[str] = mapped_column(String(100))
    # pending | delivered | failed
    state: Mapped[str] = mapped_column(String(20), default="pending")
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    next_attempt_at: Mapped[datetime] = mapped_column(UTCDateTime())
    last_error: Mapped[str | None] = mapped_column(Text, nullable=True)
    delivered_at: Mapped[datetime | None] = mapped_column(UTCDateTime(), nullable=True)

    alert: Mapped[Alert] = relationship(back_populates="deliveries")


class Lease(Base):
    """Who may look at a comparison now; a dead worker's lease simply expires."""

    __tablename__ = "lease"

    comparison_name: Mapped[str] = mapped_column(String(200), primary_key=True)
    holder: Mapped[str] = mapped_column(String(200))
    expires_at: Mapped[datetime] = mapped_column(UTCDateTime())


class SourceHealth(Base):
    """Failed looks per comparison, for the 'source unreachable' alert and backoff."""

    __tablename__ = "source_health"

    comparison_name: Mapped[str] = mapped_column(String(200), primary_key=True)
    failing_since: Mapped[datetime | None] = mapped_column(UTCDateTime(), nullable=True)
    failures: Mapped[int] = mapped_column(Integer, default=0)
    last_error: Mapped[str | None] = mapped_column(Text, nullable=True)
    last_attempt_at: Mapped[datetime | None] = mapped_column(UTCDateTime(), nullable=True)
    alerted: Mapped[bool] = mapped_column(Boolean, default=False)


class LookCheck(Base):
    """When a comparison was last checked by any worker (wall time), and what that check read.

    The scheduler's "is it due?" reads this row, so a worker that finds a comparison's claim
    free does not look again before the schedule says so, whoever looked last.
    """

    __tablename__ = "look_check"

    comparison_name: Mapped[str] = mapped_column(String(200), primary_key=True)
    # Wall time of the check (claims and schedules run on wall time, whatever clock looks use).
    checked_at: Mapped[datetime] = mapped_column(UTCDateTime())
    # The look's own "now" (the demo's simulated clock, or --as-of).
    as_of: Mapped[datetime | None] = mapped_column(UTCDateTime(), nullable=True)
    holder: Mapped[str | None] = mapped_column(String(200), nullable=True)
    # recorded (a look row was written) | quiet (nothing new was found; no look row)
    outcome: Mapped[str] = mapped_column(String(20), default="recorded")
    # What the check read: look number it stands at, cutoff, new events.
    detail: Mapped[dict] = mapped_column(JSON, default=dict)


class Worker(Base):
    """A running ``gapwatch run`` worker's heartbeat: the read side tells a dead monitor from a live one."""

    __tablename__ = "worker"

    holder: Mapped[str] = mapped_column(String(200), primary_key=True)
    started_at: Mapped[datetime] = mapped_column(UTCDateTime())
    # Wall time of the worker's latest beat (it beats on every tick, looked or not).
    beat_at: Mapped[datetime] = mapped_column(UTCDateTime())
    # Wall time of the worker's latest look (recorded or quiet).
    looked_at: Mapped[datetime | None] = mapped_column(UTCDateTime(), nullable=True)
    stopped_at: Mapped[datetime | None] = mapped_column(UTCDateTime(), nullable=True)


class PlanChange(Base):
    """A change made to a running comparison by hand: a new plan, or a restart.

    ``kind`` is ``replan`` (the comparison keeps its looks and spent alpha; ``record``
    holds the conditional-error figures its later boundaries come from) or ``restart``
    (the version was archived; ``record`` says whether the next version reads only data
    after this version's watermark, which it carries, or everything from the start).
    """

    __tablename__ = "plan_change"
    __table_args__ = (UniqueConstraint("comparison_id", "number"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    comparison_id: Mapped[int] = mapped_column(ForeignKey("comparison.id", ondelete="CASCADE"), index=True)
    # 1, 2, ... per comparison version, in the order the changes were made.
    number: Mapped[int] = mapped_column(Integer)
    kind: Mapped[str] = mapped_column(String(20))
    made_at: Mapped[datetime] = mapped_column(UTCDateTime())
    made_by: Mapped[str] = mapped_column(String(200))
    reason: Mapped[str] = mapped_column(Text, default="")
    # The comparison's looks_taken when the change was made (it applies from the next look).
    after_look: Mapped[int] = mapped_column(Integer)
    old_plan: Mapped[dict | None] = mapped_column(JSON, nullable=True)
    new_plan: Mapped[dict | None] = mapped_column(JSON, nullable=True)
    record: Mapped[dict] = mapped_column(JSON, default=dict)
