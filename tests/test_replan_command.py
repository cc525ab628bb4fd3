"""``gapwatch replan``: what it records, what it refuses, and what it prints."""

from __future__ import annotations

import json

import numpy as np
import pytest
import sqlalchemy as sa

from live_helpers import LiveWorld, at, event_rows
from monitor.cli import main
from monitor.stats.adaptive import AdaptiveBoundary, Replan
from monitor.store.models import Comparison, PlanChange

T0 = at(2, 6)


def _world(tmp_path, **keys):
    keys.setdefault("planned_per_group", 600)
    return LiveWorld(tmp_path, event_rows(np.random.default_rng(5), 400, T0), **keys)


def _changes(world):
    with world.engine.connect() as conn:
        return conn.execute(sa.select(PlanChange).order_by(PlanChange.id)).all()


def test_replan_records_who_when_why_and_the_conditional_error(tmp_path, capsys):
    world = _world(tmp_path)
    config = str(world.config.path)
    assert main(["look", "--config", config, "--as-of", "2026-03-02T12:00:00Z"]) == 0
    capsys.readouterr()
    assert main(["replan", "handle-time", "--planned-per-group", "1200", "--reason", "event rate halved",
                 "--by", "dana", "--config", config]) == 0
    out = capsys.readouterr().out
    assert "plan changed from 600 to 1,200 per group after look 1 (replan 1, by dana: event rate halved)" in out
    assert "conditional error principle" in out
    (row,) = _changes(world)
    assert (row.kind, row.made_by, row.reason, row.after_look) == ("replan", "dana", "event rate halved", 1)
    assert row.old_plan["planned_per_group"] == 600 and row.new_plan == {"planned_per_group": 1200, "end": 2.0}
    record = Replan.from_dict(row.record)
    # The figures equal what the statistics module gives from the recorded look.
    (look,) = world.looks()
    probe = AdaptiveBoundary.resume(0.05, "obrien-fleming", "two-sided",
                                    [{"fraction": look.fraction, "z": look.boundary_z}])
    from monitor.look.plan import z_of
    z = z_of(look.statistic, look.df)
    assert record.anchor_z == pytest.approx(z, abs=1e-12)
    up, low = probe.conditional_error(z, reference=[0.2 * k for k in range(1, 6) if 0.2 * k > look.fraction + 1e-7])
    assert (record.error_upper, record.error_lower) == pytest.approx((up, low), rel=1e-9)


