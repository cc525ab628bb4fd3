"""Build event tables with known rows on any SQLAlchemy URL (tests, benchmarks, demos).

These helpers write through an ordinary read-write engine; the monitor's own
``Source`` only ever reads.

Example::

    frame = make_events(500, seed=1)
    create_events_table("sqlite:///ops.sqlite", frame, time_storage="iso")
"""

from __future__ import annotations

import math
import os
import uuid
from datetime import datetime, timedelta, timezone

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa
from sqlalchemy.dialects import mysql

__all__ = [
    "START",
    "make_events",
    "events_table",
    "create_events_table",
    "append_events",
    "seconds_table",
    "insert_seconds",
    "numbering",
    "stored_time",
    "sqlite_url",
    "backends",
    "backend_url",
    "TIMESTAMP_STORAGE",
    "DOUBLE",
    "TIME_TEXT",
]

# Column types that mean the same on every tested database: a double (MySQL's and DuckDB's
# FLOAT is single precision), a timestamp keeping microseconds (MySQL's DATETIME drops them),
# and indexable text for ISO times (MySQL cannot index an unbounded TEXT).
DOUBLE = sa.Double()
TIMESTAMP = sa.DateTime(timezone=False).with_variant(mysql.DATETIME(fsp=6), "mysql", "mariadb")
TIME_TEXT = sa.String(64)

# The time storage each database's tests use for a "real timestamp" column.
TIMESTAMP_STORAGE = {"sqlite": "iso", "postgresql": "timestamptz", "mysql": "timestamp", "duckdb": "timestamp"}
_MARKS = {"postgresql": (pytest.mark.postgres,), "mysql": (pytest.mark.mysql,)}


def backends(*names):
    """``pytest.param`` per database name (sqlite, postgresql, mysql, duckdb), for ``backend_url``."""
    return [pytest.param(name, id=name, marks=_MARKS.get(name, ())) for name in names]


@pytest.fixture
def backend_url(request, tmp_path):
    """URL of an empty database of the kind named by the parameter (see ``backends``)."""
    name = request.param
    if name == "sqlite":
        yield sqlite_url(tmp_path / "ops.sqlite")
    elif name == "duckdb":
        yield f"duckdb:///{tmp_path / 'ops.duckdb'}"
    elif name == "postgresql":
        yield request.getfixturevalue("pg_database_url")
    elif name == "mysql":
        yield from _mysql_database()
    else:
        raise ValueError(f"unknown backend {name!r}")


