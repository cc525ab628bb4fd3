"""Claims on the lease table: exclusive, expiring, released; raced by threads and processes."""

from __future__ import annotations

import multiprocessing
import threading
import time
from datetime import datetime, timedelta, timezone

import pytest
import sqlalchemy as sa

from monitor.store.claims import claim, current_holder, make_holder, release, try_claim
from monitor.errors import ClaimHeldError, InvalidArgumentError
from monitor.store.models import Base

T0 = datetime(2026, 3, 2, 8, 0, tzinfo=timezone.utc)


def _engine(url):
    if url.startswith("sqlite"):
        # Several processes write the same file: wait for the lock rather than fail.
        return sa.create_engine(url, connect_args={"timeout": 30})
    return sa.create_engine(url)


def _prepare(url):
    engine = _engine(url)
    Base.metadata.create_all(engine)
    counter = sa.Table("claim_counter", sa.MetaData(), sa.Column("id", sa.Integer, primary_key=True),
                       sa.Column("value", sa.Integer))
    counter.create(engine)
    with engine.begin() as conn:
        conn.execute(counter.insert().values(id=1, value=0))
    return engine, counter


@pytest.fixture
def sqlite_url(tmp_path):
    return f"sqlite:///{tmp_path / 'store.sqlite'}"


def test_claim_is_exclusive_until_released(sqlite_url):
    engine, _ = _prepare(sqlite_url)
    with claim(engine, "pick-seconds", "a", now=T0, seconds=60) as taken:
        assert taken.holder == "a" and taken.expires_at == T0 + timedelta(seconds=60)
        assert current_holder(engine, "pick-seconds", now=T0) == "a"
        with pytest.raises(ClaimHeldError, match="pick-seconds"):
            with claim(engine, "pick-seconds", "b", now=T0 + timedelta(seconds=30), seconds=60):
                pass
        # A different comparison is independent.
        with claim(engine, "call-resolution", "b", now=T0, seconds=60):
            pass
    assert current_holder(engine, "pick-seconds", now=T0) is None
    with claim(engine, "pick-seconds", "b", now=T0, seconds=60):
        assert current_holder(engine, "pick-seconds", now=T0) == "b"


def test_dead_holder_loses_claim_after_expiry(sqlite_url):
    engine, _ = _prepare(sqlite_url)
    # "a" takes the claim and dies without releasing.
    assert try_claim(engine, "line-output", "a", now=T0, seconds=10) is not None
    assert try_claim(engine, "line-output", "b", now=T0 + timedelta(seconds=9), seconds=10) is None
    taken = try_claim(engine, "line-output", "b", now=T0 + timedelta(seconds=11), seconds=10)
    assert taken is not None and taken.holder == "b"
    # The late "a" cannot release (or extend) what is now b's.
    assert release(engine, "line-output", "a") is False
    assert try_claim(engine, "line-output", "a", now=T0 + timedelta(seconds=12), seconds=10) is None
    assert current_holder(engine, "line-output", now=T0 + timedelta(seconds=12)) == "b"


def test_own_claim_is_extended(sqlite_url):
    engine, _ = _prepare(sqlite_url)
    try_claim(engine, "x", "a", now=T0, seconds=10)
    again = try_claim(engine, "x", "a", now=T0 + timedelta(seconds=5), seconds=10)
    assert again.expires_at == T0 + timedelta(seconds=15)
    assert try_claim(engine, "x", "b", now=T0 + timedelta(seconds=12), seconds=10) is None


def test_claim_released_when_block_raises(sqlite_url):
    engine, _ = _prepare(sqlite_url)
    with pytest.raises(RuntimeError):
        with claim(engine, "x", "a", now=T0, seconds=60):
            raise RuntimeError("look failed")
    assert current_holder(engine, "x", now=T0) is None


@pytest.mark.parametrize(
    "kwargs, word",
    [
        ({"name": "", "holder": "a", "now": T0, "seconds": 5}, "name"),
        ({"name": "x", "holder": "", "now": T0, "seconds": 5}, "holder"),
        ({"name": "x", "holder": "a", "now": datetime(2026, 1, 1), "seconds": 5}, "now"),
        ({"name": "x", "holder": "a", "now": T0, "seconds": 0}, "seconds"),
    ],
    ids=["empty-name", "empty-holder", "naive-now", "zero-seconds"],
)
def test_bad_arguments_are_named(sqlite_url, kwargs, word):
    engine, _ = _prepare(sqlite_url)
    with pytest.raises(InvalidArgumentError, match=word):
        try_claim(engine, kwargs.pop("name"), kwargs.pop("holder"), **kwargs)


