"""The demo's source databases and the live feed that keeps appending to them.

The feed owns a simulated clock that runs ``speed`` simulated seconds per
real second from a fixed start. Each tick it inserts, in one transaction per
database, every generated row whose arrival time has been reached, and records
how far it got in a one-row progress table, so a later run resumes where this
one stopped. The same clock is handed to the scheduler, so every look's
``as_of`` is simulated time too.
"""

from __future__ import annotations

import threading
import time
from datetime import datetime, timedelta, timezone
from pathlib import Path

import sqlalchemy as sa
from sqlalchemy.types import UserDefinedType

from .scenario import (DATABASES, DEFAULT_SEED, EPOCH, LIVE_START, TABLES, TableSpec, events_between, first_day,
                       format_time, parse_time)

__all__ = ["SimulatedClock", "LiveFeed", "database_path", "database_url", "create_databases", "fed_until"]

PROGRESS_TABLE = "demo_feed_progress"


class LooseReal(UserDefinedType):
    """A REAL column that takes whatever it is given, the way SQLite itself does.

    Operational tables often hold the odd 'n/a' in a numeric column; SQLite's
    type affinity keeps such text as text, and the demo needs it to, so no
    Python-side conversion happens on the way in.
    """

    cache_ok = True

    def get_col_spec(self, **kw):
        return "REAL"


class LooseInteger(LooseReal):
    """An INTEGER column without Python-side conversion (see :class:`LooseReal`)."""

    def get_col_spec(self, **kw):
        return "INTEGER"


def database_path(folder, database: str) -> Path:
    return Path(folder) / f"{database}.sqlite"


def database_url(folder, database: str) -> str:
    return f"sqlite:///{database_path(folder, database)}"


def _table(metadata: sa.MetaData, spec: TableSpec) -> sa.Table:
    columns = [
        # An integer primary key that grows with every insert: the arrival
        # column the monitor uses to find late rows.
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column(spec.group_column, sa.Text),
        sa.Column(spec.value_column, LooseInteger() if spec.integer_value else LooseReal()),
        sa.Column(spec.time_column, sa.Text),
    ]
    for extra in spec.extra_columns:
        columns.append(sa.Column(extra, sa.Text))
    table = sa.Table(spec.name, metadata, *columns)
    sa.Index(f"ix_{spec.name}_{spec.time_column}", table.c[spec.time_column])
    return table


def _schema(database: str) -> tuple[sa.MetaData, dict[str, sa.Table], sa.Table]:
    metadata = sa.MetaData()
    tables = {spec.name: _table(metadata, spec) for spec in TABLES if spec.database == database}
    progress = sa.Table(
        PROGRESS_TABLE, metadata,
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column("fed_until", sa.Text, nullable=False),
    )
    return metadata, tables, progress


def _engine(folder, database):
    engine = sa.create_engine(database_url(folder, database))

    @sa.event.listens_for(engine, "connect")
    def _pragmas(dbapi_connection, record):
        cursor = dbapi_connection.cursor()
        # WAL lets the monitor read while the feed writes; the wait covers
        # the moments when a checkpoint holds the lock.
        cursor.execute("PRAGMA journal_mode=WAL")
        cursor.execute("PRAGMA busy_timeout=10000")
        cursor.close()

    return engine


def create_databases(folder, *, start: datetime = LIVE_START, seed: int = DEFAULT_SEED) -> dict:
    """Create the demo source databases in ``folder`` holding every row that arrived by ``start``.

    Returns ``{table: rows inserted}``. The databases must not exist yet.
    """
    folder = Path(folder)
    counts = {}
    for database in DATABASES:
        path = database_path(folder, database)
        if path.exists():
            raise FileExistsError(f"{path} already exists")
        engine = _engine(folder, database)
        metadata, tables, progress = _schema(database)
        try:
            metadata.create_all(engine)
            with engine.begin() as conn:
                for name, table in tables.items():
                    spec = next(t for t in TABLES if t.name == name)
                    history = EPOCH + timedelta(days=first_day(name) - 1)
                    rows = [e.row(spec) for e in events_between(name, history, start, seed=seed)]
                    if rows:
                        conn.execute(table.insert(), rows)
                    counts[name] = len(rows)
                conn.execute(progress.insert(), [{"id": 1, "fed_until": format_time(start)}])
        finally:
            engine.dispose()
    return counts


