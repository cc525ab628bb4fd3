"""The read side: status rows, look history, cells, alerts, acknowledgement, schedule estimates."""

from __future__ import annotations

import json
from datetime import datetime, timedelta, timezone

import pytest
import sqlalchemy as sa

from monitor.store import readback
from monitor.errors import InvalidArgumentError, UnknownComparisonError
from monitor.store.models import Alert, Cell, Comparison, Look

import store_seed


@pytest.fixture
def seeded(tmp_path):
    url = f"sqlite:///{tmp_path / 'store.sqlite'}"
    store_seed.migrate(url)
    info = store_seed.seed_store(url)
    engine = sa.create_engine(url)
    yield engine, info
    engine.dispose()


def _latest_look(engine, name, version=None):
    with engine.connect() as conn:
        stmt = sa.select(Comparison.id).where(Comparison.name == name, Comparison.archived.is_(False))
        if version is not None:
            stmt = sa.select(Comparison.id).where(Comparison.name == name, Comparison.version == version)
        cid = conn.execute(stmt).scalar_one()
        return conn.execute(
            sa.select(*Look.__table__.columns).where(Look.comparison_id == cid)
            .order_by(Look.look_number.desc()).limit(1)
        ).mappings().first()


def test_status_rows_match_the_latest_look(seeded):
    engine, _ = seeded
    rows = readback.comparison_status(engine, now=store_seed.NOW)
    json.dumps(rows, allow_nan=False)  # strictly serialisable
    names = [r["name"] for r in rows]
    assert names == sorted(names)
    assert len(rows) == 5  # the archived first plan of line-output-shift is left out
    for row in rows:
        last = _latest_look(engine, row["name"])
        assert row["n1"] == last["n1"] and row["n2"] == last["n2"]
        assert row["fraction"] == pytest.approx(last["fraction"])
        if last["estimate"] is not None:
            assert row["estimate"] == pytest.approx(last["estimate"])
            assert row["ci_low"] == pytest.approx(last["ci_low"])
        assert row["state_label"].endswith(readback.STATES[row["state"]][1])
        for key in ("name", "version", "state", "looks", "n1", "n2", "estimate", "ci_low", "ci_high",
                    "fraction", "last_look_at", "groups", "method", "metric", "clusters",
                    "design_effect", "effective_n", "warnings"):
            assert key in row
    pick = next(r for r in rows if r["name"] == "pick-seconds")
    assert any("design effect" in w for w in pick["warnings"])
    assert pick["groups"] == ["east", "west"]


def test_archived_versions_only_when_asked(seeded):
    engine, _ = seeded
    rows = readback.comparison_status(engine, include_archived=True, now=store_seed.NOW)
    versions = sorted((r["version"], r["archived"]) for r in rows if r["name"] == "line-output-shift")
    assert versions == [(1, True), (2, False)]
    only = readback.list_comparisons(engine, archived=True, now=store_seed.NOW)
    assert [(r["name"], r["version"]) for r in only] == [("line-output-shift", 1)]


def test_filters_by_name_state_and_date(seeded):
    engine, _ = seeded
    now = store_seed.NOW
    assert [r["name"] for r in readback.list_comparisons(engine, name_contains="contact", now=now)] == [
        "first-contact-rate"]
    stopped = readback.list_comparisons(engine, states=["difference_found", "plan_complete"],
                                        archived=None, now=now)
    assert {(r["name"], r["state"]) for r in stopped} == {
        ("first-contact-rate", "difference_found"), ("line-output-shift", "plan_complete")}
    # The archived plan ended 12 looks (two hours) before the others started.
    old = readback.list_comparisons(engine, archived=None, until=now - timedelta(hours=3), now=now)
    assert [(r["name"], r["version"]) for r in old] == [("line-output-shift", 1)]
    recent = readback.list_comparisons(engine, archived=None, since=now - timedelta(hours=1), now=now)
    assert ("line-output-shift", 1) not in [(r["name"], r["version"]) for r in recent]
    with pytest.raises(InvalidArgumentError, match="states"):
        readback.list_comparisons(engine, states=["finished"])
    with pytest.raises(InvalidArgumentError, match="since"):
        readback.list_comparisons(engine, since=datetime(2026, 1, 1))


