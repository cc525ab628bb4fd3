"""The history store: engines, migrations and the schema-version check.

SQLite (the embedded default) gets write-ahead logging, ``synchronous=NORMAL``
and foreign keys on every connection; PostgreSQL is used as is. The schema is
owned by Alembic revisions shipped inside the package (``migrations/``), so an
installed gapwatch finds them wherever it lives.
"""

from __future__ import annotations

import functools
from pathlib import Path

import sqlalchemy as sa
from alembic import command
from alembic.config import Config as AlembicConfig
from alembic.script import ScriptDirectory
from sqlalchemy import event
from sqlalchemy.engine import Engine

import migrations

from ..errors import StoreBehindError, StoreUnavailableError

__all__ = [
    "make_engine",
    "alembic_config",
    "upgrade",
    "downgrade",
    "current_revision",
    "head_revision",
    "ensure_current",
    "migration_state",
    "open_store",
]

# Seconds a SQLite writer waits for another writer before giving up.
_SQLITE_BUSY_SECONDS = 30


@functools.lru_cache(maxsize=1)
def _migrations_folder() -> Path:
    return Path(migrations.__file__).resolve().parent


def _is_sqlite(url) -> bool:
    return sa.engine.make_url(str(url) if not isinstance(url, sa.engine.URL) else url).get_backend_name() == "sqlite"


def _sqlite_pragmas(dbapi_connection, connection_record):
    cursor = dbapi_connection.cursor()
    try:
        cursor.execute("PRAGMA foreign_keys=ON")
        # WAL lets the dashboard read while a look writes; NORMAL is durable in WAL mode
        # except for the last transactions on power loss, never corrupting.
        cursor.execute("PRAGMA journal_mode=WAL")
        cursor.execute("PRAGMA synchronous=NORMAL")
        cursor.execute(f"PRAGMA busy_timeout={_SQLITE_BUSY_SECONDS * 1000}")
    finally:
        cursor.close()


def make_engine(url, **kwargs) -> Engine:
    """An engine for the history store (SQLite or PostgreSQL)."""
    url_text = url.render_as_string(hide_password=False) if isinstance(url, sa.engine.URL) else str(url)
    if _is_sqlite(url_text):
        connect_args = dict(kwargs.pop("connect_args", {}))
        connect_args.setdefault("timeout", _SQLITE_BUSY_SECONDS)
        engine = sa.create_engine(url_text, connect_args=connect_args, **kwargs)
        event.listen(engine, "connect", _sqlite_pragmas)
        return engine
    kwargs.setdefault("pool_pre_ping", True)
    return sa.create_engine(url_text, **kwargs)


def alembic_config(url):
    """An Alembic ``Config`` pointed at the packaged migrations and this store."""
    folder = _migrations_folder()
    cfg = AlembicConfig(str(folder / "alembic.ini"))
    cfg.set_main_option("script_location", str(folder))
    url_text = url.render_as_string(hide_password=False) if isinstance(url, sa.engine.URL) else str(url)
    # ConfigParser interpolation would choke on '%' in passwords.
    cfg.set_main_option("sqlalchemy.url", url_text.replace("%", "%%"))
    return cfg


def _run(url, action, revision):
    cfg = alembic_config(url)
    engine = make_engine(url)
    try:
        with engine.begin() as connection:
            cfg.attributes["connection"] = connection
            getattr(command, action)(cfg, revision)
    except sa.exc.OperationalError as exc:
        raise StoreUnavailableError(f"cannot reach the history store: {_brief(exc)}") from None
    finally:
        engine.dispose()


def upgrade(url, revision: str = "head") -> None:
    """Bring the store's schema up to ``revision`` (default: the newest)."""
    _run(url, "upgrade", revision)


def downgrade(url, revision: str) -> None:
    """Take the store's schema back to ``revision`` (``base`` = empty)."""
    _run(url, "downgrade", revision)


@functools.lru_cache(maxsize=8)
def _head_for(folder: str) -> str:
    return ScriptDirectory(folder).get_current_head()


def head_revision() -> str:
    """The newest revision this version of gapwatch ships."""
    return _head_for(str(_migrations_folder()))


_VERSION_TABLE = sa.table("alembic_version", sa.column("version_num"))


def _revision_on(connection) -> str | None:
    try:
        # A plain read of Alembic's version table: cheap enough for every look.
        return connection.execute(sa.select(_VERSION_TABLE.c.version_num)).scalar()
    except sa.exc.DBAPIError:
        # No version table (an empty store), or a real failure: tell them apart.
        # Nothing was read yet, so rolling back loses nothing (and clears an
        # aborted PostgreSQL transaction).
        connection.rollback()
        if not sa.inspect(connection).has_table("alembic_version"):
            return None
        raise


def current_revision(engine) -> str | None:
    """The store's revision (None for an empty store); an engine or an open connection."""
    try:
        if isinstance(engine, sa.engine.Connection):
            return _revision_on(engine)
        with engine.connect() as connection:
            return _revision_on(connection)
    except sa.exc.DBAPIError as exc:
        raise StoreUnavailableError(f"cannot reach the history store: {_brief(exc)}") from None


def migration_state(engine: Engine) -> dict:
    """``{"current": rev, "head": rev, "up_to_date": bool}``."""
    current, head = current_revision(engine), head_revision()
    return {"current": current, "head": head, "up_to_date": current == head}


def ensure_current(engine) -> str:
    """Refuse a store whose schema is not the one this gapwatch expects.

    Returns the revision; raises StoreBehindError naming ``gapwatch db upgrade``.
    """
    current, head = current_revision(engine), head_revision()
    if current == head:
        return current
    if current is None:
        raise StoreBehindError(
            "the history store has no gapwatch schema yet; run `gapwatch db upgrade` first")
    script = ScriptDirectory(str(_migrations_folder()))
    known = {rev.revision for rev in script.walk_revisions()}
    if current not in known:
        raise StoreBehindError(
            f"the history store is at revision {current}, newer than this gapwatch knows "
            f"(newest here: {head}); upgrade gapwatch itself")
    raise StoreBehindError(
        f"the history store is at revision {current}, behind {head}; run `gapwatch db upgrade`")


def open_store(url) -> Engine:
    """An engine on the history store, checked to be at the schema this code expects."""
    engine = make_engine(url)
    try:
        ensure_current(engine)
    except BaseException:
        engine.dispose()
        raise
    return engine


def _brief(exc) -> str:
    # The driver's message without the SQL and parameters SQLAlchemy appends.
    text = str(getattr(exc, "orig", exc)).strip().splitlines()
    return text[0] if text else type(exc).__name__