def test_replan_json_and_default_user(tmp_path, capsys, monkeypatch):
    world = _world(tmp_path)
    config = str(world.config.path)
    main(["look", "--config", config, "--as-of", "2026-03-02T12:00:00Z"])
    capsys.readouterr()
    monkeypatch.setattr("getpass.getuser", lambda: "lee")
    assert main(["replan", "handle-time", "--planned-per-group", "300", "--reason", "smaller plan",
                 "--config", config, "--format", "json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["by"] == "lee" and out["new_plan"]["planned_per_group"] == 300 and 0 < out["conditional_error"] < 0.05


def test_replan_refusals(tmp_path, capsys):
    world = _world(tmp_path)
    config = str(world.config.path)
    # Before any look there is nothing recorded to replan.
    assert main(["replan", "handle-time", "--planned-per-group", "900", "--reason", "x", "--config", config]) == 2
    assert "change the plan in the configuration" in capsys.readouterr().err
    main(["look", "--config", config, "--as-of", "2026-03-02T12:00:00Z"])
    capsys.readouterr()
    assert main(["replan", "handle-time", "--reason", "x", "--config", config]) == 2
    assert "give --planned-per-group" in capsys.readouterr().err
    assert main(["replan", "handle-time", "--planned-per-group", "600", "--reason", "x", "--config", config]) == 2
    assert "is the current one" in capsys.readouterr().err
    # A plan that ends before the events already seen leaves nothing to test.
    assert main(["replan", "handle-time", "--planned-per-group", "10", "--reason", "x", "--config", config]) == 2
    assert "nothing would be left to test" in capsys.readouterr().err
    assert main(["replan", "handle-time", "--difference", "2", "--reason", "x", "--config", config]) == 2
    assert "sd needed" in capsys.readouterr().err
    with world.engine.begin() as conn:
        conn.execute(sa.update(Comparison).values(state="difference_found", stopped_at=at(2, 12)))
    assert main(["replan", "handle-time", "--planned-per-group", "900", "--reason", "x", "--config", config]) == 2
    assert "cannot be replanned" in capsys.readouterr().err
    assert _changes(world) == []


def test_replan_from_planning_inputs(tmp_path, capsys):
    world = _world(tmp_path, planned_per_group=None, difference=3.0, sd=10.0, power=0.8)
    config = str(world.config.path)
    main(["look", "--config", config, "--as-of", "2026-03-02T12:00:00Z"])
    capsys.readouterr()
    assert main(["replan", "handle-time", "--difference", "2", "--reason", "the lead wants 2 s",
                 "--config", config, "--format", "json"]) == 0
    out = json.loads(capsys.readouterr().out)
    from monitor.stats.planning import plan_mean

    expected = plan_mean(2.0, 10.0, power=0.8, looks=5)
    assert out["new_plan"]["planned_per_group"] == expected.max_per_group
    assert out["new_plan"]["inputs"]["difference"] == 2.0 and out["new_plan"]["inputs"]["sd"] == 10.0
    assert 0 < out["power_if_planned_difference"] < 1


def test_looks_after_a_replan_use_the_remainder_bounds_and_say_when_it_will_decide(tmp_path, capsys):
    world = _world(tmp_path, planned_per_group=None, difference=3.0, sd=10.0, power=0.8)
    config = str(world.config.path)
    first = world.look(at(2, 12))
    assert first.detail["outlook"]["planned_difference"] > 0  # conditional power at a testing look
    assert "completes_on" in first.detail["outlook"]
    planned = first.detail["planned_per_group"]
    assert main(["replan", "handle-time", "--planned-per-group", str(2 * planned), "--reason", "rate fell",
                 "--config", config]) == 0
    capsys.readouterr()
    second = world.look(at(3, 12))
    assert second.boundary_look == 2 and second.detail["bounds"]["segment"] == 1
    assert second.detail["plan"]["end"] == 2.0
    assert second.detail["plan"]["share"] == pytest.approx(second.fraction / 2.0)
    assert second.detail["planned_per_group"] == 2 * planned
    # The recorded bounds are the statistics module's, from the recorded looks and replan.
    (change,) = _changes(world)
    looks = world.looks()
    probe = AdaptiveBoundary.resume(0.05, "obrien-fleming", "two-sided",
                                    [{"fraction": looks[0].fraction, "z": looks[0].boundary_z}], [change.record])
    expected = probe.add_look(second.fraction)
    assert second.detail["bounds"]["upper_z"] == pytest.approx(expected.upper_z, rel=1e-12)
    assert looks[1].boundary_z == pytest.approx(expected.upper_z, rel=1e-12)
    assert looks[1].cumulative_alpha is None and looks[1].ci_low is None  # no repeated interval after a change
    assert 0 <= second.detail["outlook"]["planned_difference"] <= 1


def test_a_look_worked_out_before_a_replan_is_not_recorded_after_it(tmp_path, capsys, monkeypatch):
    from monitor.errors import LookAlreadyRecordedError
    from monitor.look import orchestrator

    world = _world(tmp_path)
    config = str(world.config.path)
    world.look(at(2, 12))
    real = orchestrator.read_state

    def read_then_replan(*args, **kwargs):
        state = real(*args, **kwargs)
        assert main(["replan", "handle-time", "--planned-per-group", "900", "--reason", "meanwhile",
                     "--config", config]) == 0
        return state

    monkeypatch.setattr(orchestrator, "read_state", read_then_replan)
    with pytest.raises(LookAlreadyRecordedError, match="replanned"):
        world.look(at(2, 13))
    monkeypatch.undo()
    assert world.look(at(2, 13)).look == 2


def test_status_and_history_say_when_it_will_decide_and_show_the_replan(tmp_path, capsys):
    from monitor.store import readback

    world = _world(tmp_path, planned_per_group=None, difference=3.0, sd=10.0, power=0.8)
    config = str(world.config.path)
    world.look(at(2, 12))
    main(["replan", "handle-time", "--planned-per-group", "300", "--reason", "rate fell", "--by", "dana",
          "--config", config])
    world.look(at(2, 18))
    capsys.readouterr()
    (row,) = readback.comparison_status(world.engine, now=at(2, 18))
    assert row["replans"] == 1 and row["planned_per_group"] == 300
    last = world.looks()[-1]
    assert row["fraction"] == pytest.approx(last.detail["plan"]["share"])
    assert row["outlook_words"].startswith("at the current rate the plan completes around ")
    assert "if the planned difference is real, the chance of finding it by then is " in row["outlook_words"]
    assert main(["status", "--config", config]) == 0
    assert row["outlook_words"] in capsys.readouterr().out
    assert main(["history", "handle-time", "--config", config]) == 0
    out = capsys.readouterr().out
    assert "replan 1 after look 1" in out and "by dana" in out and "(rate fell)" in out and "-> 300 per group" in out
    detail = readback.get_comparison(world.engine, "handle-time")
    assert detail["plan_changes"][0]["made_by"] == "dana" and 0 < detail["plan_changes"][0]["conditional_error"]


def test_restart_command_reads_new_data_only_unless_from_start(tmp_path, capsys):
    world = _world(tmp_path)
    config = str(world.config.path)
    world.look(at(2, 12))
    assert main(["restart", "handle-time", "--reason", "new scanner", "--config", config]) == 0
    out = capsys.readouterr().out
    assert "version 1 archived; the next look starts version 2" in out
    assert "reads only data after 2026-03-02T12:00:00+00:00" in out and "nothing version 1 tested" in out
    record = world.look(at(2, 14))
    assert record.version == 2 and record.detail["restart"]["starts_after"] == "2026-03-02T12:00:00+00:00"
    assert main(["restart", "handle-time", "--from-start", "--config", config]) == 0
    assert "will be tested again" in capsys.readouterr().out
    record = world.look(at(2, 15))
    assert record.version == 3 and record.detail["restart"]["from_start"] is True
    assert main(["history", "handle-time", "--config", config]) == 0
    assert "--from-start: the data version 2 tested were tested again" in capsys.readouterr().out


def test_information_fraction_config_and_look(tmp_path):
    from monitor.config import load_config
    from monitor.errors import ConfigError
    from monitor.stats.information import plan_information
    from monitor.stats.planning import plan_mean

    world = _world(tmp_path, planned_per_group=None, difference=3.0, sd=10.0, power=0.8, fraction="information")
    from monitor.design import Design

    assert Design.from_config(world.comparison).to_stored()["fraction"] == "information"
    record = world.look(at(2, 12))
    maximum = plan_information(plan_mean(3.0, 10.0, power=0.8, looks=5))
    assert record.fraction == pytest.approx(1.0 / record.standard_error ** 2 / maximum, rel=1e-12)
    assert record.detail["plan"]["fraction"] == "information"
    # The default leaves designs as they were (no key), so comparisons frozen before it still match.
    plain = _world(tmp_path / "plain", planned_per_group=600) if (tmp_path / "plain").mkdir() is None else None
    assert "fraction" not in Design.from_config(plain.comparison).to_stored()
    for keys, message in (({"fraction": "days"}, "must be 'events' or 'information'"),
                          ({"fraction": "information"}, "needs a mean comparison planned from difference")):
        with pytest.raises(ConfigError, match=message):
            world.write(planned_per_group=600, **keys)