def test_time_to_plan_follows_the_recent_rate(seeded):
    engine, _ = seeded
    row = next(r for r in readback.comparison_status(engine, now=store_seed.NOW) if r["name"] == "pick-seconds")
    history = readback.look_history(engine, "pick-seconds")
    first, last = history[-6], history[-1]
    seconds = (datetime.fromisoformat(last["as_of"]) - datetime.fromisoformat(first["as_of"])).total_seconds()
    expected = (1 - last["fraction"]) / ((last["fraction"] - first["fraction"]) / seconds)
    assert row["seconds_to_plan"] == pytest.approx(expected)
    assert row["events_per_hour"][0] == pytest.approx((last["n1"] - first["n1"]) / seconds * 3600)
    stopped = next(r for r in readback.comparison_status(engine, now=store_seed.NOW)
                   if r["name"] == "first-contact-rate")
    assert stopped["seconds_to_plan"] is None and stopped["next_look_at"] is None
    assert stopped["adjusted"]["p_value"] is not None


@pytest.mark.parametrize(
    "every, last, now, expected",
    [
        (600, "2026-03-02T11:55:00", "2026-03-02T12:00:00", "2026-03-02T12:05:00"),
        ("10m", "2026-03-02T11:55:00", "2026-03-02T12:00:00", "2026-03-02T12:05:00"),
        ("1h", "2026-03-02T11:15:00", "2026-03-02T12:00:00", "2026-03-02T12:15:00"),
        ("*/30 * * * *", "2026-03-02T11:30:00", "2026-03-02T11:40:00", "2026-03-02T12:00:00"),
        # the trigger counts from the last look: a missed fire time shows as overdue, not skipped
        ("*/30 * * * *", "2026-03-02T11:30:00", "2026-03-02T12:10:00", "2026-03-02T12:00:00"),
        (600, "2026-03-02T11:30:00", "2026-03-02T12:10:00", "2026-03-02T11:40:00"),
        ("0 6 * * *", "2026-03-02T06:00:00", "2026-03-02T12:00:00", "2026-03-03T06:00:00"),
    ],
    ids=["seconds", "minutes-text", "hours-text", "cron-half-hour", "cron-overdue", "interval-overdue", "cron-daily"],
)
def test_next_look_time(every, last, now, expected):
    utc = timezone.utc
    got = readback.next_look_time(
        every, last_look_at=datetime.fromisoformat(last).replace(tzinfo=utc),
        now=datetime.fromisoformat(now).replace(tzinfo=utc))
    assert got == datetime.fromisoformat(expected).replace(tzinfo=utc)


def test_next_look_time_on_the_schedule_grid():
    """With its place on the grid recorded, an interval comparison's next look is the grid tick the
    scheduler's due rule takes: the first at least half an interval after the last look."""
    utc = timezone.utc
    now = datetime(2026, 3, 2, 10, 20, tzinfo=utc)

    def nxt(every, last, offset):
        return readback.next_look_time(every, last_look_at=datetime.fromisoformat(last).replace(tzinfo=utc),
                                       now=now, tick_offset=offset)

    # A first look at start (10:17) is followed by the hour's grid tick at 11:00, not at 11:17.
    assert nxt("1h", "2026-03-02T10:17:00", 0.0) == datetime(2026, 3, 2, 11, 0, tzinfo=utc)
    # A look started 20 s late still has the next minute's tick.
    assert nxt("1m", "2026-03-02T10:19:20", 0.0) == datetime(2026, 3, 2, 10, 20, tzinfo=utc)
    # A look 40 s after its tick (more than half a minute) leaves that next tick out.
    assert nxt("1m", "2026-03-02T10:19:40", 0.0) == datetime(2026, 3, 2, 10, 21, tzinfo=utc)
    # A place 15 s into the minute.
    assert nxt(60, "2026-03-02T10:19:15", 15.0) == datetime(2026, 3, 2, 10, 20, 15, tzinfo=utc)
    # A cron schedule has no place: as before.
    assert nxt("*/30 * * * *", "2026-03-02T10:00:00", None) == datetime(2026, 3, 2, 10, 30, tzinfo=utc)


