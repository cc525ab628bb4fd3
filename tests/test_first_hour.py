"""What a new user reads in the first hour: the demo's terminal lines say figures in words."""

from __future__ import annotations

import re

import pytest

from monitor.commands.demo import _describe


def test_a_one_sided_interval_reads_open_in_the_demo_lines_never_inf():
    row = {"name": "desk-first-contact", "state": "collecting", "looks": 1, "estimate": -0.00892,
           "ci_low": -0.2, "ci_high": None, "fraction": 0.13}
    line = _describe(row)
    assert "difference -0.00892 [-0.2, open]" in line
    assert "inf" not in line
    row.update(ci_low=None, ci_high=0.1)
    assert "[open, 0.1]" in _describe(row)


def test_a_missing_sqlite_source_file_is_named_as_missing(tmp_path):
    from monitor.source.reader import Source, SourceSpec
    from monitor.errors import SourceUnavailableError

    spec = SourceSpec(table="calls", group_column="desk", groups=("north", "south"),
                      value_column="seconds", time_column="answered_at", shift=0.0)
    missing = tmp_path / "calls.sqlite"
    with pytest.raises(SourceUnavailableError, match=f"no such file: {re.escape(str(missing))}"):
        Source(f"sqlite:///{missing}").check(spec)
    with pytest.raises(SourceUnavailableError, match="no such folder: "):
        Source(f"sqlite:///{tmp_path / 'nowhere' / 'calls.sqlite'}").check(spec)
    assert not missing.exists()


def test_check_names_the_program_as_started_in_its_store_hint(tmp_path, monkeypatch, capsys):
    from monitor import cli

    (tmp_path / "ops.sqlite").touch()
    (tmp_path / "gapwatch.toml").write_text(
        '[store]\nurl = "sqlite:///gapwatch-store.sqlite"\n[sources.ops]\nurl = "sqlite:///ops.sqlite"\n',
        encoding="utf-8")
    monkeypatch.setattr("sys.argv", [".venv/bin/gapwatch", "check"])
    code = cli.main(["check", "--config", str(tmp_path / "gapwatch.toml")])
    out = capsys.readouterr().out
    assert code == 1
    assert "run `.venv/bin/gapwatch db upgrade`" in out, out


def test_the_no_worker_hint_of_status_and_check_runs_as_printed(tmp_path, monkeypatch, capsys):
    from datetime import datetime, timedelta, timezone

    import numpy as np

    from live_helpers import LiveWorld, at, event_rows
    from monitor import cli
    from monitor.store.workers import beat, worker_stopped

    world = LiveWorld(tmp_path, event_rows(np.random.default_rng(3), 100, at(2, 6)), planned_per_group=5000)
    world.look(at(2, 12))
    then = datetime.now(timezone.utc) - timedelta(hours=2)
    beat(world.engine, "host:1:aa", now=then, started_at=then, looked_at=then)
    worker_stopped(world.engine, "host:1:aa", now=then)
    monkeypatch.setattr("sys.argv", [".venv/bin/gapwatch", "status"])
    for command in ("status", "check"):
        cli.main([command, "--config", str(world.config.path)])
        out = capsys.readouterr().out
        assert "Start `.venv/bin/gapwatch run`" in out, (command, out)


def test_demo_lines_write_small_rates_per_unit_without_an_exponent_and_rates_in_points():
    row = {"name": "qc-defect-rate", "state": "collecting", "looks": 3, "estimate": -0.00093,
           "ci_low": -0.0021, "ci_high": -0.0000206, "fraction": 0.4, "metric": "ratio", "unit": "defects/unit"}
    line = _describe(row)
    assert "e-0" not in line and "difference -0.0009 [-0.0021, 0.0000] defects/unit" in line
    row.update(metric="proportion", unit="", estimate=-0.0123, ci_low=-0.031, ci_high=0.0064)
    assert "difference -1.2 [-3.1, 0.6] pp" in _describe(row)
