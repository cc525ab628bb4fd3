"""Several ``gapwatch run`` workers on one store look at each comparison only when it is due.

A claim only keeps two workers from looking at once; after a look releases it, another
worker's tick finds it free. The scheduler therefore asks the store when any worker last
checked the comparison, and these tests count the looks three real worker processes record
against what the schedule implies.
"""

from __future__ import annotations

import time
from datetime import datetime, timedelta, timezone

import pytest
import sqlalchemy as sa

from monitor.config import load_config
from monitor.service.scheduler import is_due
from monitor.store.models import Comparison, Look
from monitor.store.workers import last_check, record_check, workers

from endpoints import ServiceProcess
from test_service import FAST_SERVICE, Feeder, calls, make_source, write_service_config

UTC = timezone.utc
EVERY_SECONDS = 2.0
COMPARISONS = 20
WORKERS = 3
WINDOW_SECONDS = 24.0


def _looks(engine):
    with engine.connect() as conn:
        rows = conn.execute(sa.select(Comparison.name, Look.look_number, Look.as_of)
                            .join(Comparison, Comparison.id == Look.comparison_id)
                            .order_by(Comparison.name, Look.look_number)).all()
    by_name: dict = {}
    for name, number, as_of in rows:
        by_name.setdefault(name, []).append((number, as_of))
    return by_name


def measure_workers(folder, store_url, engine, *, workers_count=WORKERS, comparisons=COMPARISONS,
                    every=EVERY_SECONDS, window=WINDOW_SECONDS):
    """Run ``workers_count`` workers over ``comparisons`` comparisons; count looks in a window."""
    source_path = folder / "ops.sqlite"
    source_url = make_source(source_path, tables=("calls",))
    names = [f"desk-{i:02d}" for i in range(comparisons)]
    config = write_service_config(folder, source_url, store_url,
                                  [calls(name=n, every=f"{every:g}s") for n in names], service=FAST_SERVICE)
    with Feeder(source_path, {"calls": (300.0, 300.0)}, every=0.25):
        procs = [ServiceProcess(config, folder / f"w{i}.log").start() for i in range(workers_count)]
        try:
            for p in procs:
                p.wait_for(lambda p=p: "service started" in p.log(), timeout=60, what="start-up")
            # Counted from when all run, so every worker has its chance at every comparison.
            start = datetime.now(UTC)
            time.sleep(window)
            end = datetime.now(UTC)
        finally:
            codes = [p.stop() for p in procs]
    looks = _looks(engine)
    in_window = {n: [a for _, a in looks.get(n, []) if start <= a < end] for n in names}
    gaps = [(later[1] - earlier[1]).total_seconds() for n in names
            for earlier, later in zip(looks.get(n, []), looks.get(n, [])[1:])]
    return {
        "codes": codes,
        "looks": sum(len(v) for v in in_window.values()),
        "implied": comparisons * window / every,
        "double": sum(1 for g in gaps if g < every / 2),
        "numbers_ok": all([k for k, _ in v] == list(range(1, len(v) + 1)) for v in looks.values()),
        "logs": [p.log() for p in procs],
    }


@pytest.mark.slow
def test_three_workers_look_only_when_due(tmp_path):
    store_url = f"sqlite:///{tmp_path / 'store.sqlite'}"
    from live_helpers import migrated_store

    engine = migrated_store(store_url)
    try:
        got = measure_workers(tmp_path, store_url, engine)
        assert got["codes"] == [0] * WORKERS
        assert got["numbers_ok"]
        assert got["double"] == 0, got
        # Each comparison may have one look more at the window's edges.
        assert got["looks"] <= 1.1 * got["implied"] + COMPARISONS, got["looks"]
        # ...and the workers did keep up with the schedule.
        assert got["looks"] >= 0.5 * got["implied"], got["looks"]
        # Every worker ran and beat its heart (which one takes a due look is the claim's race),
        # and none met an error on the way.
        assert len(workers(engine)) == WORKERS
        assert sum(" look comparison=" in log for log in got["logs"]) >= 1
        assert not any("reason=unexpected" in log for log in got["logs"])
    finally:
        engine.dispose()


# --------------------------------------------------------------------------- the due rule itself


def _comparison(tmp_path, every):
    text = ('[store]\nurl = "sqlite:///s.sqlite"\n[sources.ops]\nurl = "sqlite:///ops.sqlite"\n'
            + calls(every=every))
    path = tmp_path / "g.toml"
    path.write_text(text)
    return load_config(path).comparisons[0]


def test_due_by_the_last_check_whoever_took_it(tmp_path):
    c = _comparison(tmp_path, "10s")
    now = datetime(2026, 3, 2, 8, 0, tzinfo=UTC)
    assert is_due(c, None, now)
    assert not is_due(c, now - timedelta(seconds=2), now)
    assert is_due(c, now - timedelta(seconds=9.5), now)  # a hair early still counts
    assert is_due(c, now - timedelta(seconds=30), now)


