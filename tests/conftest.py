"""Shared fixtures: a fresh PostgreSQL database per test, when the test script started a server."""

from __future__ import annotations

import os
import uuid

import pytest


def _server_url():
    return os.environ.get("GAPWATCH_TEST_PG_URL")


@pytest.fixture
def pg_database_url():
    """URL of a new, empty PostgreSQL database, dropped after the test."""
    server = _server_url()
    if not server:
        pytest.skip("GAPWATCH_TEST_PG_URL is not set (tests/run.sh sets it)")
    import sqlalchemy as sa

    name = f"gw_{uuid.uuid4().hex[:12]}"
    admin = sa.create_engine(server, isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(sa.text(f'CREATE DATABASE "{name}"'))
    url = sa.engine.make_url(server).set(database=name)
    try:
        yield url.render_as_string(hide_password=False)
    finally:
        with admin.connect() as conn:
            conn.execute(sa.text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()
