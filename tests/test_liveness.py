"""A dead monitor does not look alive: heartbeats and checks tell status, check and the dashboard."""

from __future__ import annotations

from datetime import datetime, timedelta, timezone

import numpy as np

from live_helpers import LiveWorld, at, event_rows
from monitor.cli import main
from monitor.store.readback import QUIET_INTERVALS, monitor_liveness
from monitor.store.workers import beat, record_check, worker_stopped

UTC = timezone.utc


def _world(tmp_path):
    # every = "10m" (the helper's default): quiet after 30 min without a check.
    world = LiveWorld(tmp_path, event_rows(np.random.default_rng(3), 100, at(2, 6)), planned_per_group=5000)
    world.look(at(2, 12))
    return world


def _worker_seen(engine, minutes_ago, *, checked=True, stopped=False):
    now = datetime.now(UTC)
    then = now - timedelta(minutes=minutes_ago)
    beat(engine, "host:1:aa", now=then, started_at=then - timedelta(hours=1), looked_at=then if checked else None)
    if checked:
        record_check(engine, "handle-time", checked_at=then, as_of=then, holder="host:1:aa", outcome="recorded")
    if stopped:
        worker_stopped(engine, "host:1:aa", now=then)
    return now


def test_no_worker_ever_ran_says_nothing(tmp_path):
    world = _world(tmp_path)
    got = monitor_liveness(world.engine, now=datetime.now(UTC))
    assert got["quiet"] is False and got["message"] is None and got["workers_alive"] == 0


def test_a_worker_looking_on_schedule_is_not_quiet(tmp_path):
    world = _world(tmp_path)
    now = _worker_seen(world.engine, 4)
    got = monitor_liveness(world.engine, now=now)
    assert got["quiet"] is False and got["workers_alive"] == 1 and got["interval_seconds"] == 600


def test_a_dead_worker_is_said_plainly(tmp_path):
    world = _world(tmp_path)
    now = _worker_seen(world.engine, 120)
    got = monitor_liveness(world.engine, now=now)
    assert got["quiet"] is True and got["workers_alive"] == 0
    assert got["message"].startswith("No worker has looked for 2.0 h")
    assert f"over {QUIET_INTERVALS} intervals of 10 min" in got["message"] and "no worker is running" in got["message"]


def test_status_and_check_say_so_first(tmp_path, capsys):
    world = _world(tmp_path)
    _worker_seen(world.engine, 120, stopped=True)
    config = str(world.config.path)
    assert main(["status", "--config", config]) == 0
    first = capsys.readouterr().out.splitlines()[0]
    assert first.startswith("warning: No worker has looked for 2.0 h")
    main(["check", "--config", config])
    assert "service: warning: No worker has looked for" in capsys.readouterr().out


def test_board_shows_the_notice(tmp_path, monkeypatch):
    from streamlit.testing.v1 import AppTest

    from test_dashboard_apptest import APP

    world = _world(tmp_path)
    _worker_seen(world.engine, 120)
    monkeypatch.setenv("GAPWATCH_CONFIG", str(world.config.path))
    monkeypatch.delenv("GAPWATCH_DASHBOARD_PASSWORD", raising=False)
    app = AppTest.from_file(APP, default_timeout=60)
    app.run()
    assert not app.exception, [e.message for e in app.exception]
    assert any(w.value.startswith("No worker has looked for") for w in app.warning)
