"""``gapwatch db``: a downgrade that drops history asks first and keeps a copy; bad revisions are one line."""

from __future__ import annotations

import sqlite3

import numpy as np

from live_helpers import LiveWorld, at, event_rows
from monitor.cli import main
from monitor.store.models import Comparison, Look

T0 = at(2, 6)


def _world_with_history(tmp_path):
    world = LiveWorld(tmp_path, event_rows(np.random.default_rng(3), 200, T0), planned_per_group=5000)
    world.look(at(2, 12))
    world.look(at(2, 14))
    return world


def test_downgrade_that_drops_history_needs_yes(tmp_path, capsys):
    world = _world_with_history(tmp_path)
    config = str(world.config.path)
    assert main(["db", "downgrade", "base", "--config", config]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1
    assert "would drop recorded history" in err and "look 2" in err and "--yes" in err
    assert world.count(Look) == 2 and world.count(Comparison) == 1
    assert not list(tmp_path.glob("store.sqlite.before-downgrade-*"))


def test_downgrade_with_yes_keeps_a_copy_beside_a_sqlite_store(tmp_path, capsys):
    world = _world_with_history(tmp_path)
    config = str(world.config.path)
    world.engine.dispose()
    assert main(["db", "downgrade", "base", "--yes", "--config", config]) == 0
    out = capsys.readouterr().out
    copies = list(tmp_path.glob("store.sqlite.before-downgrade-*"))
    assert len(copies) == 1 and str(copies[0]) in out
    with sqlite3.connect(copies[0]) as conn:
        assert conn.execute("SELECT count(*) FROM look").fetchone()[0] == 2
    with sqlite3.connect(tmp_path / "store.sqlite") as conn:
        tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    assert "look" not in tables


def test_bad_revision_is_one_line(tmp_path, capsys):
    world = _world_with_history(tmp_path)
    config = str(world.config.path)
    for action in ("downgrade", "upgrade"):
        assert main(["db", action, "zzz", "--config", config]) == 2
        err = capsys.readouterr().err.strip()
        assert len(err.splitlines()) == 1, err
        assert "unknown revision 'zzz'" in err and "base" in err
    assert world.count(Look) == 2


def test_downgrade_of_an_empty_store_needs_no_yes(tmp_path, capsys):
    world = LiveWorld(tmp_path, event_rows(np.random.default_rng(3), 20, T0))
    assert main(["db", "downgrade", "base", "--config", str(world.config.path)]) == 0
    assert "backup" not in capsys.readouterr().out
