"""The store's record of replans and restarts: guards, numbering, and how a restart's next version starts."""

from __future__ import annotations

from datetime import datetime, timedelta, timezone

import pytest
import sqlalchemy as sa

from monitor.errors import LookAlreadyRecordedError, ReplanRefusedError, UnknownComparisonError
from monitor.store import plan_changes
from monitor.store.models import Comparison
from tests.live_helpers import migrated_store

T0 = datetime(2026, 3, 2, 9, 0, tzinfo=timezone.utc)


@pytest.fixture
def engine(tmp_path):
    engine = migrated_store(f"sqlite:///{tmp_path / 'store.sqlite'}")
    yield engine
    engine.dispose()


def _comparison(engine, name="pick-rate", version=1, looks=3, stopped=False, archived=False):
    with engine.begin() as conn:
        return conn.execute(sa.insert(Comparison).returning(Comparison.id), dict(
            name=name, version=version, design={"plan": {"planned_per_group": 500}}, design_hash="x",
            settings={}, state="difference_found" if stopped else "collecting", looks_taken=looks,
            watermark={"cutoff": "2026-03-02T08:00:00+00:00", "arrival": None}, created_at=T0,
            last_look_at=T0, stopped_at=T0 if stopped else None, archived=archived)).scalar_one()


def _replan(engine, cid, looks=3, **kw):
    args = dict(comparison_id=cid, looks_taken=looks, made_at=T0 + timedelta(hours=1), made_by="dana",
                reason="event rate halved", old_plan={"planned_per_group": 500},
                new_plan={"planned_per_group": 250}, record={"segment": 1})
    args.update(kw)
    return plan_changes.record_replan(engine, **args)


def test_replans_are_numbered_and_read_back_in_order(engine):
    cid = _comparison(engine)
    assert _replan(engine, cid) == 1
    assert _replan(engine, cid, reason="lead wants a smaller difference") == 2
    rows = plan_changes.replans(engine, cid)
    assert [r["number"] for r in rows] == [1, 2]
    assert rows[0]["made_by"] == "dana" and rows[0]["made_at"] == T0 + timedelta(hours=1)
    assert rows[1]["reason"] == "lead wants a smaller difference"
    assert rows[0]["new_plan"] == {"planned_per_group": 250} and rows[0]["after_look"] == 3


def test_a_look_recorded_meanwhile_voids_the_replan(engine):
    cid = _comparison(engine, looks=4)
    with pytest.raises(LookAlreadyRecordedError, match="run the replan again"):
        _replan(engine, cid, looks=3)
    assert plan_changes.replans(engine, cid) == []


def test_a_stopped_comparison_is_not_replanned(engine):
    cid = _comparison(engine, stopped=True)
    with pytest.raises(ReplanRefusedError, match="has stopped \\(difference found\\)"):
        _replan(engine, cid)
    with pytest.raises(UnknownComparisonError):
        _replan(engine, 999)


def test_restart_archives_and_records_where_the_next_version_starts(engine):
    cid = _comparison(engine)
    done = plan_changes.restart_version(engine, "pick-rate", made_at=T0, made_by="dana", reason="new scanner",
                                        from_start=False)
    assert (done["archived_version"], done["next_version"], done["from_start"]) == (1, 2, False)
    with engine.connect() as conn:
        assert conn.execute(sa.select(Comparison.archived).where(Comparison.id == cid)).scalar_one()
        note = plan_changes.restart_note(conn, "pick-rate", 1)
    assert note["watermark"]["cutoff"] == "2026-03-02T08:00:00+00:00" and not note["from_start"]
    assert note["made_by"] == "dana" and note["reason"] == "new scanner"
    assert plan_changes.plan_changes(engine, cid)[0]["kind"] == "restart"
    with pytest.raises(UnknownComparisonError, match="no active comparison"):
        plan_changes.restart_version(engine, "pick-rate", made_at=T0, made_by="x", reason="", from_start=True)


def test_restart_from_start_is_recorded_as_such(engine):
    _comparison(engine)
    plan_changes.restart_version(engine, "pick-rate", made_at=T0, made_by="dana", reason="", from_start=True)
    with engine.connect() as conn:
        assert plan_changes.restart_note(conn, "pick-rate", 1)["from_start"] is True


def test_a_version_archived_without_a_note_starts_the_next_after_its_watermark(engine):
    _comparison(engine, archived=True)
    with engine.connect() as conn:
        note = plan_changes.restart_note(conn, "pick-rate", 1)
        assert plan_changes.restart_note(conn, "pick-rate", 7) is None
    assert note["from_start"] is False and note["made_by"] is None
    assert note["watermark"]["cutoff"] == "2026-03-02T08:00:00+00:00"


def test_each_replan_moves_the_count_a_look_guards_on(engine):
    cid = _comparison(engine)
    _replan(engine, cid)
    _replan(engine, cid)
    with engine.connect() as conn:
        assert conn.execute(sa.select(Comparison.replans).where(Comparison.id == cid)).scalar_one() == 2
    archived = _comparison(engine, name="other", archived=True)
    with pytest.raises(LookAlreadyRecordedError):
        _replan(engine, archived)
