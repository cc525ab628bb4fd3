"""A typo'd group name: ``check`` names the values present and the near miss, and the design
is not frozen while a configured group has never had a row, so the corrected name is accepted."""

from __future__ import annotations

import numpy as np
import pytest

from live_helpers import LiveWorld, at, event_rows
from monitor.cli import main
from monitor.errors import DesignChangedError

ROWS = event_rows(np.random.default_rng(5), 300, at(2, 6))  # groups east and west


def test_check_lists_values_present_and_the_near_miss(tmp_path, capsys):
    world = LiveWorld(tmp_path, ROWS, groups=["east", "wset"])
    assert main(["check", "--config", str(world.config.path)]) == 1
    out = capsys.readouterr().out
    line = next(ln for ln in out.splitlines() if "'wset'" in ln)
    assert "did you mean 'west'?" in line and "'east' (" in line and "'west' (" in line
    assert "rows" in line


def test_check_warns_only_when_a_group_is_merely_absent(tmp_path, capsys):
    world = LiveWorld(tmp_path, ROWS, groups=["east", "harbour"])
    assert main(["check", "--config", str(world.config.path)]) == 0
    out = capsys.readouterr().out
    assert "warning: group 'harbour' has no rows in 'events' yet; values present: " in out
    assert "'east' (150 rows)" in out and "did you mean" not in out


def test_a_typo_is_not_frozen_and_the_fix_is_accepted(tmp_path):
    world = LiveWorld(tmp_path, ROWS, groups=["east", "wset"], planned_per_group=5000)
    first = world.look(at(2, 12))
    assert first.n2 == 0
    assert any("group 'wset' has had no row" in w and "not frozen" in w for w in first.warnings)
    world.write(groups=["east", "west"], planned_per_group=5000)
    fixed = world.look(at(2, 13))
    # The waiting version is archived as it stood; the corrected design reads the table afresh.
    assert fixed.version == 2 and fixed.look == 1
    assert fixed.n1 > 0 and fixed.n2 > 0
    assert fixed.n2 == sum(1 for r in ROWS if r["site"] == "west" and r["done_at"] <= at(2, 13))
    assert not any("not frozen" in w for w in fixed.warnings)


def test_a_design_with_rows_in_both_groups_stays_frozen(tmp_path):
    world = LiveWorld(tmp_path, ROWS, planned_per_group=5000)
    world.look(at(2, 12))
    world.write(groups=["east", "north"], planned_per_group=5000)
    with pytest.raises(DesignChangedError):
        world.look(at(2, 13))
