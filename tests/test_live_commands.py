"""The live commands: check, db, look, restart (exit codes and what they print)."""

from __future__ import annotations

from datetime import timedelta

import numpy as np

from live_helpers import LiveWorld, at, comparison_toml, config_toml, event_rows, write_config
from monitor.cli import main

T0 = at(2, 6)


def _world(tmp_path, **keys):
    return LiveWorld(tmp_path, event_rows(np.random.default_rng(3), 400, T0), planned_per_group=5000, **keys)


def test_look_prints_one_line_per_comparison(tmp_path, capsys):
    world = _world(tmp_path)
    config = str(world.config.path)
    assert main(["look", "--config", config, "--as-of", "2026-03-02T12:00:00Z"]) == 0
    out = capsys.readouterr().out
    assert out.startswith("handle-time v1 look 1: collecting; estimate ")
    assert main(["look", "handle-time", "--config", config, "--as-of", "2026-03-02T14:00:00"]) == 0
    assert "look 2:" in capsys.readouterr().out


def test_look_unknown_name_and_bad_time(tmp_path, capsys):
    world = _world(tmp_path)
    config = str(world.config.path)
    assert main(["look", "nope", "--config", config]) == 2
    assert "no comparison named 'nope'" in capsys.readouterr().err
    assert main(["look", "--config", config, "--as-of", "yesterday"]) == 2
    assert "--as-of must be an ISO timestamp" in capsys.readouterr().err
    from monitor.store.models import Look

    assert world.count(Look) == 0


def test_look_unreachable_source_records_nothing(tmp_path, capsys):
    world = _world(tmp_path)
    text = config_toml(f"sqlite:///{tmp_path / 'gone' / 'x.sqlite'}", world.store_url, [comparison_toml()])
    path = write_config(tmp_path, text, "broken.toml")
    assert main(["look", "--config", str(path), "--as-of", "2026-03-02T12:00:00Z"]) == 1
    err = capsys.readouterr().err
    assert "handle-time" in err and "nothing recorded" in err
    from monitor.store.models import Look

    assert world.count(Look) == 0


def test_store_behind_refused_by_look_and_reported_by_check(tmp_path, capsys):
    world = _world(tmp_path)
    config = str(world.config.path)
    assert main(["db", "downgrade", "0001", "--config", config]) == 0
    assert "behind" in capsys.readouterr().out
    assert main(["look", "--config", config]) == 2
    assert "gapwatch db upgrade" in capsys.readouterr().err
    assert main(["check", "--config", config]) == 1
    out = capsys.readouterr().out
    assert "table 'events' ok" in out and "run `gapwatch db upgrade`" in out
    assert main(["db", "upgrade", "--config", config]) == 0
    assert main(["db", "current", "--config", config]) == 0
    assert "(up to date)" in capsys.readouterr().out
    assert main(["check", "--config", config]) == 0


def test_check_reports_missing_columns(tmp_path, capsys):
    world = _world(tmp_path, value_column="wait_seconds")
    assert main(["check", "--config", str(world.config.path)]) == 1
    assert "wait_seconds" in capsys.readouterr().out


def test_restart_command(tmp_path, capsys):
    world = _world(tmp_path)
    config = str(world.config.path)
    main(["look", "--config", config, "--as-of", "2026-03-02T12:00:00Z"])
    assert main(["restart", "handle-time", "--config", config]) == 0
    assert "version 1 archived; the next look starts version 2" in capsys.readouterr().out
    main(["look", "--config", config, "--as-of", "2026-03-02T13:00:00Z"])
    assert "handle-time v2 look 1" in capsys.readouterr().out
    assert main(["restart", "other", "--config", config]) == 2
