"""A look's as-of never goes back and never runs ahead: ``look --as-of`` and ``--replay-from``."""

from __future__ import annotations

import json
from datetime import datetime, timedelta, timezone

import numpy as np
import pytest

from live_helpers import LiveWorld, at, event_rows
from monitor.cli import main
from monitor.errors import AsOfBeforeLastLookError
from monitor.look import take_look
from monitor.store.models import Look

T0 = at(2, 6)


def _world(tmp_path, **keys):
    return LiveWorld(tmp_path, event_rows(np.random.default_rng(3), 400, T0), planned_per_group=5000, **keys)


def test_as_of_before_the_last_look_is_refused(tmp_path, capsys):
    world = _world(tmp_path)
    config = str(world.config.path)
    assert main(["look", "--config", config, "--as-of", "2026-03-02T14:00:00Z"]) == 0
    capsys.readouterr()
    assert main(["look", "--config", config, "--as-of", "2026-03-02T10:00:00Z"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1
    assert "before its last look" in err and "look 1" in err and "2026-03-02T14:00:00" in err
    assert world.count(Look) == 1
    # The same time again is no step back (and, with nothing new, only a check).
    assert main(["look", "--config", config, "--as-of", "2026-03-02T14:00:00Z"]) == 0
    assert "no look recorded" in capsys.readouterr().out
    assert main(["look", "--config", config, "--as-of", "2026-03-02T15:00:00Z"]) == 0
    assert world.count(Look) == 2


def test_take_look_itself_refuses_going_back(tmp_path):
    world = _world(tmp_path)
    take_look(world.config, "handle-time", as_of=at(2, 14), engine=world.engine)
    with pytest.raises(AsOfBeforeLastLookError):
        take_look(world.config, "handle-time", as_of=at(2, 13), engine=world.engine)


def test_as_of_in_the_future_is_refused(tmp_path, capsys):
    world = _world(tmp_path)
    config = str(world.config.path)
    ahead = (datetime.now(timezone.utc) + timedelta(days=3650)).replace(microsecond=0)
    assert main(["look", "--config", config, "--as-of", ahead.isoformat()]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "is in the future" in err
    assert world.count(Look) == 0
    # A minute ahead (clocks differ a little) is accepted.
    soon = datetime.now(timezone.utc) + timedelta(minutes=1)
    assert main(["look", "--config", config, "--as-of", soon.isoformat()]) == 0
    assert world.count(Look) == 1


def test_replay_builds_history_on_a_fresh_comparison(tmp_path, capsys):
    world = _world(tmp_path)
    config = str(world.config.path)
    assert main(["look", "--config", config, "--replay-from", "2026-03-02T08:00:00Z", "--replay-step", "2h",
                 "--as-of", "2026-03-02T16:00:00Z", "--json"]) == 0
    lines = capsys.readouterr().out.strip().splitlines()
    records = [json.loads(line) for line in lines]
    assert [r["look"] for r in records] == [1, 2, 3, 4, 5]
    assert [r["as_of"][:16] for r in records] == [f"2026-03-02T{h:02d}:00" for h in (8, 10, 12, 14, 16)]
    assert all(a["n1"] <= b["n1"] for a, b in zip(records, records[1:]))
    # Replaying over existing history is a step back, refused with nothing recorded.
    assert main(["look", "--config", config, "--replay-from", "2026-03-02T09:00:00Z", "--replay-step", "1h",
                 "--as-of", "2026-03-02T18:00:00Z"]) == 2
    assert "before its last look" in capsys.readouterr().err
    assert world.count(Look) == 5


def test_replay_step_without_from_and_a_bad_step(tmp_path, capsys):
    world = _world(tmp_path)
    config = str(world.config.path)
    assert main(["look", "--config", config, "--replay-step", "1h"]) == 2
    assert "--replay-step needs --replay-from" in capsys.readouterr().err
    assert main(["look", "--config", config, "--replay-from", "2026-03-02T08:00:00Z", "--replay-step", "1s",
                 "--as-of", "2026-03-09T08:00:00Z"]) == 2
    assert "at most" in capsys.readouterr().err
    assert world.count(Look) == 0