def test_next_look_time_cron_in_local_time():
    # 06:00 in Lisbon in summer (UTC+1) is 05:00 UTC.
    got = readback.next_look_time("0 6 * * *", now=datetime(2026, 7, 1, 12, tzinfo=timezone.utc),
                                  timezone_name="Europe/Lisbon")
    assert got == datetime(2026, 7, 2, 5, tzinfo=timezone.utc)
    assert readback.next_look_time(None, now=datetime(2026, 7, 1, tzinfo=timezone.utc)) is None
    assert readback.next_look_time("not a schedule", now=datetime(2026, 7, 1, tzinfo=timezone.utc)) is None


@pytest.mark.parametrize("every", ["2w", "600", "0s"])
def test_next_look_time_follows_the_configuration_duration_rule(every):
    # The configuration refuses these as a schedule, so the read side shows no next look for them.
    assert readback.next_look_time(every, now=datetime(2026, 7, 1, tzinfo=timezone.utc)) is None


def test_look_history_matches_the_look_rows(seeded):
    engine, _ = seeded
    history = readback.look_history(engine, "pick-seconds")
    json.dumps(history, allow_nan=False)
    assert [h["look"] for h in history] == list(range(1, 10))
    with engine.connect() as conn:
        rows = conn.execute(
            sa.select(*Look.__table__.columns).join(Comparison).where(Comparison.name == "pick-seconds")
            .order_by(Look.look_number)
        ).mappings().all()
    for h, r in zip(history, rows):
        assert h["n1"] == r["n1"] and h["statistic"] == pytest.approx(r["statistic"])
        assert h["boundary_z"] == pytest.approx(r["boundary_z"])
        assert h["cumulative_alpha"] == pytest.approx(r["cumulative_alpha"])
        assert h["excluded"] == r["excluded"]
        assert h["excluded_total"] == sum(r["excluded"].values())
    for key in ("look", "as_of", "cutoff", "n1", "n2", "estimate", "standard_error", "statistic", "df",
                "p_value", "fraction", "boundary_z", "futility_z", "nominal_p", "cumulative_alpha",
                "ci_low", "ci_high", "decision", "excluded", "late_events", "clusters",
                "design_effect", "effective_n", "warnings"):
        assert key in history[0]
    # cumulative alpha never decreases
    spent = [h["cumulative_alpha"] for h in history]
    assert spent == sorted(spent)
    # a specific version
    assert len(readback.look_history(engine, "line-output-shift", version=1)) == 6
    assert len(readback.look_history(engine, "line-output-shift")) == 4


def test_unknown_comparison_names_what_is_known(seeded):
    engine, _ = seeded
    with pytest.raises(UnknownComparisonError, match="pick-seconds"):
        readback.look_history(engine, "pick-second")
    with pytest.raises(UnknownComparisonError, match="version 7"):
        readback.get_comparison(engine, "pick-seconds", version=7)


def test_get_comparison_carries_the_design(seeded):
    engine, _ = seeded
    comp = readback.get_comparison(engine, "pick-seconds", now=store_seed.NOW)
    assert comp["design"]["spending"] == "obrien-fleming"
    assert comp["planned_per_group"] == 3000 and comp["alpha"] == 0.05
    assert comp["settings"]["every"] == "10m"
    assert comp["next_look_at"] == "2026-03-02T12:10:00+00:00"
    assert [v["version"] for v in readback.list_versions(engine, "line-output-shift")] == [1, 2]


def test_cells_recover_the_group_means(seeded):
    engine, _ = seeded
    cells = readback.cells_by_kind(engine, "pick-seconds")
    last = _latest_look(engine, "pick-seconds")
    totals = {c["group_index"]: c for c in cells["total"]}
    assert totals[0]["n"] == last["n1"] and totals[1]["n"] == last["n2"]
    assert totals[0]["mean"] == pytest.approx(last["mean1"], rel=1e-12)
    assert totals[1]["sd"] == pytest.approx(last["sd2"], rel=1e-9)
    # day cells add up to the totals
    assert sum(c["n"] for c in cells["day"] if c["group_index"] == 0) == last["n1"]


def test_excluded_rows_running_totals_and_per_look(seeded):
    engine, _ = seeded
    rows = readback.excluded_by_reason(engine, "repair-visit-minutes")
    assert {r["reason"] for r in rows} == {"unknown_group", "null_time"}
    history = readback.look_history(engine, "repair-visit-minutes")
    # Look.excluded holds running totals: what the looks added sums to the last total
    assert sum(r["count"] for r in rows) == history[-1]["excluded_total"]
    last_unknown = [r for r in rows if r["reason"] == "unknown_group"][-1]
    assert last_unknown["running_total"] == history[-1]["excluded"]["unknown_group"]


