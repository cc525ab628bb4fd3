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
    from monitor.plan_state import z_of
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