def test_a_late_look_does_not_make_the_next_tick_skip(tmp_path):
    """Ticks fall on a grid shared by every worker: a look that began 20 s late leaves the next tick due."""
    from monitor.service.scheduler import grid_tick

    c = _comparison(tmp_path, "1m")
    tick = datetime(2026, 3, 2, 8, 0, tzinfo=UTC)
    assert grid_tick(60.0, 0.0, tick + timedelta(seconds=59)) == tick
    late = tick + timedelta(seconds=20)
    following = tick + timedelta(minutes=1, seconds=2)  # the next tick, 42 s after the late look
    assert is_due(c, late, following)
    # The same tick seen by a second worker after the first has looked: not due again.
    assert not is_due(c, following + timedelta(seconds=1), following + timedelta(seconds=3))
    # A look off the grid (a first look at start) is not followed by another seconds later...
    start = tick + timedelta(seconds=57)
    assert not is_due(c, start, tick + timedelta(minutes=1))
    # ...but by the tick after that.
    assert is_due(c, start, tick + timedelta(minutes=2))
    # A place in a spread-out schedule shifts the grid: ticks at 45 s past each minute.
    assert grid_tick(60.0, 45.0, tick + timedelta(seconds=110)) == tick + timedelta(seconds=105)
    looked = tick + timedelta(seconds=62)
    assert not is_due(c, looked, tick + timedelta(seconds=100))
    assert is_due(c, looked, tick + timedelta(seconds=100), offset=45.0)  # its tick at 105 s, 5 s early


def test_a_look_records_its_place_and_status_predicts_the_grid_tick(tmp_path):
    """The look stores the comparison's place on the grid; status shows the tick the workers will take."""
    from monitor.calendar import next_grid_tick
    from monitor.service.scheduler import run_once
    from monitor.store import readback
    from live_helpers import migrated_store

    source_url = make_source(tmp_path / "ops.sqlite", tables=("calls",))
    store_url = f"sqlite:///{tmp_path / 'store.sqlite'}"
    engine = migrated_store(store_url)
    config = write_service_config(tmp_path, source_url, store_url, [calls(name="desk", every="1h")])
    assert run_once(config) == 0
    try:
        with engine.connect() as conn:
            settings, looked = conn.execute(sa.select(Comparison.settings, Comparison.last_look_at)).one()
        assert settings["tick_offset"] == 0.0
        row = next(r for r in readback.comparison_status(engine) if r["name"] == "desk")
        expected = next_grid_tick(3600.0, 0.0, looked.replace(tzinfo=UTC) + timedelta(minutes=30))
        assert row["next_look_at"] == expected.isoformat()
        assert expected.minute == 0 and expected.second == 0
    finally:
        engine.dispose()


def test_the_trigger_keeps_to_the_grid_after_a_first_look_at_once():
    from monitor.service.scheduler import _GridTrigger

    trigger = _GridTrigger(60.0, 15.0)
    first = datetime(2026, 3, 2, 8, 0, 41, 500000, tzinfo=UTC)  # a first look at start, off the grid
    following = trigger.get_next_fire_time(first, first)
    assert following == datetime(2026, 3, 2, 8, 1, 15, tzinfo=UTC)
    assert trigger.get_next_fire_time(following, following) == following + timedelta(minutes=1)
    assert trigger.get_next_fire_time(None, first) == datetime(2026, 3, 2, 8, 1, 15, tzinfo=UTC)


def test_one_worker_never_looks_at_one_comparison_twice_at_once():
    """Its claim is the worker's own to renew, so the worker keeps its own threads apart."""
    import threading

    from monitor.service.scheduler import Service

    service = Service.__new__(Service)
    service._lock, service._looking = threading.RLock(), set()
    inside, release = threading.Event(), threading.Event()
    calls_made = []

    def slow(name, *, honour_backoff=True):
        calls_made.append(name)
        inside.set()
        release.wait(5)
        return "recorded"

    service._look_once = slow
    first = {}
    thread = threading.Thread(target=lambda: first.setdefault("outcome", service.look_once("desk")))
    thread.start()
    assert inside.wait(5)
    assert service.look_once("desk") == "held"
    release.set()
    thread.join(5)
    assert first["outcome"] == "recorded" and calls_made == ["desk"]
    assert service.look_once("desk") == "recorded"  # free again once the first has finished


def test_due_on_a_cron_schedule(tmp_path):
    c = _comparison(tmp_path, "0 * * * *")
    assert not is_due(c, datetime(2026, 3, 2, 8, 1, tzinfo=UTC), datetime(2026, 3, 2, 8, 50, tzinfo=UTC))
    assert is_due(c, datetime(2026, 3, 2, 8, 1, tzinfo=UTC), datetime(2026, 3, 2, 9, 0, 1, tzinfo=UTC))


def test_record_check_keeps_one_row_per_comparison(tmp_path):
    from live_helpers import migrated_store

    engine = migrated_store(f"sqlite:///{tmp_path / 'store.sqlite'}")
    try:
        first = datetime(2026, 3, 2, 8, 0, tzinfo=UTC)
        record_check(engine, "a", checked_at=first, as_of=first, holder="w1", outcome="recorded")
        record_check(engine, "a", checked_at=first + timedelta(seconds=5), as_of=first, holder="w2",
                     outcome="quiet", detail={"look": 3})
        row = last_check(engine, "a")
        assert (row["checked_at"], row["holder"], row["outcome"], row["detail"]) == (
            first + timedelta(seconds=5), "w2", "quiet", {"look": 3})
        assert last_check(engine, "b") is None
    finally:
        engine.dispose()