def _mysql_database():
    server = os.environ.get("GAPWATCH_TEST_MYSQL_URL")
    if not server:
        pytest.skip("GAPWATCH_TEST_MYSQL_URL is not set (tests/run.sh sets it)")
    name = f"gw_{uuid.uuid4().hex[:12]}"
    admin = sa.create_engine(server, isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(sa.text(f"CREATE DATABASE `{name}`"))
    try:
        yield sa.engine.make_url(server).set(database=name).render_as_string(hide_password=False)
    finally:
        with admin.connect() as conn:
            conn.execute(sa.text(f"DROP DATABASE IF EXISTS `{name}`"))
        admin.dispose()


START = datetime(2026, 3, 2, 6, 0, tzinfo=timezone.utc)


def sqlite_url(path) -> str:
    return f"sqlite:///{path}"


def make_events(
    n,
    *,
    seed=0,
    groups=("east", "west"),
    start=START,
    span=timedelta(hours=12),
    means=(100.0, 103.0),
    sds=(10.0, 12.0),
    keys=None,
    proportion=False,
):
    """Random events: columns site, value, done_at (aware UTC), crew (when ``keys``)."""
    rng = np.random.default_rng(seed)
    which = rng.integers(0, 2, size=n)
    if proportion:
        p = np.where(which == 0, means[0], means[1])
        value = (rng.random(n) < p).astype(float)
    else:
        value = rng.normal(np.take(means, which), np.take(sds, which))
    offsets = np.sort(rng.uniform(0, span.total_seconds(), size=n))
    # Microsecond resolution, so every storage format (text, epoch, timestamp) holds the same instant.
    micros = np.round(offsets * 1e6).astype("int64")
    done_at = [start + timedelta(microseconds=int(m)) for m in micros]
    frame = pd.DataFrame({"site": np.take(np.asarray(groups, dtype=object), which), "value": value, "done_at": done_at})
    if keys is not None:
        frame["crew"] = [f"crew-{k}" for k in rng.integers(0, keys, size=n)]
    return frame


def numbering(name: str) -> dict:
    """Column options that number ids from a sequence, also for inserts that do not name the id."""
    return {"server_default": sa.text(f"nextval('{name}')"), "default": sa.Sequence(name)}


def stored_time(moment, storage: str):
    """``moment`` (aware datetime or None) as the table stores it for ``storage``."""
    if moment is None or (isinstance(moment, float) and math.isnan(moment)):
        return None
    if isinstance(moment, str):
        return moment
    if isinstance(moment, pd.Timestamp):
        moment = moment.to_pydatetime()
    moment = moment.astimezone(timezone.utc)
    if storage == "iso":
        return moment.replace(tzinfo=None).isoformat(sep=" ", timespec="microseconds")
    if storage == "iso_z":
        return moment.replace(tzinfo=None).isoformat(sep="T", timespec="milliseconds") + "Z"
    if storage == "epoch":
        return moment.timestamp()
    if storage == "epoch_int":
        return int(math.floor(moment.timestamp()))
    if storage == "timestamptz":
        return moment
    if storage == "timestamp":
        return moment.replace(tzinfo=None)
    raise ValueError(f"storage must be iso, iso_z, epoch, epoch_int, timestamp or timestamptz, got {storage!r}")


def events_table(
    metadata,
    *,
    table="events",
    time_storage="iso",
    value_type=None,
    group_type=None,
    key_column=None,
    id_column="id",
    time_index=True,
    schema=None,
    id_sequence=False,
    extra_columns=(),
):
    """A ``sa.Table`` for events: id (integer primary key), site, value, done_at[, key][, extra columns].

    ``id_sequence`` numbers the ids from a sequence (DuckDB has no auto-increment column).
    """
    time_type = {
        "iso": TIME_TEXT,
        "iso_z": TIME_TEXT,
        "epoch": DOUBLE,
        "epoch_int": sa.BigInteger(),
        "timestamptz": sa.DateTime(timezone=True),
        "timestamp": TIMESTAMP,
    }[time_storage]
    columns = []
    if id_column:
        ids = numbering(f"{table}_{id_column}_seq") if id_sequence else {}
        columns.append(sa.Column(id_column, sa.Integer, primary_key=True, autoincrement=True, **ids))
    columns += [
        sa.Column("site", group_type if group_type is not None else sa.String(40)),
        sa.Column("value", value_type if value_type is not None else DOUBLE),
        sa.Column("done_at", time_type),
    ]
    if key_column:
        columns.append(sa.Column(key_column, sa.String(40)))
    columns += [sa.Column(name, column_type) for name, column_type in extra_columns]
    t = sa.Table(table, metadata, *columns, schema=schema)
    if time_index:
        sa.Index(f"ix_{table}_done_at", t.c.done_at)
    return t


def _records(rows, time_storage, columns):
    frame = rows if isinstance(rows, pd.DataFrame) else pd.DataFrame(list(rows))
    records = []
    for rec in frame.to_dict("records"):
        out = {}
        for name in columns:
            if name not in rec:
                continue
            v = rec[name]
            if name == "done_at":
                v = stored_time(v, time_storage)
            elif isinstance(v, float) and math.isnan(v) and name != "value":
                v = None
            elif isinstance(v, np.generic):
                v = v.item()
            out[name] = v
        records.append(out)
    return records


def create_events_table(url, rows, *, table="events", time_storage="iso", chunk=5000, **table_options):
    """Create ``table`` on ``url`` and insert ``rows`` (DataFrame or dicts); returns the Table."""
    engine = sa.create_engine(url)
    try:
        metadata = sa.MetaData()
        table_options.setdefault("id_sequence", engine.dialect.name == "duckdb")
        t = events_table(metadata, table=table, time_storage=time_storage, **table_options)
        metadata.create_all(engine)
        _insert(engine, t, rows, time_storage, chunk)
        return t
    finally:
        engine.dispose()


def append_events(url, rows, *, table="events", time_storage="iso", chunk=5000, schema=None):
    """Insert more rows (the columns they name) into an existing events table."""
    frame = rows if isinstance(rows, pd.DataFrame) else pd.DataFrame(list(rows))
    # Named columns, not reflection: not every dialect reflects (DuckDB's cannot).
    t = sa.table(table, *(sa.column(name) for name in frame.columns), schema=schema)
    engine = sa.create_engine(url)
    try:
        _insert(engine, t, frame, time_storage, chunk)
    finally:
        engine.dispose()


def _seconds_definition(dialect_name, *, time_type=None, value_type=None, table="events"):
    ids = numbering(f"{table}_id_seq") if dialect_name == "duckdb" else {}
    return sa.Table(
        table, sa.MetaData(),
        sa.Column("id", sa.Integer, primary_key=True, autoincrement=True, **ids),
        sa.Column("site", sa.String(40)),
        sa.Column("seconds", value_type if value_type is not None else DOUBLE),
        sa.Column("done_at", time_type if time_type is not None else TIMESTAMP),
        sa.Index(f"ix_{table}_done_at", "done_at"),
    )


def seconds_table(url, rows=(), *, time_type=None, value_type=None, table="events"):
    """The live tests' ``(id, site, seconds, done_at)`` table on any database, with ``rows`` inserted.

    ``rows`` are dicts; aware times are stored as naive UTC for timestamp columns.
    """
    engine = sa.create_engine(url)
    try:
        t = _seconds_definition(engine.dialect.name, time_type=time_type, value_type=value_type, table=table)
        t.metadata.create_all(engine)
    finally:
        engine.dispose()
    insert_seconds(url, rows, time_type=time_type, value_type=value_type, table=table)
    return t


def insert_seconds(url, rows, *, time_type=None, value_type=None, table="events"):
    """Append dicts to a ``seconds_table`` (typed, so times are stored as the table's type stores them)."""
    rows = [
        {k: (v.astimezone(timezone.utc).replace(tzinfo=None) if isinstance(v, datetime) else v) for k, v in r.items()}
        for r in rows
    ]
    if not rows:
        return
    engine = sa.create_engine(url)
    try:
        t = _seconds_definition(engine.dialect.name, time_type=time_type, value_type=value_type, table=table)
        with engine.begin() as conn:
            conn.execute(sa.insert(t), rows)
    finally:
        engine.dispose()


def _insert(engine, t, rows, time_storage, chunk):
    names = [c.name for c in t.columns if not (getattr(c, "primary_key", False) and c.autoincrement)]
    records = _records(rows, time_storage, names)
    with engine.begin() as conn:
        for i in range(0, len(records), chunk):
            part = records[i : i + chunk]
            if part:
                conn.execute(sa.insert(t), part)
