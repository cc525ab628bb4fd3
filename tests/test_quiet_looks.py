"""A look that finds nothing new records that it checked, not a new testing look, and the
read side keeps the last valid interval."""

from __future__ import annotations

import json
from datetime import timedelta

import numpy as np

from live_helpers import LiveWorld, at, event_rows, insert_events
from monitor.cli import main
from monitor.look import LookRecord, QuietCheck
from monitor.store import readback
from monitor.store.models import Look
from monitor.store.workers import last_check

T0 = at(2, 6)


def _world(tmp_path):
    # 120 rows every 3 minutes: the data end at 12:00.
    return LiveWorld(tmp_path, event_rows(np.random.default_rng(8), 120, T0), planned_per_group=150)


def test_nothing_new_is_a_check_not_a_look(tmp_path):
    world = _world(tmp_path)
    first = world.look(at(2, 13))
    assert isinstance(first, LookRecord) and first.look == 1 and first.ci_low is not None
    for hour in (14, 15, 16):
        quiet = world.look(at(2, hour))
        assert isinstance(quiet, QuietCheck)
        assert (quiet.look, quiet.n1, quiet.n2, quiet.state) == (1, first.n1, first.n2, "collecting")
    assert world.count(Look) == 1
    check = last_check(world.engine, "handle-time")
    assert check["outcome"] == "quiet" and check["as_of"] == at(2, 16)
    assert check["detail"]["look"] == 1 and check["detail"]["cutoff"].startswith("2026-03-02T16:00")
    assert check["detail"]["read_from"].startswith("2026-03-02T13:00")
    # The interval of look 1 is still what status shows.
    row = readback.comparison_status(world.engine, now=at(2, 16))[0]
    assert (row["ci_low"], row["ci_high"], row["looks"]) == (first.ci_low, first.ci_high, 1)


def test_rows_after_quiet_checks_are_all_read(tmp_path):
    world = _world(tmp_path)
    world.look(at(2, 13))
    world.look(at(2, 14))
    # Rows that arrive later, timed between the quiet check and now, are not lost.
    new = event_rows(np.random.default_rng(9), 20, at(2, 13, 30))
    insert_events(world.source_url, "events", new)
    second = world.look(at(2, 16))
    assert isinstance(second, LookRecord) and second.look == 2
    assert second.new_events == 20


def test_look_command_says_it_only_checked(tmp_path, capsys):
    world = _world(tmp_path)
    config = str(world.config.path)
    assert main(["look", "--config", config, "--as-of", "2026-03-02T13:00:00Z"]) == 0
    capsys.readouterr()
    assert main(["look", "--config", config, "--as-of", "2026-03-02T14:00:00Z"]) == 0
    assert "checked, no look recorded (look 1 stands" in capsys.readouterr().out
    assert main(["look", "--config", config, "--as-of", "2026-03-02T15:00:00Z", "--json"]) == 0
    record = json.loads(capsys.readouterr().out)
    assert record["quiet"] is True and record["look"] == 1 and record["new_events"] == 0


def test_status_keeps_the_last_valid_interval_after_a_look_that_tested_nothing(tmp_path):
    world = _world(tmp_path)
    first = world.look(at(2, 13))
    # Only rows of an unknown group arrive: a look is recorded (it read something) but tests nothing.
    insert_events(world.source_url, "events", [{"site": "north", "seconds": 1.0, "done_at": at(2, 13, 10)}])
    second = world.look(at(2, 14))
    assert isinstance(second, LookRecord) and second.ci_low is None
    row = readback.comparison_status(world.engine, now=at(2, 14))[0]
    assert (row["ci_low"], row["ci_high"], row["interval_look"]) == (first.ci_low, first.ci_high, 1)