def test_excluded_per_look_without_the_detail_falls_back_to_differences(seeded):
    engine, _ = seeded
    before = readback.look_history(engine, "pick-seconds")
    with engine.begin() as conn:
        cid = conn.execute(sa.select(Comparison.id).where(Comparison.name == "pick-seconds")).scalar_one()
        conn.execute(sa.update(Look).where(Look.comparison_id == cid).values(detail={}))
    after = readback.look_history(engine, "pick-seconds")
    assert [h["excluded_new"] for h in after] == [{k: v for k, v in h["excluded_new"].items() if v}
                                                  for h in before]


def test_adjusted_inference_after_a_stop(seeded):
    engine, _ = seeded
    row = readback.get_comparison(engine, "first-contact-rate")
    with engine.connect() as conn:
        detail = conn.execute(
            sa.select(Look.detail).join(Comparison).where(Comparison.name == "first-contact-rate")
            .order_by(Look.look_number.desc()).limit(1)).scalar_one()
    raw = detail["after_stop"]
    assert row["adjusted"]["estimate"] == pytest.approx(raw["median_unbiased_estimate"])
    assert row["adjusted"]["p_value"] == pytest.approx(raw["p_value"])
    assert [row["adjusted"]["ci_low"], row["adjusted"]["ci_high"]] == pytest.approx(raw["adjusted_ci"])
    assert readback.get_comparison(engine, "pick-seconds")["adjusted"] is None
    assert readback.adjusted_inference({"after_stop": {"note": "adjusted inference unavailable"}})["estimate"] is None


def test_list_alerts_and_filters(seeded):
    engine, info = seeded
    alerts = readback.list_alerts(engine)
    json.dumps(alerts, allow_nan=False)
    assert {a["id"] for a in alerts} == set(info["alerts"])
    created = [a["created_at"] for a in alerts]
    assert created == sorted(created, reverse=True)
    failed = readback.list_alerts(engine, states=["failed"])
    assert [a["comparison"] for a in failed] == ["repair-visit-minutes"]
    assert failed[0]["deliveries"][0]["attempts"] == 8
    assert info["pending_alert"] in [a["id"] for a in readback.list_alerts(engine, "pending")]
    with pytest.raises(InvalidArgumentError, match="states"):
        readback.list_alerts(engine, states=["read"])


def test_acknowledge_alert(seeded):
    engine, info = seeded
    when = store_seed.NOW + timedelta(minutes=3)
    out = readback.acknowledge_alert(engine, info["pending_alert"], by="night shift lead", now=when)
    assert out["state"] == "acknowledged" and out["acknowledged_by"] == "night shift lead"
    with engine.connect() as conn:
        row = conn.execute(
            sa.select(Alert.state, Alert.acknowledged_at).where(Alert.id == info["pending_alert"])
        ).one()
        assert row.state == "acknowledged" and row.acknowledged_at == when
    # a second acknowledgement keeps the first record
    again = readback.acknowledge_alert(engine, info["pending_alert"], by="someone else", now=when + timedelta(hours=1))
    assert again["acknowledged_by"] == "night shift lead"
    assert again["acknowledged_at"] == when.isoformat()
    with pytest.raises(InvalidArgumentError, match="alert_id 'nope'"):
        readback.acknowledge_alert(engine, "nope", by="x", now=when)
    with pytest.raises(InvalidArgumentError, match="by"):
        readback.acknowledge_alert(engine, info["pending_alert"], by="  ", now=when)
    with pytest.raises(InvalidArgumentError, match="now"):
        readback.acknowledge_alert(engine, info["pending_alert"], by="x", now=datetime(2026, 3, 2))


def test_empty_store(tmp_path):
    url = f"sqlite:///{tmp_path / 'empty.sqlite'}"
    store_seed.migrate(url)
    engine = sa.create_engine(url)
    assert readback.comparison_status(engine) == []
    assert readback.list_alerts(engine) == []
    with pytest.raises(UnknownComparisonError, match="no comparisons yet"):
        readback.look_history(engine, "anything")


