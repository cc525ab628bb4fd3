"""Builders for tests of the live layer: config files, source tables, migrated stores.

Reusable by every live-layer test module::

    from tests.live_helpers import write_config, comparison_toml, create_events_table, migrated_store
"""

from __future__ import annotations

import hashlib
from datetime import datetime, timedelta, timezone
from pathlib import Path

import sqlalchemy as sa

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
]

UTC = timezone.utc


def at(day: int = 1, hour: int = 0, minute: int = 0, second: int = 0, *, month: int = 3, year: int = 2026):
    """An aware UTC datetime (default March 2026), for readable test times."""
    return datetime(year, month, day, hour, minute, second, tzinfo=UTC)


def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    raise TypeError(f"cannot write {value!r} as TOML")


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
    lines = ["[[comparison]]"] + [f"{k} = {_toml_value(v)}" for k, v in base.items()]
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
    from monitor.store import make_engine, upgrade

    upgrade(url)
    return make_engine(url)


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
