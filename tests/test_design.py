"""The frozen Design: built from the config, stored and read back unchanged, compared for changes."""

from __future__ import annotations

import json
from datetime import timedelta

import numpy as np
import pytest
import sqlalchemy as sa

from live_helpers import LiveWorld, at, comparison_toml, config_toml, event_rows, write_config
from monitor.config import load_config
from monitor.design import Design, design_hash
from monitor.errors import InvalidArgumentError
from monitor.source.reader import SourceSpec
from monitor.stats.planning import plan_mean
from monitor.store.models import Comparison

CHANNELS = """
[channels.ops-log]
type = "log"
"""


def _comparison(tmp_path, **keys):
    path = write_config(tmp_path, config_toml("sqlite:///o.sqlite", "sqlite:///s.sqlite",
                                              [comparison_toml(**keys)], CHANNELS))
    return load_config(path, environ={}).comparisons[0]


def _design(tmp_path, **keys):
    return Design.from_config(_comparison(tmp_path, **keys))


def test_design_holds_what_is_measured_and_not_the_settings(tmp_path):
    base = _design(tmp_path)
    stored = base.to_stored()
    assert stored["method"] == "welch" and stored["plan"] == {"planned_per_group": 400}
    assert stored["table"] == "events" and stored["groups"] == ["east", "west"]
    # Settings do not touch the design.
    assert _design(tmp_path, every="1h", notify=["ops-log"], lateness="5m", description="x") == base
    # What is measured does, and the change check names the key.
    for keys, key in ((dict(table="events2"), "table"), (dict(value_column="wait"), "value_column"),
                      (dict(filters=[["a", "=", 1]]), "filters"), (dict(valid_range=[0, 10]), "valid_range"),
                      (dict(alpha=0.01), "alpha"), (dict(timezone="Europe/Lisbon"), "timezone"),
                      (dict(groups=["west", "east"]), "groups"), (dict(planned_per_group=500), "plan")):
        changed = _design(tmp_path, **keys)
        assert changed != base, keys
        assert base.differences(changed) == [key]


def test_planning_inputs_give_the_plan(tmp_path):
    design = _design(tmp_path, planned_per_group=None, difference=5.0, sd=20.0, power=0.9, looks=4)
    expected = plan_mean(5.0, 20.0, alpha=0.05, power=0.9, spending="obrien-fleming", looks=4)
    assert design.planned_per_group == expected.max_per_group
    stored = design.to_stored()
    assert stored["plan"]["figures"]["inflation"] == pytest.approx(expected.inflation)
    assert stored["plan"]["inputs"] == {"power": 0.9, "looks": 4, "difference": 5.0, "sd": 20.0}
    assert design.plan.drift == pytest.approx(expected.drift)


