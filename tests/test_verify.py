"""`gapwatch verify`: every recorded look recomputed from raw rows; tampering is caught."""

from __future__ import annotations

from datetime import timedelta

import numpy as np
import pytest
import sqlalchemy as sa

from live_helpers import LiveWorld, at, event_rows, insert_events
from monitor.cli import main
from monitor.verify import verify_looks
from monitor.store.models import Look

T0 = at(2, 6)


def _history(world, hours=(3, 8, 14, 27, 40)):
    for h in hours:
        world.look(T0 + timedelta(hours=h))


@pytest.mark.parametrize("keys", [
    dict(),
    dict(method="pooled", lateness="10m"),
    dict(method="paired", pair_by="hour"),
    dict(method="paired", pair_by="shift", shift_starts=["06:00", "14:00", "22:00"], timezone="Europe/Lisbon"),
    dict(cluster_by="day", min_clusters=4),
    dict(metric="proportion", method="proportions"),
], ids=["welch", "pooled-lateness", "paired-hour", "paired-shift", "clustered-day", "proportions"])
def test_every_look_matches_its_replay(tmp_path, keys):
    rng = np.random.default_rng(21)
    rows = event_rows(rng, 1200, T0)
    if keys.get("metric") == "proportion":
        for r in rows:
            r["seconds"] = float(rng.random() < 0.5)
    rows.append({"site": "east", "seconds": None, "done_at": T0})
    world = LiveWorld(tmp_path, rows, planned_per_group=5000, **keys)
    world.look(T0 + timedelta(hours=3))
    # Late and bad rows after the first look: picked up by later looks, replayed with the watermark.
    insert_events(world.source_url, "events", [
        {"site": "west", "seconds": 1.0, "done_at": T0 + timedelta(hours=1)},
        {"site": "east", "seconds": float("nan"), "done_at": T0 + timedelta(hours=2)},
    ])
    _history(world, hours=(8, 14, 27, 40))
    results = verify_looks(world.config, "handle-time", world.engine)
    assert len(results) == len(world.looks()) >= 4
    assert all(r["ok"] for r in results), [r for r in results if not r["ok"]]


def test_tampered_look_is_reported_and_the_command_exits_1(tmp_path, capsys):
    world = LiveWorld(tmp_path, event_rows(np.random.default_rng(2), 600, T0), planned_per_group=5000)
    _history(world)
    assert main(["verify", "handle-time", "--config", str(world.config.path)]) == 0
    assert "5 of 5 looks match" in capsys.readouterr().out
    with world.engine.begin() as conn:
        conn.execute(sa.update(Look).where(Look.look_number == 3).values(estimate=Look.estimate + 0.01, n1=Look.n1 + 1))
    results = verify_looks(world.config, "handle-time", world.engine)
    bad = [r for r in results if not r["ok"]]
    assert [r["look"] for r in bad] == [3]
    assert {m["field"] for m in bad[0]["mismatches"]} == {"n1", "estimate"}
    assert main(["verify", "handle-time", "--config", str(world.config.path)]) == 1
    out = capsys.readouterr().out
    assert "handle-time look 3: MISMATCH: n1 recorded" in out and "4 of 5 looks match" in out


def test_a_misspelled_name_lists_the_known_ones(tmp_path, capsys):
    world = LiveWorld(tmp_path, event_rows(np.random.default_rng(2), 200, T0), planned_per_group=5000)
    _history(world)
    assert main(["verify", "handel-time", "--config", str(world.config.path)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "handel-time" in err[0] and "known: handle-time" in err[0]