def test_holder_ids_differ():
    a, b = make_holder(), make_holder()
    assert a != b and a.count(":") == 2


def _thread_race(url, workers=8):
    engine = _engine(url)
    barrier = threading.Barrier(workers)
    winners, errors = [], []

    def attempt(i):
        try:
            barrier.wait()
            if try_claim(engine, "race", f"w{i}", now=T0, seconds=60) is not None:
                winners.append(i)
        except Exception as exc:  # pragma: no cover - reported below
            errors.append(exc)

    threads = [threading.Thread(target=attempt, args=(i,)) for i in range(workers)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    engine.dispose()
    return winners, errors


def _worker(url, index, rounds, start_at, out):
    """Claim, do a non-atomic read-sleep-write of a counter, release; count claims won."""
    engine = _engine(url)
    counter = sa.Table("claim_counter", sa.MetaData(), autoload_with=engine)
    # Start together, whatever each interpreter's start-up time was.
    time.sleep(max(0.0, start_at - time.time()))
    won = 0
    holder = f"p{index}"
    for _ in range(rounds):
        now = datetime.now(timezone.utc)
        if try_claim(engine, "shared", holder, now=now, seconds=30) is None:
            time.sleep(0.001)
            continue
        try:
            with engine.begin() as conn:
                value = conn.execute(sa.select(counter.c.value).where(counter.c.id == 1)).scalar_one()
            # Without mutual exclusion another worker's increment lands here and is lost.
            time.sleep(0.003)
            with engine.begin() as conn:
                conn.execute(counter.update().where(counter.c.id == 1).values(value=value + 1))
            won += 1
        finally:
            release(engine, "shared", holder)
    engine.dispose()
    out.put(won)


def _process_race(url, processes=4, rounds=40):
    engine, _ = _prepare(url)
    ctx = multiprocessing.get_context("spawn")
    out = ctx.Queue()
    start_at = time.time() + 4.0
    procs = [ctx.Process(target=_worker, args=(url, i, rounds, start_at, out)) for i in range(processes)]
    for p in procs:
        p.start()
    wins = [out.get(timeout=120) for _ in procs]
    for p in procs:
        p.join(timeout=60)
        assert p.exitcode == 0
    table = sa.Table("claim_counter", sa.MetaData(), autoload_with=engine)
    with engine.connect() as conn:
        total = conn.execute(sa.select(table.c.value)).scalar_one()
    engine.dispose()
    return wins, total


def test_threads_race_on_sqlite(sqlite_url):
    _prepare(sqlite_url)
    winners, errors = _thread_race(sqlite_url)
    assert errors == []
    assert len(winners) == 1


def test_processes_exclude_each_other_on_sqlite(sqlite_url):
    wins, total = _process_race(sqlite_url)
    # Every claim won produced exactly one increment, none lost to an overlap.
    assert sum(wins) == total
    assert total > 0 and sum(1 for w in wins if w) >= 2


@pytest.mark.postgres
def test_threads_race_on_postgres(pg_database_url):
    _prepare(pg_database_url)
    winners, errors = _thread_race(pg_database_url)
    assert errors == []
    assert len(winners) == 1


@pytest.mark.postgres
def test_processes_exclude_each_other_on_postgres(pg_database_url):
    wins, total = _process_race(pg_database_url)
    assert sum(wins) == total
    assert total > 0 and sum(1 for w in wins if w) >= 2


@pytest.mark.postgres
def test_expiry_on_postgres(pg_database_url):
    engine, _ = _prepare(pg_database_url)
    assert try_claim(engine, "x", "a", now=T0, seconds=10)
    assert try_claim(engine, "x", "b", now=T0 + timedelta(seconds=5), seconds=10) is None
    assert try_claim(engine, "x", "b", now=T0 + timedelta(seconds=10, microseconds=1), seconds=10)
    engine.dispose()


def test_renewed_claim_outlives_its_length(sqlite_url):
    engine, _ = _prepare(sqlite_url)
    wall = lambda: datetime.now(timezone.utc)  # noqa: E731
    with claim(engine, "slow-look", "a", now=wall(), seconds=0.6, renew_clock=wall):
        for _ in range(5):
            time.sleep(0.3)
            # Well past the claim's own 0.6 s, the other worker still cannot take it.
            assert try_claim(engine, "slow-look", "b", now=wall(), seconds=0.6) is None
    assert current_holder(engine, "slow-look", now=wall()) is None
    # Unrenewed (a dead worker), it expires.
    try_claim(engine, "slow-look", "a", now=wall(), seconds=0.3)
    time.sleep(0.4)
    assert try_claim(engine, "slow-look", "b", now=wall(), seconds=0.3) is not None
