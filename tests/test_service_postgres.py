"""``gapwatch run`` on a PostgreSQL store: two workers at once, kill -9 inside the look's
transaction, a clean stop that lets the running look finish, and a PostgreSQL source that goes away."""

from __future__ import annotations

import signal
import time
from datetime import datetime, timedelta, timezone

import pytest
import sqlalchemy as sa

from endpoints import ServiceProcess, WebhookReceiver
from live_helpers import migrated_store
from test_service import (
    SECRET,
    FAST_SERVICE,
    Feeder,
    _assert_store_whole,
    alerts_of,
    assert_looks_consistent,
    assert_one_alert_per_state_change,
    calls,
    hook_channel,
    looks_of,
    make_source,
    write_service_config,
)

pytestmark = [pytest.mark.postgres, pytest.mark.slow]

UTC = timezone.utc


@pytest.fixture
def pg_site(tmp_path, pg_database_url):
    engine = migrated_store(pg_database_url)
    source_path = tmp_path / "ops.sqlite"
    source_url = make_source(source_path)
    yield {"folder": tmp_path, "store_url": pg_database_url, "engine": engine,
           "source_path": source_path, "source_url": source_url}
    engine.dispose()


def _service(site, config, name):
    return ServiceProcess(config, site["folder"] / f"{name}.log", env={"HOOK_SECRET": SECRET})


def _waiting_on_lock(engine):
    """Backends (other than ours) waiting for a lock: a look stuck inside its transaction."""
    with engine.connect() as conn:
        return conn.execute(sa.text(
            "SELECT count(*) FROM pg_locks l JOIN pg_stat_activity a ON a.pid = l.pid "
            "WHERE NOT l.granted AND a.datname = current_database() AND a.pid <> pg_backend_pid()"
        )).scalar()


def test_two_workers_share_one_store(pg_site):
    engine = pg_site["engine"]
    config = write_service_config(pg_site["folder"], pg_site["source_url"], pg_site["store_url"],
                                  [calls(), calls(name="pick-seconds", table="picks")])
    with Feeder(pg_site["source_path"], {"calls": (300.0, 300.0), "picks": (100.0, 100.0)}):
        with _service(pg_site, config, "a") as a, _service(pg_site, config, "b") as b:
            for worker in (a, b):
                worker.wait_for(lambda: "service started" in worker.log(), timeout=60, what="start-up")
            # Counted from when both run, so both have their chance at every comparison.
            base = {n: len(looks_of(engine, n)) for n in ("call-seconds", "pick-seconds")}
            a.wait_for(lambda: all(len(looks_of(engine, n)) >= base[n] + 6 for n in base), timeout=60,
                       what="six more looks each")
            assert a.stop() == 0 and b.stop() == 0
    for name, table in (("call-seconds", "calls"), ("pick-seconds", "picks")):
        looks = assert_looks_consistent(engine, pg_site["source_path"], name, table, min_looks=6)
        assert len({lk.look_number for lk in looks}) == len(looks)
        assert_one_alert_per_state_change(engine, name)
    lines = {w: [ln for ln in w.log().splitlines() if " look comparison=" in ln] for w in (a, b)}
    # Both workers ran; which one takes a due look is the claim's race (on a loaded machine one
    # may win every time). Together they recorded each look exactly once.
    assert all("service started" in w.log() for w in (a, b))
    total = sum(len(looks_of(engine, n)) for n in ("call-seconds", "pick-seconds"))
    assert len(lines[a]) + len(lines[b]) == total


def _lock_cells(engine):
    """Take a lock that lets a look read and write its comparison and look rows, then wait at its cells."""
    conn = engine.connect()
    conn.execute(sa.text("BEGIN"))
    conn.execute(sa.text("LOCK TABLE cell IN EXCLUSIVE MODE"))
    return conn


