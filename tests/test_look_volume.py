"""The volume check through the real look: hour cells, the verdict recorded, one alert per episode."""

from __future__ import annotations

from datetime import timedelta

import numpy as np
import pytest
import sqlalchemy as sa

from live_helpers import LiveWorld, at, insert_events
from monitor.store.models import Alert

TODAY = at(24, 0)          # Tuesday 24 March 2026 (UTC)


def _day_rows(rng, day_start, *, west_from=None, west_factor=1.0, hours=range(6, 22)):
    rows = []
    for hour in hours:
        for site in ("east", "west"):
            rate = 20.0 * (west_factor if site == "west" and west_from is not None and hour >= west_from else 1.0)
            for minute in np.sort(rng.uniform(0, 60, size=rng.poisson(rate))):
                rows.append({"site": site, "seconds": float(rng.normal(100, 10)),
                             "done_at": day_start + timedelta(hours=hour, minutes=float(minute))})
    return rows


def _world(tmp_path, weeks, **keys):
    rng = np.random.default_rng(5)
    rows = []
    for back in range(7 * weeks, 0, -1):
        rows += _day_rows(rng, TODAY - timedelta(days=back))
    return LiveWorld(tmp_path, rows, planned_per_group=10 ** 6, **keys), rng


def _volume_alerts(world):
    with world.engine.connect() as conn:
        return conn.execute(sa.select(Alert.kind, Alert.payload).where(Alert.kind == "volume")).all()


def test_a_group_that_loses_most_of_its_events_raises_one_volume_alert(tmp_path):
    world, rng = _world(tmp_path, 3)
    insert_events(world.source_url, "events", _day_rows(rng, TODAY, west_from=10, west_factor=0.3, hours=range(6, 16)))
    record = world.look(TODAY + timedelta(hours=14, minutes=5))
    volume = record.detail["volume"]
    assert volume["state"] == "warning" and volume["weeks"] == 3 and volume["weekday"] == "Tuesday"
    west = volume["groups"][1]
    assert west["group"] == "west" and west["warn"] and west["share_of_usual"] < 0.5
    assert not volume["groups"][0]["warn"]
    assert record.decision == "collecting"          # the comparison goes on
    alerts = _volume_alerts(world)
    assert len(alerts) == 1
    message = alerts[0].payload["message"]
    assert "events from west fell to" in message and "usual Tuesday volume since" in message
    # Still short an hour later: the same episode, no second alert.
    insert_events(world.source_url, "events", _day_rows(rng, TODAY, west_from=10, west_factor=0.3, hours=[16]))
    later = world.look(TODAY + timedelta(hours=17, minutes=5))
    assert later.detail["volume_state"] == "warning"
    assert len(_volume_alerts(world)) == 1


def test_a_normal_day_is_ok_and_short_history_is_not_yet_measurable(tmp_path):
    world, rng = _world(tmp_path, 3)
    insert_events(world.source_url, "events", _day_rows(rng, TODAY, hours=range(6, 16)))
    record = world.look(TODAY + timedelta(hours=14, minutes=5))
    assert record.detail["volume"]["state"] == "ok"
    share = record.detail["volume"]["share"]
    assert share["expected"] == pytest.approx(0.5, abs=0.05) and not share["warn"]
    assert _volume_alerts(world) == []

    short, rng2 = _world(tmp_path / "short", 1) if (tmp_path / "short").mkdir() is None else (None, None)
    insert_events(short.source_url, "events", _day_rows(rng2, TODAY, west_from=10, west_factor=0.1, hours=range(6, 16)))
    record = short.look(TODAY + timedelta(hours=14, minutes=5))
    assert record.detail["volume"]["state"] == "not_yet_measurable" and record.detail["volume"]["weeks"] == 1
    assert _volume_alerts(short) == []


def test_share_against_a_configured_expected_share(tmp_path):
    """Both groups at their usual volume, but the design expects group 1 to bring 80 %."""
    world, rng = _world(tmp_path, 2, expected_share=0.8)
    insert_events(world.source_url, "events", _day_rows(rng, TODAY, hours=range(6, 16)))
    record = world.look(TODAY + timedelta(hours=14, minutes=5))
    volume = record.detail["volume"]
    assert volume["share"]["expected"] == 0.8 and volume["share"]["warn"] and volume["state"] == "warning"
    assert "expected" in _volume_alerts(world)[0].payload["message"]


def test_status_shows_the_volume_state_and_the_warning_in_words(tmp_path, capsys):
    from monitor import cli

    world, rng = _world(tmp_path, 3)
    insert_events(world.source_url, "events", _day_rows(rng, TODAY, west_from=10, west_factor=0.3, hours=range(6, 16)))
    world.look(TODAY + timedelta(hours=14, minutes=5))
    assert cli.main(["status", "--config", str(tmp_path / "gapwatch.toml")]) == 0
    out = capsys.readouterr().out
    header, row = out.splitlines()[:2]
    assert "volume" in header and " warning " in row
    assert "volume: events from west fell to" in out and "usual Tuesday volume since" in out
    assert cli.main(["status", "--config", str(tmp_path / "gapwatch.toml"), "--format", "json"]) == 0
    import json

    data = json.loads(capsys.readouterr().out)
    assert data[0]["volume_state"] == "warning" and data[0]["volume"]["groups"][1]["warn"] is True


def test_dashboard_line_beside_the_data_quality(tmp_path):
    from dashboard.panels import volume_text
    from monitor.store.readback import comparison_status

    world, rng = _world(tmp_path, 3)
    insert_events(world.source_url, "events", _day_rows(rng, TODAY, west_from=10, west_factor=0.3, hours=range(6, 16)))
    world.look(TODAY + timedelta(hours=14, minutes=5))
    row = comparison_status(world.engine, now=TODAY + timedelta(hours=15))[0]
    text = volume_text(row)
    assert text.startswith("Volume: WARNING") and "west" in text and "of a usual Tuesday since" in text
    assert "None" not in text and "nan" not in text
    assert volume_text({"volume": None}) == "Volume: not checked yet."
    assert volume_text({"volume": {"state": "not_yet_measurable", "why": "1 week(s) of Tuesday history; "
                                   "the check needs 2"}}).startswith("Volume: not yet measurable (1 week")


def test_volume_alert_reads_in_an_email_without_empty_figures(tmp_path):
    from monitor.alerts.wording import email_text

    world, rng = _world(tmp_path, 3)
    insert_events(world.source_url, "events", _day_rows(rng, TODAY, west_from=10, west_factor=0.3, hours=range(6, 16)))
    world.look(TODAY + timedelta(hours=14, minutes=5))
    payload = _volume_alerts(world)[0].payload
    subject, body = email_text(payload["alert_id"], payload)
    assert subject == "gapwatch: handle-time - events below their usual volume"
    assert "events from west fell to" in body and "None" not in body and "nan" not in body
