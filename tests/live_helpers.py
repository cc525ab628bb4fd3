"""Builders for tests of the live layer: config files, source tables, migrated stores.

Reusable by every live-layer test module::

    from tests.live_helpers import write_config, comparison_toml, create_events_table, migrated_store
"""

from __future__ import annotations

import hashlib
from datetime import datetime, timedelta, timezone
from pathlib import Path

import sqlalchemy as sa

from monitor.config import toml_value
from monitor.look import LookMemory, take_look

__all__ = [
    "UTC",
    "write_config",
    "comparison_toml",
    "config_toml",
    "create_events_table",
    "insert_events",
    "migrated_store",
    "file_digest",
    "at",
    "LiveWorld",
    "event_rows",
    "CHANNELS",
]

UTC = timezone.utc


def at(day: int = 1, hour: int = 0, minute: int = 0, second: int = 0, *, month: int = 3, year: int = 2026):
    """An aware UTC datetime (default March 2026), for readable test times."""
    return datetime(year, month, day, hour, minute, second, tzinfo=UTC)




def comparison_toml(**keys) -> str:
    """One ``[[comparison]]`` table; defaults describe a Welch comparison of ``events``."""
    base = {
        "name": "handle-time",
        "source": "ops",
        "table": "events",
        "group_column": "site",
        "groups": ["east", "west"],
        "value_column": "seconds",
        "time_column": "done_at",
        "method": "welch",
        "planned_per_group": 400,
        "every": "10m",
    }
    for key, value in keys.items():
        if value is None:
            base.pop(key, None)
        else:
            base[key] = value
    lines = ["[[comparison]]"] + [f"{k} = {toml_value(v)}" for k, v in base.items()]
    return "\n".join(lines) + "\n"


def config_toml(source_url: str, store_url: str, comparisons=("",), channels: str = "") -> str:
    """A whole file: store, one source named ``ops``, channels text, comparison tables."""
    parts = [f'[store]\nurl = "{store_url}"\n', f'[sources.ops]\nurl = "{source_url}"\n']
    if channels:
        parts.append(channels)
    parts.extend(c if c else comparison_toml() for c in comparisons)
    return "\n".join(parts)


def write_config(folder, text: str, name: str = "gapwatch.toml") -> Path:
    """Write ``text`` to ``folder/name`` and return the path."""
    path = Path(folder) / name
    path.write_text(text)
    return path


def create_events_table(url: str, table: str = "events", rows=(), *, value_type=sa.Float,
                        group_type=sa.String(20), time_type=None, key_column: str | None = None,
                        extra_columns=()):
    """Create a source table ``(id, site, seconds, done_at[, key][, extras])`` and insert rows.

    ``rows`` are dicts with keys ``site``, ``seconds``, ``done_at`` (aware datetimes are
    stored as naive UTC for timestamp columns) and optional ``key`` / extras.
    """
    engine = sa.create_engine(url)
    metadata = sa.MetaData()
    columns = [
        sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
        sa.Column("site", group_type),
        sa.Column("seconds", value_type),
        sa.Column("done_at", time_type or sa.DateTime),
    ]
    if key_column:
        columns.append(sa.Column(key_column, sa.String(50)))
    for name, type_ in extra_columns:
        columns.append(sa.Column(name, type_))
    events = sa.Table(table, metadata, *columns)
    metadata.create_all(engine)
    engine.dispose()
    if rows:
        insert_events(url, table, rows)
    return events


def _naive(value):
    if isinstance(value, datetime) and value.tzinfo is not None:
        return value.astimezone(UTC).replace(tzinfo=None)
    return value


def insert_events(url: str, table: str, rows) -> None:
    """Append rows (dicts) to a source table, converting aware times to naive UTC."""
    engine = sa.create_engine(url)
    try:
        target = sa.Table(table, sa.MetaData(), autoload_with=engine)
        with engine.begin() as conn:
            conn.execute(target.insert(), [{k: _naive(v) for k, v in r.items()} for r in rows])
    finally:
        engine.dispose()


def migrated_store(url: str):
    """Upgrade the store at ``url`` to head and return an engine on it."""
    from monitor.store.engine import make_engine, upgrade

    upgrade(url)
    return make_engine(url)


def event_rows(rng, count, start, step_minutes=3, east=100.0, west=100.0, sd=10.0, day_sd=0.0):
    """Alternating west/east events every ``step_minutes`` from ``start`` (normal values).

    ``day_sd`` adds a random effect per (day, site): each site's day has its own staffing.
    """
    rows, day_effect = [], {}
    for i in range(count):
        when = start + timedelta(minutes=step_minutes * i)
        site = "east" if i % 2 else "west"
        d = (when.date(), site)
        if d not in day_effect:
            day_effect[d] = rng.normal(0, day_sd) if day_sd else 0.0
        mean = east if site == "east" else west
        rows.append({"site": site, "seconds": float(rng.normal(mean, sd) + day_effect[d]), "done_at": when})
    return rows


CHANNELS = '[channels.ops-log]\ntype = "log"\n[channels.other-log]\ntype = "log"\n'


class LiveWorld:
    """A source table, a config file and a migrated store in one folder."""

    def __init__(self, folder, rows=(), channels=CHANNELS, *, source_url=None, store_url=None, **keys):
        self.folder = folder
        self.source_path = folder / "ops.sqlite"
        self.source_url = source_url or f"sqlite:///{self.source_path}"
        self.store_url = store_url or f"sqlite:///{folder / 'store.sqlite'}"
        create_events_table(self.source_url, rows=list(rows))
        self.channels = channels
        self.write(**keys)
        self.engine = migrated_store(self.config.store_url)
        # What this world's "process" keeps between its looks, as the service keeps one.
        self.memory = LookMemory()

    def write(self, **keys):
        text = config_toml(self.source_url, self.store_url, [comparison_toml(**keys)], self.channels)
        from monitor.config import load_config

        self.config = load_config(write_config(self.folder, text), environ={})
        self.comparison = self.config.comparisons[0]

    def look(self, as_of, **kw):
        kw.setdefault("memory", self.memory)
        return take_look(self.config, self.comparison.name, as_of=as_of, engine=self.engine, **kw)

    def raw(self):
        import pandas as pd

        engine = sa.create_engine(self.source_url)
        frame = pd.read_sql("SELECT site, seconds, done_at FROM events", engine)
        engine.dispose()
        frame["done_at"] = pd.to_datetime(frame["done_at"], utc=True)
        return frame

    def looks(self):
        from monitor.store.models import Look

        with self.engine.connect() as conn:
            return conn.execute(sa.select(Look).order_by(Look.id)).all()

    def count(self, model):
        with self.engine.connect() as conn:
            return conn.execute(sa.select(sa.func.count()).select_from(model)).scalar()


def file_digest(path) -> str:
    """SHA-256 of a file's bytes (plus its -wal and -shm companions when present)."""
    digest = hashlib.sha256()
    for suffix in ("", "-wal", "-shm"):
        p = Path(str(path) + suffix)
        if p.exists():
            digest.update(suffix.encode())
            digest.update(p.read_bytes())
    return digest.hexdigest()


def regular_times(start: datetime, count: int, step_seconds: float):
    """``count`` times from ``start`` every ``step_seconds``."""
    return [start + timedelta(seconds=step_seconds * i) for i in range(count)]
