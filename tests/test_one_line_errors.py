"""Every bad input or closed pipe ends in at most one line: no traceback, no store created, no secret echoed."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np

from live_helpers import LiveWorld, at, comparison_toml, config_toml, event_rows, write_config
from monitor.cli import main

ROOT = Path(__file__).resolve().parent.parent


def _gapwatch(*argv, cwd, close_stdout=False):
    """``python -m monitor ARGV``; with ``close_stdout`` the reader goes away before it writes."""
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    p = subprocess.Popen([sys.executable, "-m", "monitor", *argv], stdout=subprocess.PIPE,
                         stderr=subprocess.PIPE, cwd=cwd, env=env)
    if close_stdout:
        p.stdout.close()
        err = p.stderr.read()
        p.wait(timeout=60)
        return p.returncode, "", err.decode()
    out, err = p.communicate(timeout=60)
    return p.returncode, out.decode(), err.decode()


def test_history_and_bounds_into_a_closed_pipe_end_quietly(tmp_path):
    world = LiveWorld(tmp_path, event_rows(np.random.default_rng(3), 200, at(2, 6)), planned_per_group=5000)
    for hour in (10, 12, 14):
        world.look(at(2, hour))
    world.engine.dispose()
    for argv in (["history", "handle-time", "--config", str(world.config.path)],
                 ["bounds", "--fractions", ",".join(f"{i / 40:.3f}" for i in range(1, 41))]):
        code, _, err = _gapwatch(*argv, cwd=tmp_path, close_stdout=True)
        assert "Traceback" not in err and "BrokenPipeError" not in err, err
        assert code == 141


def test_look_json_for_a_stopped_comparison(tmp_path, capsys):
    import json

    world = LiveWorld(tmp_path, event_rows(np.random.default_rng(3), 400, at(2, 6)), planned_per_group=20)
    config = str(world.config.path)
    assert main(["look", "--config", config, "--as-of", "2026-03-03T12:00:00Z"]) == 0
    capsys.readouterr()
    assert main(["look", "--config", config, "--as-of", "2026-03-03T13:00:00Z", "--json"]) == 0
    record = json.loads(capsys.readouterr().out)
    assert record["comparison"] == "handle-time" and record["state"] == "stopped" and record["look"] is None


def _config_with_store(tmp_path, store_url):
    text = config_toml(f"sqlite:///{tmp_path / 'ops.sqlite'}", store_url, [comparison_toml()])
    return str(write_config(tmp_path, text))


def test_store_driver_missing_is_one_line(tmp_path, capsys):
    config = _config_with_store(tmp_path, "mysql+notadriver://u@127.0.0.1/x")
    assert main(["status", "--config", config]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "driver" in err and "notadriver" in err
    config = _config_with_store(tmp_path, "mssql+pymssql://u@127.0.0.1/x")
    assert main(["look", "--config", config]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "'pymssql'" in err and "not installed" in err


def test_store_in_a_missing_folder_is_named(tmp_path, capsys):
    missing = tmp_path / "no-such-folder"
    config = _config_with_store(tmp_path, f"sqlite:///{missing / 'store.sqlite'}")
    for argv in (["db", "upgrade", "--config", config], ["look", "--config", config]):
        assert main(argv) == 2
        err = capsys.readouterr().err.strip()
        assert len(err.splitlines()) == 1 and str(missing) in err and "does not exist" in err
    assert not missing.exists()


def test_read_only_commands_never_create_a_store(tmp_path, capsys):
    config = _config_with_store(tmp_path, f"sqlite:///{tmp_path / 'store.sqlite'}")
    for argv in (["status", "--config", config], ["history", "handle-time", "--config", config]):
        assert main(argv) == 2
        err = capsys.readouterr().err
        assert "no history store" in err and "gapwatch db upgrade" in err
    assert main(["check", "--config", config]) == 1
    assert "no history store" in capsys.readouterr().out
    assert not (tmp_path / "store.sqlite").exists()
    # An empty configuration file names a default store: reading it creates nothing either.
    empty = tmp_path / "empty" / "gapwatch.toml"
    empty.parent.mkdir()
    empty.write_text("")
    assert main(["status", "--config", str(empty)]) == 2
    assert list(empty.parent.iterdir()) == [empty]


def test_config_error_never_echoes_a_value_from_the_environment(tmp_path, monkeypatch, capsys):
    secret = "hk-77be2c91d0"
    monkeypatch.setenv("HOOK_KEY", secret)
    channels = '[channels.hook]\ntype = "webhook"\nurl = "htps//hooks.example.test/${HOOK_KEY}"\n'
    text = config_toml(f"sqlite:///{tmp_path / 'ops.sqlite'}", f"sqlite:///{tmp_path / 's.sqlite'}",
                       [comparison_toml()], channels)
    config = str(write_config(tmp_path, text))
    assert main(["check", "--config", config]) == 2
    err = capsys.readouterr().err
    assert "url" in err and secret not in err


def test_check_says_when_alerts_have_no_channel(tmp_path, capsys):
    world = LiveWorld(tmp_path, event_rows(np.random.default_rng(3), 40, at(2, 6)), channels="")
    main(["check", "--config", str(world.config.path)])
    out = capsys.readouterr().out
    assert "no alert channel configured" in out
    (tmp_path / "b").mkdir()
    world2 = LiveWorld(tmp_path / "b", event_rows(np.random.default_rng(3), 40, at(2, 6)))
    main(["check", "--config", str(world2.config.path)])
    assert "no alert channel configured" not in capsys.readouterr().out