def test_kill_9_inside_the_look_transaction(pg_site):
    engine = pg_site["engine"]
    config = write_service_config(pg_site["folder"], pg_site["source_url"], pg_site["store_url"], [calls()],
                                  service="[service]\nlease_seconds = 3\n")
    with Feeder(pg_site["source_path"], {"calls": (300.0, 300.0)}):
        first = _service(pg_site, config, "first").start()
        try:
            first.wait_for(lambda: len(looks_of(engine, "call-seconds")) >= 2, timeout=40, what="two looks")
            blocker = _lock_cells(engine)
            first.wait_for(lambda: _waiting_on_lock(engine), timeout=20, what="a look waiting inside its transaction")
            held = len(looks_of(engine, "call-seconds"))
        finally:
            first.kill()
        blocker.rollback()
        blocker.close()
        # The killed look had written its comparison update and look row; none of it is visible.
        assert len(looks_of(engine, "call-seconds")) == held
        _assert_store_whole(engine, "call-seconds")
        second = _service(pg_site, config, "second").start()
        second.wait_for(lambda: len(looks_of(engine, "call-seconds")) >= held + 3, timeout=40,
                        what="looks after the restart")
        assert second.stop() == 0
    assert_looks_consistent(engine, pg_site["source_path"], "call-seconds", "calls", min_looks=held + 3)
    _assert_store_whole(engine, "call-seconds")


def test_sigterm_lets_the_running_look_finish(pg_site):
    engine = pg_site["engine"]
    config = write_service_config(pg_site["folder"], pg_site["source_url"], pg_site["store_url"], [calls()])
    with Feeder(pg_site["source_path"], {"calls": (300.0, 300.0)}):
        service = _service(pg_site, config, "svc").start()
        service.wait_for(lambda: looks_of(engine, "call-seconds"), timeout=40, what="a first look")
        blocker = _lock_cells(engine)
        service.wait_for(lambda: _waiting_on_lock(engine), timeout=20, what="a look waiting inside its transaction")
        held = len(looks_of(engine, "call-seconds"))
        service.signal(signal.SIGTERM)
        time.sleep(1.0)
        assert service.alive()  # still finishing the look
        blocker.rollback()
        blocker.close()
        assert service.process.wait(timeout=30) == 0
        service._log.close()
    assert len(looks_of(engine, "call-seconds")) == held + 1  # the running look was completed
    assert_looks_consistent(engine, pg_site["source_path"], "call-seconds", "calls", min_looks=held + 1)
    _assert_store_whole(engine, "call-seconds")
    assert "waiting for running looks to finish" in service.log()


