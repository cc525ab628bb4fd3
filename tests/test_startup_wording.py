"""Small refusals and wording a new user meets in the first hour (each once wrong)."""

from __future__ import annotations

import sys
from datetime import timedelta

import numpy as np
import pytest

from live_helpers import LiveWorld, at, event_rows
from monitor import cli
from monitor.commands import _common

T0 = at(2, 6)


def _world(tmp_path):
    return LiveWorld(tmp_path, event_rows(np.random.default_rng(3), 400, T0), planned_per_group=5000)


def _run(capsys, *argv):
    code = cli.main(list(argv))
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_check_counts_in_the_right_number(tmp_path, capsys):
    world = _world(tmp_path)
    from monitor.store.engine import upgrade

    upgrade(world.store_url)
    code, out, _ = _run(capsys, "check", "--config", str(world.config.path))
    first = out.splitlines()[0]
    assert "(1 comparison, 1 source, 2 channels)" in first, first


def test_db_help_names_only_options_that_exist(capsys):
    with pytest.raises(SystemExit):
        cli.main(["db", "--help"])
    text = capsys.readouterr().out
    assert "--revision" not in text
    assert "REV" in text


@pytest.mark.parametrize("option, value", [("--actual-looks", "0"), ("--streams", "1")])
def test_simulate_names_the_option_typed(capsys, option, value):
    code, out, err = _run(capsys, "simulate", "--metric", "mean", "--difference", "1", "--sd", "2",
                          "--streams", "50", option, value)
    assert code == 2 and out == ""
    assert err.startswith(f"gapwatch simulate: {option} ") and value in err
    assert len(err.strip().splitlines()) == 1


def test_simulate_refuses_a_negative_seed_in_one_line(capsys):
    with pytest.raises(SystemExit) as stop:
        cli.main(["simulate", "--metric", "mean", "--difference", "1", "--sd", "2", "--seed", "-1"])
    assert stop.value.code == 2 and "--seed" in capsys.readouterr().err


@pytest.mark.parametrize("command", ["plan", "simulate"])
def test_futility_needs_a_one_sided_design_as_in_the_configuration(capsys, command):
    code, out, err = _run(capsys, command, "--metric", "proportion", "--p1", "0.2", "--p2", "0.15",
                          "--futility", "--streams" if command == "simulate" else "--looks",
                          "100" if command == "simulate" else "4")
    assert code == 2 and out == ""
    assert "--futility" in err and "one-sided" in err and "two-sided" in err
    # The same design one-sided is accepted, as the configuration accepts it.
    code, out, _ = _run(capsys, "plan", "--metric", "proportion", "--p1", "0.2", "--p2", "0.15",
                        "--alternative", "greater", "--futility")
    assert code == 0 and "futility" in out


def test_plan_rule_reads_as_a_sentence(capsys):
    code, out, _ = _run(capsys, "plan", "--metric", "mean", "--difference", "1", "--sd", "2")
    assert code == 0
    assert "when |z| is at or above the efficacy bound" in out


def test_restart_with_a_misspelled_name_lists_the_known_ones(tmp_path, capsys):
    world = _world(tmp_path)
    world.look(T0 + timedelta(hours=6))
    code, _, err = _run(capsys, "restart", "handle-tme", "--config", str(world.config.path))
    assert code == 2
    assert "'handle-tme'" in err and "known: handle-time" in err and len(err.strip().splitlines()) == 1


def test_alerts_for_an_unknown_comparison_say_so(tmp_path, capsys):
    world = _world(tmp_path)
    world.look(T0 + timedelta(hours=6))
    code, _, err = _run(capsys, "alerts", "--comparison", "nope", "--config", str(world.config.path))
    assert code == 2 and "no comparison 'nope'" in err and "known: handle-time" in err
    code, out, _ = _run(capsys, "alerts", "--comparison", "handle-time", "--config", str(world.config.path))
    assert code == 0 and out.strip() == "no alerts for comparison 'handle-time'"


def test_a_second_acknowledgement_by_someone_else_is_reported(tmp_path, capsys):
    from live_helpers import CHANNELS  # noqa: F401 - the world's channels make the alert
    from monitor.store.readback import list_alerts

    world = LiveWorld(tmp_path, event_rows(np.random.default_rng(3), 2000, T0, east=100.0, west=130.0),
                      planned_per_group=400, notify=["ops-log"])
    world.look(T0 + timedelta(days=5))
    [alert] = list_alerts(world.engine)
    config = str(world.config.path)
    code, out, _ = _run(capsys, "alerts", "ack", alert["id"], "--by", "ana", "--config", config)
    assert code == 0 and f"alert {alert['id']} acknowledged by ana at " in out and " UTC" in out
    code, out, _ = _run(capsys, "alerts", "ack", alert["id"], "--by", "ana", "--config", config)
    assert code == 0 and "already acknowledged by ana" in out
    code, out, err = _run(capsys, "alerts", "ack", alert["id"], "--by", "ben", "--config", config)
    assert code == 1 and out == ""
    assert "already acknowledged by ana" in err and len(err.strip().splitlines()) == 1
    assert list_alerts(world.engine)[0]["acknowledged_by"] == "ana"


@pytest.mark.parametrize(
    "argv0, on_path, interpreter, expected",
    [
        (".venv/bin/gapwatch", None, ".venv/bin/python", ".venv/bin/gapwatch"),  # after the set-up
        (".venv/bin/gapwatch", ".venv/bin/gapwatch", ".venv/bin/python", "gapwatch"),  # activated
        ("monitor/__main__.py", None, ".venv/bin/python", ".venv/bin/gapwatch"),  # python -m monitor
        ("monitor/__main__.py", None, "bare/python", "bare/python -m monitor"),  # nothing installed
        ("/usr/lib/python3/pytest", None, ".venv/bin/python", "gapwatch"),  # called as a library
    ],
)
def test_hints_name_the_program_as_started(tmp_path, monkeypatch, argv0, on_path, interpreter, expected):
    (tmp_path / ".venv" / "bin").mkdir(parents=True)
    (tmp_path / ".venv" / "bin" / "gapwatch").write_text("#!/bin/sh\n")
    (tmp_path / "bare").mkdir()
    (tmp_path / "monitor").mkdir()
    (tmp_path / "monitor" / "__main__.py").write_text("")
    monkeypatch.chdir(tmp_path)
    monkeypatch.setattr(sys, "argv", [argv0])
    monkeypatch.setattr(sys, "executable", str(tmp_path / interpreter))
    monkeypatch.setattr(_common.shutil, "which",
                        lambda name: str(tmp_path / on_path) if on_path else None)
    assert _common.program() == expected
    assert _common.as_typed("run `gapwatch db upgrade`") == f"run `{_common.program()} db upgrade`"


def test_demo_duration_takes_the_one_duration_rule(capsys):
    parse = cli.build_parser(["demo"]).parse_args
    assert parse(["demo", "--duration", "90"]).duration == 90.0
    assert parse(["demo", "--duration", "2m"]).duration == 120.0
    with pytest.raises(SystemExit) as stop:
        parse(["demo", "--duration", "2 weeks"])
    assert stop.value.code == 2 and "--duration" in capsys.readouterr().err