@pytest.mark.postgres
def test_status_and_acknowledge_on_postgres(pg_database_url):
    store_seed.migrate(pg_database_url)
    info = store_seed.seed_store(pg_database_url)
    engine = sa.create_engine(pg_database_url)
    try:
        rows = readback.comparison_status(engine, now=store_seed.NOW)
        assert len(rows) == 5
        json.dumps(rows, allow_nan=False)
        assert readback.list_comparisons(engine, name_contains="contact", now=store_seed.NOW)[0]["state"] == \
            "difference_found"
        out = readback.acknowledge_alert(engine, info["pending_alert"], by="ops", now=store_seed.NOW)
        assert out["state"] == "acknowledged"
        assert len(readback.look_history(engine, "pick-seconds")) == 9
    finally:
        engine.dispose()


def test_reads_back_what_real_looks_recorded(tmp_path):
    """Looks taken by monitor.look on a real source table, read back by the same functions the CLI uses."""
    import numpy as np
    from live_helpers import LiveWorld, at, event_rows, insert_events

    rng = np.random.default_rng(11)
    start = at(1, 6)
    rows = event_rows(rng, 240, start, step_minutes=6, east=112.0, west=100.0, sd=10.0, day_sd=6.0)
    rows += [{"site": "east", "seconds": None, "done_at": start + timedelta(minutes=7)},
             {"site": "north", "seconds": 5.0, "done_at": start + timedelta(minutes=8)}]
    world = LiveWorld(tmp_path, rows, planned_per_group=300, every="6h", description="pick seconds, real looks")
    as_of = start
    states = []
    for _ in range(6):
        as_of += timedelta(hours=6)
        if world.look(as_of) is None:
            break
        states.append(readback.comparison_status(world.engine, now=as_of)[0]["state"])
    status = readback.comparison_status(world.engine, include_archived=True, now=as_of)
    json.dumps(status, allow_nan=False)
    row = status[0]
    history = readback.look_history(world.engine, "handle-time")
    json.dumps(history, allow_nan=False)
    raw = world.raw().dropna()
    cutoff = datetime.fromisoformat(history[-1]["cutoff"])
    seen = raw[raw["done_at"] <= cutoff]
    assert row["n1"] == int((seen["site"] == "east").sum())
    assert row["n2"] == int((seen["site"] == "west").sum())
    assert row["looks"] == len(history) and row["groups"] == ["east", "west"]
    assert row["planned_per_group"] == 300 and row["description"] == "pick seconds, real looks"
    # Bad rows: counted once, as running totals, and per look where they were read
    assert history[-1]["excluded"] == {"null_value": 1, "unknown_group": 1}
    assert sum(sum(h["excluded_new"].values()) for h in history) == 2
    # the estimate matches the raw rows (Welch difference of means)
    east, west = seen[seen["site"] == "east"]["seconds"], seen[seen["site"] == "west"]["seconds"]
    assert row["estimate"] == pytest.approx(east.mean() - west.mean(), rel=1e-9)
    spent = [h["cumulative_alpha"] for h in history if h["cumulative_alpha"] is not None]
    assert spent == sorted(spent)
    if row["stopped"]:
        assert row["adjusted"] is not None and row["adjusted"]["p_value"] is not None
        assert row["next_look_at"] is None
    else:
        assert row["next_look_at"] == (as_of + timedelta(hours=6)).isoformat()
    assert row["state"] == states[-1]


@pytest.mark.parametrize(
    "newest_offset, expect_note",
    [(timedelta(minutes=-5), False), (timedelta(hours=-20), False), (timedelta(days=-3), True),
     (timedelta(hours=2), True)],
    ids=["recent", "same-day", "days-behind", "ahead"],
)
def test_reference_time(tmp_path, newest_offset, expect_note):
    url = f"sqlite:///{tmp_path / 'store.sqlite'}"
    store_seed.migrate(url)
    now = store_seed.NOW
    store_seed.seed_store(url, now=now + newest_offset)
    engine = sa.create_engine(url)
    moment, note = readback.reference_time(engine, now)
    newest = readback.latest_look_time(engine)
    engine.dispose()
    assert newest == now + newest_offset
    assert (note is not None) == expect_note
    assert moment == (newest if expect_note else now)