def test_paired_plan_counts_pairs(tmp_path):
    design = _design(tmp_path, method="paired", pair_by="day", planned_per_group=None, difference=2.0,
                     sd=6.0, power=0.8, looks=3)
    expected = plan_mean(2.0, 6.0, alpha=0.05, power=0.8, spending="obrien-fleming", looks=3)
    assert design.planned_per_group == -(-expected.max_per_group // 2)
    assert design.pairing.pair_by == "day" and design.paired and not design.clustered


@pytest.mark.parametrize("keys", [
    dict(),
    dict(planned_per_group=None, difference=5.0, sd=20.0, power=0.9, looks=4),
    dict(metric="proportion", method="proportions", planned_per_group=None, p1=0.3, p2=0.4, power=0.8),
    dict(method="paired", pair_by="shift", shift_starts=["14:00", "06:00"], timezone="Europe/Lisbon"),
    dict(method="paired", pair_column="crew"),
    dict(cluster_by="day", min_clusters=4),
    dict(cluster_column="crew"),
    dict(method="z", sigmas=[3.0, 4.0], alternative="greater"),
    dict(filters=[["status", "=", "done"], ["crew", "in", ["a", "b"]]], valid_range=[0, 600], schema="ops",
         time_format="iso"),
    dict(groups=[1, 2], null_difference=1.5),
], ids=["welch", "planned", "proportions", "paired-shift", "paired-column", "clustered-day",
        "clustered-column", "z", "filters", "integer-groups"])
def test_stored_form_round_trips_through_json(tmp_path, keys):
    c = _comparison(tmp_path, **keys)
    design = Design.from_config(c).with_shift(12.5)
    stored = json.loads(json.dumps(design.to_stored()))  # as the store's JSON column gives it back
    again = Design.from_stored(stored)
    assert again.to_stored() == stored
    assert again.differences(design) == [] and again.fingerprint() == design.fingerprint()
    assert again.shift == 12.5
    # The shape the store has always held: every key the configuration's design had, plus the shift.
    assert set(stored) == {
        "method", "metric", "groups", "alternative", "alpha", "spending", "null_difference", "plan",
        "sigmas", "pairing", "clustering", "futility", "valid_range", "filters", "table", "schema",
        "group_column", "value_column", "time_column", "time_format", "timezone", "min_clusters", "shift"}
    spec = SourceSpec.from_design(again, arrival_column="id")
    assert spec.shift == 12.5 and spec.arrival_column == "id" and spec.groups == tuple(c.groups)
    assert spec.key_column == (c.pair_column or c.cluster_column)
    assert spec.filters == c.filters and spec.valid_range == c.valid_range
    assert SourceSpec.from_design(again, shift=0.0).shift == 0.0


def test_an_existing_stored_design_reads_back_exactly():
    # A design as the store holds it (paired by shift, planned from inputs), with its stored hash.
    stored = {
        "method": "paired", "metric": "mean", "groups": ["east", "west"], "alternative": "two-sided",
        "alpha": 0.05, "spending": "obrien-fleming", "null_difference": 0.0,
        "plan": {"planned_per_group": 57, "inputs": {"difference": 2.0, "sd": 6.0, "power": 0.8, "looks": 5},
                 "figures": {"inflation": 1.026, "drift": 2.80, "fractions": [0.2, 0.4, 0.6, 0.8, 1.0]}},
        "sigmas": None, "pairing": {"pair_by": "shift", "pair_column": None, "shift_starts": ["06:00", "14:00"]},
        "clustering": None, "futility": False, "valid_range": [0.0, 600.0], "filters": [["crew", "in", ["a"]]],
        "table": "events", "schema": None, "group_column": "site", "value_column": "seconds",
        "time_column": "done_at", "time_format": "auto", "timezone": "Europe/Lisbon", "min_clusters": None,
        "shift": 41.0,
    }
    design = Design.from_stored(stored)
    assert json.dumps(design.to_stored()) == json.dumps(stored)  # key for key, in the stored order
    comparable = {k: v for k, v in stored.items() if k != "shift"}
    comparable["plan"] = {k: v for k, v in stored["plan"].items() if k != "figures"}
    assert design.fingerprint() == design_hash(comparable)
    # The shift and the plan's figures are not part of what may not change.
    moved = dict(stored, shift=3.0, plan=dict(stored["plan"], figures={"inflation": 9.0}))
    assert Design.from_stored(moved).differences(design) == []


def test_a_design_the_store_cannot_hold_is_refused_by_name():
    with pytest.raises(InvalidArgumentError, match="method"):
        Design.from_stored({"groups": ["a", "b"]})
    with pytest.raises(InvalidArgumentError, match="dict"):
        Design.from_stored(None)


@pytest.mark.parametrize("keys", [
    dict(),
    dict(planned_per_group=None, difference=5.0, sd=20.0, power=0.9, looks=4),
    dict(method="paired", pair_by="hour"),
    dict(cluster_by="day", min_clusters=4),
], ids=["welch", "planned", "paired", "clustered"])
def test_the_look_stores_the_design_and_its_fingerprint(tmp_path, keys):
    start = at(2, 6)
    world = LiveWorld(tmp_path, event_rows(np.random.default_rng(5), 300, start), **keys)
    world.look(start + timedelta(hours=6))
    with world.engine.connect() as conn:
        row = conn.execute(sa.select(Comparison.design, Comparison.design_hash)).one()
    stored = Design.from_stored(row.design)
    assert stored.shift is not None
    configured = Design.from_config(world.comparison)
    assert row.design == json.loads(json.dumps(configured.with_shift(stored.shift).to_stored()))
    assert row.design_hash == stored.fingerprint() == configured.fingerprint()
    assert stored.differences(configured) == []
