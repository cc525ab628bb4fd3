"""Store engines (pragmas, foreign keys) and the refusal of a store that is not current."""

from __future__ import annotations

import pytest
import sqlalchemy as sa

from monitor.store import engine as store
from monitor.errors import StoreBehindError


def test_sqlite_pragmas(tmp_path):
    engine = store.make_engine(f"sqlite:///{tmp_path / 's.sqlite'}")
    with engine.connect() as conn:
        assert conn.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
        assert conn.exec_driver_sql("PRAGMA synchronous").scalar() == 1  # NORMAL
        assert conn.exec_driver_sql("PRAGMA foreign_keys").scalar() == 1


def test_foreign_keys_enforced(tmp_path):
    url = f"sqlite:///{tmp_path / 's.sqlite'}"
    store.upgrade(url)
    engine = store.make_engine(url)
    with pytest.raises(sa.exc.IntegrityError):
        with engine.begin() as conn:
            conn.exec_driver_sql(
                "INSERT INTO cell (comparison_id, kind, group_index, key, n, sum_dev, sum_dev2) "
                "VALUES (999, 'total', 0, '', 1, 0, 0)")


def test_empty_store_refused_with_the_command_to_run(tmp_path):
    engine = store.make_engine(f"sqlite:///{tmp_path / 's.sqlite'}")
    with pytest.raises(StoreBehindError, match="gapwatch db upgrade"):
        store.ensure_current(engine)


def _migrations_with_a_newer_revision(tmp_path, monkeypatch):
    """A copy of the packaged migrations plus a revision 0099 after the packaged head, as a newer
    gapwatch would ship."""
    import shutil

    folder = tmp_path / "migrations"
    shipped = store.head_revision()
    shutil.copytree(store._migrations_folder(), folder, ignore=shutil.ignore_patterns("__pycache__"))
    (folder / "versions" / "0099_note.py").write_text(
        "from alembic import op\nimport sqlalchemy as sa\n"
        f"revision = '0099'\ndown_revision = '{shipped}'\nbranch_labels = None\ndepends_on = None\n"
        "def upgrade():\n    op.create_table('note', sa.Column('id', sa.Integer, primary_key=True))\n"
        "def downgrade():\n    op.drop_table('note')\n")
    monkeypatch.setattr(store, "_migrations_folder", lambda: folder)


def test_store_a_migration_behind_refused(tmp_path, monkeypatch):
    url = f"sqlite:///{tmp_path / 's.sqlite'}"
    store.upgrade(url)  # the packaged head
    shipped = store.head_revision()
    engine = store.make_engine(url)
    _migrations_with_a_newer_revision(tmp_path, monkeypatch)
    with pytest.raises(StoreBehindError, match=rf"revision {shipped}, behind 0099; run `gapwatch db upgrade`"):
        store.ensure_current(engine)
    assert store.migration_state(engine) == {"current": shipped, "head": "0099", "up_to_date": False}
    store.upgrade(url)
    assert store.ensure_current(engine) == "0099"


def test_store_newer_than_this_gapwatch_refused(tmp_path):
    url = f"sqlite:///{tmp_path / 's.sqlite'}"
    store.upgrade(url)
    engine = store.make_engine(url)
    with engine.begin() as conn:
        conn.exec_driver_sql("UPDATE alembic_version SET version_num = '0999'")
    with pytest.raises(StoreBehindError, match="newer than this gapwatch"):
        store.ensure_current(engine)


@pytest.mark.postgres
def test_postgres_store(pg_database_url):
    engine = store.make_engine(pg_database_url)
    with pytest.raises(StoreBehindError, match="gapwatch db upgrade"):
        store.ensure_current(engine)
    store.upgrade(pg_database_url)
    assert store.ensure_current(engine) == store.head_revision()
    engine.dispose()


def test_store_at_the_previous_packaged_revision_refused(tmp_path):
    url = f"sqlite:///{tmp_path / 's.sqlite'}"
    store.upgrade(url, "0001")
    engine = store.make_engine(url)
    with pytest.raises(StoreBehindError, match=rf"revision 0001, behind {store.head_revision()}; run `gapwatch db upgrade`"):
        store.ensure_current(engine)