@pytest.fixture
def pg_source(pg_database_url):
    """A second database on the server, as the source, that the test can shut and reopen."""
    server = sa.engine.make_url(pg_database_url)
    name = server.database + "_src"
    admin = sa.create_engine(server.set(database="postgres"), isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(sa.text(f'CREATE DATABASE "{name}"'))
    url = server.set(database=name).render_as_string(hide_password=False)
    try:
        yield url, admin, name
    finally:
        with admin.connect() as conn:
            conn.execute(sa.text(f'ALTER DATABASE "{name}" WITH ALLOW_CONNECTIONS true'))
            conn.execute(sa.text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()


def _pg_rows(url, table):
    engine = sa.create_engine(url)
    try:
        with engine.connect() as conn:
            return [(r.site, r.done_at.replace(tzinfo=UTC))
                    for r in conn.execute(sa.text(f'SELECT site, done_at FROM "{table}"'))]
    finally:
        engine.dispose()


def test_postgres_source_goes_away_and_comes_back(pg_site, pg_source):
    from live_helpers import create_events_table, insert_events

    url, admin, name = pg_source
    engine = pg_site["engine"]
    past = datetime.now(UTC) - timedelta(seconds=30)
    create_events_table(url, "calls", [{"site": s, "seconds": 300.0 + i, "done_at": past}
                                       for i in range(10) for s in ("east", "west")])

    # Rows carry a time a little ahead of now: without an arrival column a row that commits
    # after a look whose cutoff already passed its time is late and missed (the README says so),
    # and a loaded machine can delay a commit by most of a second.
    def feed(seconds_ahead=2.0):
        when = datetime.now(UTC) + timedelta(seconds=seconds_ahead)
        insert_events(url, "calls", [{"site": s, "seconds": 300.0, "done_at": when} for s in ("east", "west")] * 2)

    with WebhookReceiver() as hook:
        config = write_service_config(pg_site["folder"], url, pg_site["store_url"], [calls()],
                                      channels=hook_channel(hook.url), service=FAST_SERVICE)
        service = _service(pg_site, config, "svc").start()
        try:
            while len(looks_of(engine, "call-seconds")) < 2:
                feed()
                assert service.alive(), service.log()[-2000:]
                time.sleep(0.5)
            with admin.connect() as conn:
                conn.execute(sa.text(f'ALTER DATABASE "{name}" WITH ALLOW_CONNECTIONS false'))
                conn.execute(sa.text("SELECT pg_terminate_backend(pid) FROM pg_stat_activity "
                                     "WHERE datname = :n AND pid <> pg_backend_pid()"), {"n": name})
            away_at = datetime.now(UTC)
            before = len(looks_of(engine, "call-seconds"))
            service.wait_for(lambda: any(r.json()["kind"] == "source_unreachable" for r in hook.accepted()),
                             timeout=30, what="the unreachable alert at the receiver")
            assert len(looks_of(engine, "call-seconds")) == before
            with admin.connect() as conn:
                conn.execute(sa.text(f'ALTER DATABASE "{name}" WITH ALLOW_CONNECTIONS true'))
            back_at = datetime.now(UTC)
            # Events keep arriving: a look that finds nothing new records only a check.
            def fed_and_looked():
                feed()
                return len(looks_of(engine, "call-seconds")) >= before + 2

            service.wait_for(fed_and_looked, timeout=30, interval=0.4, what="looks to resume")
            time.sleep(0.5)
        finally:
            code = service.stop()
    assert code == 0
    log = service.log()
    assert "reason=source" in log
    [unreachable] = alerts_of(engine, kind="source_unreachable")
    assert (datetime.fromisoformat(unreachable.payload["as_of"]) - away_at).total_seconds() >= 1.5
    looks = looks_of(engine, "call-seconds")
    assert not any(away_at < lk.as_of < back_at for lk in looks)
    assert [lk.look_number for lk in looks] == list(range(1, len(looks) + 1))
    rows = _pg_rows(url, "calls")
    for lk in looks:
        assert (lk.n1, lk.n2) == (sum(1 for s, t in rows if s == "east" and t <= lk.cutoff),
                                  sum(1 for s, t in rows if s == "west" and t <= lk.cutoff))


def test_store_goes_away_and_comes_back(pg_site, pg_database_url):
    engine = pg_site["engine"]
    store = sa.engine.make_url(pg_database_url)
    admin = sa.create_engine(store.set(database="postgres"), isolation_level="AUTOCOMMIT")
    config = write_service_config(pg_site["folder"], pg_site["source_url"], pg_site["store_url"], [calls()])
    try:
        with Feeder(pg_site["source_path"], {"calls": (300.0, 300.0)}):
            with _service(pg_site, config, "svc") as service:
                service.wait_for(lambda: len(looks_of(engine, "call-seconds")) >= 2, timeout=40, what="two looks")
                engine.dispose()
                with admin.connect() as conn:
                    conn.execute(sa.text(f'ALTER DATABASE "{store.database}" WITH ALLOW_CONNECTIONS false'))
                    conn.execute(sa.text("SELECT pg_terminate_backend(pid) FROM pg_stat_activity "
                                         "WHERE datname = :n AND pid <> pg_backend_pid()"), {"n": store.database})
                service.wait_for(lambda: "reason=store_unavailable" in service.log(), timeout=20,
                                 what="the store outage to be logged")
                time.sleep(2.0)
                assert service.alive()
                with admin.connect() as conn:
                    conn.execute(sa.text(f'ALTER DATABASE "{store.database}" WITH ALLOW_CONNECTIONS true'))
                back = len(looks_of(engine, "call-seconds"))
                service.wait_for(lambda: len(looks_of(engine, "call-seconds")) >= back + 2, timeout=30,
                                 what="looks after the store returned")
                assert service.stop() == 0
    finally:
        with admin.connect() as conn:
            conn.execute(sa.text(f'ALTER DATABASE "{store.database}" WITH ALLOW_CONNECTIONS true'))
        admin.dispose()
    assert_looks_consistent(engine, pg_site["source_path"], "call-seconds", "calls", min_looks=4)
    _assert_store_whole(engine, "call-seconds")
