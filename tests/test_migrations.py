"""Alembic migrations: upgrade from empty, down to base and up again, models equal migrations."""

from __future__ import annotations

import pytest
import sqlalchemy as sa
from alembic.autogenerate import compare_metadata
from alembic.migration import MigrationContext

from monitor.store import engine as store
from monitor.store.models import Base


def _tables(engine):
    return set(sa.inspect(engine).get_table_names()) - {"alembic_version"}


def _diffs(engine):
    with engine.connect() as conn:
        context = MigrationContext.configure(conn, opts={"compare_type": True})
        return compare_metadata(context, Base.metadata)


def _round_trip(url):
    engine = store.make_engine(url)
    try:
        assert store.current_revision(engine) is None
        store.upgrade(url)
        assert store.current_revision(engine) == store.head_revision()
        assert _tables(engine) == set(Base.metadata.tables)
        assert _diffs(engine) == []
        store.downgrade(url, "base")
        assert store.current_revision(engine) is None
        assert _tables(engine) == set()
        store.upgrade(url, "head")
        assert _diffs(engine) == []
        store.ensure_current(engine)
    finally:
        engine.dispose()


def test_sqlite_round_trip(tmp_path):
    _round_trip(f"sqlite:///{tmp_path / 'store.sqlite'}")


@pytest.mark.postgres
def test_postgres_round_trip(pg_database_url):
    _round_trip(pg_database_url)


def test_migrations_found_from_the_package_not_the_working_directory(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    url = f"sqlite:///{tmp_path / 's.sqlite'}"
    store.upgrade(url)
    assert store.current_revision(store.make_engine(url)) == store.head_revision()
