"""The history store: engines, migrations and the schema-version check.

SQLite (the embedded default) gets write-ahead logging, ``synchronous=NORMAL``
and foreign keys on every connection; PostgreSQL is used as is. The schema is
owned by Alembic revisions shipped inside the package (``migrations/``), so an
installed gapwatch finds them wherever it lives.
"""

from __future__ import annotations

import functools
import sqlite3
from pathlib import Path

import sqlalchemy as sa
from alembic import command
from alembic.config import Config as AlembicConfig
from alembic.script import ScriptDirectory
from alembic.util import CommandError
from sqlalchemy import event
from sqlalchemy.engine import Engine

import migrations

from ..errors import InvalidArgumentError, StoreBehindError, StoreUnavailableError
from .models import Base

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
    "check_revision",
    "rows_at_risk",
    "backup_sqlite",
    "sqlite_path",
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


def sqlite_path(url) -> Path | None:
    """The file of a SQLite store URL; None for other databases and in-memory SQLite."""
    parsed = url if isinstance(url, sa.engine.URL) else sa.engine.make_url(str(url))
    if parsed.get_backend_name() != "sqlite" or not parsed.database or parsed.database == ":memory:" \
            or parsed.database.startswith("file:"):
        return None
    return Path(parsed.database)


def make_engine(url, *, create: bool = True, **kwargs) -> Engine:
    """An engine for the history store (SQLite or PostgreSQL).

    A SQLite store in a folder that does not exist is refused naming the folder; with
    ``create=False`` (read-only commands) a SQLite store that does not exist yet is refused
    instead of being created empty. A URL whose driver is not installed is one clear error.
    """
    url_text = url.render_as_string(hide_password=False) if isinstance(url, sa.engine.URL) else str(url)
    try:
        parsed = sa.engine.make_url(url_text)
    except sa.exc.ArgumentError:
        raise StoreUnavailableError("the store URL is not a database URL (e.g. sqlite:///gapwatch.sqlite)") from None
    path = sqlite_path(parsed)
    if path is not None:
        if not path.parent.is_dir():
            raise StoreUnavailableError(f"the history store's folder {path.parent} does not exist")
        if not create and not path.exists():
            raise StoreBehindError(f"there is no history store at {path} yet; run `gapwatch db upgrade`")
    try:
        if parsed.get_backend_name() == "sqlite":
            connect_args = dict(kwargs.pop("connect_args", {}))
            connect_args.setdefault("timeout", _SQLITE_BUSY_SECONDS)
            engine = sa.create_engine(url_text, connect_args=connect_args, **kwargs)
            event.listen(engine, "connect", _sqlite_pragmas)
            return engine
        kwargs.setdefault("pool_pre_ping", True)
        return sa.create_engine(url_text, **kwargs)
    except ModuleNotFoundError as exc:
        raise StoreUnavailableError(
            f"the store URL ({parsed.drivername}) needs the Python module {exc.name!r}, which is not installed"
        ) from None
    except sa.exc.NoSuchModuleError:
        raise StoreUnavailableError(
            f"the store URL names a database driver this installation does not know: {parsed.drivername!r}"
        ) from None


def alembic_config(url):
    """An Alembic ``Config`` pointed at the packaged migrations and this store."""
    folder = _migrations_folder()
    cfg = AlembicConfig(str(folder / "alembic.ini"))
    cfg.set_main_option("script_location", str(folder))
    url_text = url.render_as_string(hide_password=False) if isinstance(url, sa.engine.URL) else str(url)
    # ConfigParser interpolation would choke on '%' in passwords.
    cfg.set_main_option("sqlalchemy.url", url_text.replace("%", "%%"))
    return cfg


def _script():
    return ScriptDirectory(str(_migrations_folder()))


def check_revision(revision: str) -> str:
    """``revision`` if this gapwatch knows it (``base``, ``head`` or a shipped revision); else one clear error."""
    if revision in ("base", "head"):
        return revision
    try:
        found = _script().get_revision(revision)
    except CommandError:
        found = None
    if found is None:
        known = ", ".join(["base", *sorted(r.revision for r in _script().walk_revisions()), "head"])
        raise InvalidArgumentError(f"unknown revision {revision!r}; known: {known}")
    return found.revision


def rows_at_risk(engine, revision: str) -> dict:
    """Rows in the tables a downgrade to ``revision`` would change: ``{table: rows}``, non-empty tables only.

    Any step down drops a table or a column of gapwatch's own (alembic keeps no data aside),
    so a downgrade with rows in the store loses some of them.
    """
    current = current_revision(engine)
    if current is None or revision == current:
        return {}
    script = _script()
    target = None if revision == "base" else script.get_revision(check_revision(revision)).revision
    steps = [r.revision for r in script.iterate_revisions(current, target or "base") if r.revision != target]
    if not steps:
        return {}  # the target is ahead of the store: nothing goes down
    counts = {}
    with engine.connect() as conn:
        for name, table in Base.metadata.tables.items():
            if sa.inspect(conn).has_table(name):
                n = conn.execute(sa.select(sa.func.count()).select_from(table)).scalar()
                if n:
                    counts[name] = n
    return counts


def backup_sqlite(url, suffix: str) -> Path | None:
    """Copy a SQLite store beside itself (WAL-safe, through SQLite's backup API); None for other stores."""
    path = sqlite_path(url)
    if path is None:
        return None
    target = path.with_name(f"{path.name}.{suffix}")
    n = 1
    while target.exists():
        n += 1
        target = path.with_name(f"{path.name}.{suffix}-{n}")
    source = sqlite3.connect(str(path))
    copy = sqlite3.connect(str(target))
    try:
        source.backup(copy)
    finally:
        copy.close()
        source.close()
    return target


def _run(url, action, revision):
    if revision is not None:
        check_revision(revision)
    cfg = alembic_config(url)
    engine = make_engine(url)
    try:
        with engine.begin() as connection:
            cfg.attributes["connection"] = connection
            getattr(command, action)(cfg, revision)
    except sa.exc.OperationalError as exc:
        raise StoreUnavailableError(f"cannot reach the history store: {_brief(exc)}") from None
    except CommandError as exc:
        raise InvalidArgumentError(f"cannot {action} the store to {revision!r}: {str(exc).splitlines()[0]}") from None
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
    """An engine on the history store, checked to be at the schema this code expects.

    Reading never creates a store: a SQLite file that does not exist yet is refused.
    """
    engine = make_engine(url, create=False)
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