def fed_until(folder) -> datetime | None:
    """The simulated time up to which every demo database has been fed (the earliest of them)."""
    reached = []
    for database in DATABASES:
        path = database_path(folder, database)
        if not path.exists():
            return None
        engine = sa.create_engine(database_url(folder, database))
        try:
            _, _, progress = _schema(database)
            with engine.connect() as conn:
                value = conn.execute(sa.select(progress.c.fed_until).where(progress.c.id == 1)).scalar()
        except sa.exc.SQLAlchemyError:
            return None
        finally:
            engine.dispose()
        if value is None:
            return None
        reached.append(parse_time(value))
    return min(reached) if reached else None


class SimulatedClock:
    """Aware-UTC "now" running ``speed`` simulated seconds per real second from ``start``.

    Callable with no arguments, as the scheduler's ``clock`` expects.
    Whole seconds only, matching the time columns.
    """

    def __init__(self, start: datetime, speed: float, *, monotonic=time.monotonic):
        if start.tzinfo is None:
            raise ValueError(f"start must be timezone-aware, got {start!r}")
        if not speed > 0:
            raise ValueError(f"speed must be > 0, got {speed!r}")
        self.start = start.astimezone(timezone.utc)
        self.speed = float(speed)
        self._monotonic = monotonic
        self._origin = monotonic()

    def __call__(self) -> datetime:
        elapsed = (self._monotonic() - self._origin) * self.speed
        return (self.start + timedelta(seconds=elapsed)).replace(microsecond=0)


class LiveFeed:
    """Appends the scenario's rows to the demo databases as the simulated clock reaches them."""

    def __init__(self, folder, clock, *, seed: int = DEFAULT_SEED, tick: float = 0.25, since: datetime | None = None):
        self.folder = Path(folder)
        self.clock = clock
        self.seed = seed
        self.tick = tick
        self.reached = since if since is not None else fed_until(folder)
        if self.reached is None:
            raise FileNotFoundError(f"no demo databases in {self.folder}")
        self.inserted = {spec.name: 0 for spec in TABLES}
        self.errors = []
        self._cache = {}
        self._engines = {db: _engine(self.folder, db) for db in DATABASES}
        self._schemas = {db: _schema(db) for db in DATABASES}
        self._lock = threading.Lock()

    def advance(self, until: datetime | None = None) -> int:
        """Insert every row arriving in (reached, until]; returns the number inserted."""
        with self._lock:
            until = self.clock() if until is None else until
            if until <= self.reached:
                return 0
            total = 0
            for database in DATABASES:
                _, tables, progress = self._schemas[database]
                with self._engines[database].begin() as conn:
                    for name, table in tables.items():
                        spec = next(t for t in TABLES if t.name == name)
                        events = events_between(name, self.reached, until, seed=self.seed, cache=self._cache)
                        if events:
                            conn.execute(table.insert(), [e.row(spec) for e in events])
                        self.inserted[name] += len(events)
                        total += len(events)
                    conn.execute(progress.update().where(progress.c.id == 1).values(fed_until=format_time(until)))
            self.reached = until
            return total

    def run(self, stop_event: threading.Event) -> None:
        """Advance every ``tick`` real seconds until ``stop_event`` is set.

        A failed insert (a locked database, say) is recorded and retried on the
        next tick; it never ends the feed.
        """
        while not stop_event.is_set():
            try:
                self.advance()
            except sa.exc.SQLAlchemyError as exc:
                self.errors.append(str(exc).splitlines()[0])
            stop_event.wait(self.tick)

    def close(self) -> None:
        for engine in self._engines.values():
            engine.dispose()
