"""The look with PostgreSQL as both source and store: figures, late rows, atomicity, concurrency."""

from __future__ import annotations

import threading
from datetime import timedelta

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa
from scipy import stats

from live_helpers import LiveWorld, at, event_rows, insert_events
from monitor.store import looks as store_looks, outbox
from monitor.verify import verify_looks
from monitor.errors import DesignChangedError, LookAlreadyRecordedError, StoreBehindError
from monitor.look import restart_comparison
from monitor.store.models import Cell, Comparison, Look

pytestmark = pytest.mark.postgres
T0 = at(2, 6)


@pytest.fixture
def pg_world(pg_database_url, tmp_path):
    def build(rows, **keys):
        return LiveWorld(tmp_path, rows, source_url=pg_database_url, store_url=pg_database_url,
                         arrival_column="id", **keys)
    return build


def _check_against_scipy(world, record):
    raw = world.raw()
    upto = raw[(raw.done_at <= pd.Timestamp(record.cutoff)) & np.isfinite(raw.seconds.astype(float))]
    east = upto[upto.site == "east"].seconds.to_numpy()
    west = upto[upto.site == "west"].seconds.to_numpy()
    ref = stats.ttest_ind(east, west, equal_var=False)
    assert (record.n1, record.n2) == (len(east), len(west))
    assert record.statistic == pytest.approx(ref.statistic, rel=1e-9)
    assert record.p_value == pytest.approx(ref.pvalue, rel=1e-7)


def test_multi_look_with_late_and_bad_rows_matches_scipy(pg_world):
    rng = np.random.default_rng(31)
    rows = event_rows(rng, 800, T0, east=101.0)
    rows += [{"site": "east", "seconds": None, "done_at": T0}, {"site": "west", "seconds": float("nan"), "done_at": T0},
             {"site": "north", "seconds": 5.0, "done_at": T0}, {"site": "east", "seconds": 1.0, "done_at": None}]
    w = pg_world(rows, planned_per_group=2000, lateness="5m")
    first = w.look(T0 + timedelta(hours=6))
    _check_against_scipy(w, first)
    assert first.excluded == {"null_value": 1, "not_finite": 1, "unknown_group": 1, "null_time": 1}
    insert_events(w.source_url, "events", [{"site": "west", "seconds": 150.0, "done_at": T0 + timedelta(hours=1)},
                                           {"site": "east", "seconds": float("inf"), "done_at": T0 + timedelta(hours=1)}])
    for hours in (12, 20, 30):
        record = w.look(T0 + timedelta(hours=hours))
        _check_against_scipy(w, record)
        if hours == 12:
            assert record.late_events == 1 and record.excluded["not_finite"] == 2
    assert all(r["ok"] for r in verify_looks(w.config, "handle-time", w.engine))


def test_all_or_nothing_and_design_change_on_postgres(pg_world, monkeypatch):
    w = pg_world(event_rows(np.random.default_rng(32), 300, T0), planned_per_group=2000)
    w.look(T0 + timedelta(hours=3))

    def fail(*args, **kwargs):
        raise RuntimeError("connection dropped mid-write")

    monkeypatch.setattr(outbox, "write_alert", fail)
    monkeypatch.setattr(store_looks, "upsert_cells", fail)
    with pytest.raises(RuntimeError):
        w.look(T0 + timedelta(hours=5))
    assert w.count(Look) == 1
    with w.engine.connect() as conn:
        assert conn.execute(sa.select(Comparison.looks_taken)).scalar() == 1
    monkeypatch.undo()
    assert w.look(T0 + timedelta(hours=5)).look == 2
    w.write(arrival_column="id", method="pooled", planned_per_group=2000)
    with pytest.raises(DesignChangedError, match="method"):
        w.look(T0 + timedelta(hours=6))
    restart_comparison(w.engine, "handle-time", made_at=T0 + timedelta(hours=5), made_by="test")
    record = w.look(T0 + timedelta(hours=6))
    assert (record.version, record.look) == (2, 1)


def test_concurrent_looks_on_postgres(pg_world):
    w = pg_world(event_rows(np.random.default_rng(33), 500, T0), planned_per_group=5000)
    for hours in (3, 6, 9, 12):
        barrier = threading.Barrier(4)
        outcomes = []

        def run():
            barrier.wait()
            try:
                outcomes.append(w.look(T0 + timedelta(hours=hours)))
            except LookAlreadyRecordedError as exc:
                outcomes.append(exc)

        threads = [threading.Thread(target=run) for _ in range(4)]
        for t in threads:
            t.start()
        for t in threads:
            t.join()
        assert len(outcomes) == 4 and any(not isinstance(o, Exception) for o in outcomes)
    looks = w.looks()
    assert [l.look_number for l in looks] == list(range(1, len(looks) + 1))
    raw = w.raw()
    assert looks[-1].n1 + looks[-1].n2 == (raw.done_at <= pd.Timestamp(looks[-1].cutoff)).sum()
    with w.engine.connect() as conn:
        assert conn.execute(sa.select(sa.func.sum(Cell.n)).where(Cell.kind == "total")).scalar() == \
            looks[-1].n1 + looks[-1].n2


def test_store_behind_on_postgres(pg_world):
    from monitor.store.engine import downgrade

    w = pg_world(event_rows(np.random.default_rng(34), 50, T0))
    downgrade(w.store_url, "0001")
    with pytest.raises(StoreBehindError, match="gapwatch db upgrade"):
        w.look(T0 + timedelta(hours=3))
