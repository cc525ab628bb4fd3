"""Each dashboard page run headless with Streamlit's AppTest against a seeded, migrated store."""

from __future__ import annotations

from datetime import datetime, timezone
from pathlib import Path

import pytest
import sqlalchemy as sa
from streamlit.testing.v1 import AppTest

from monitor.store import readback
from monitor.commands.status import fmt
from monitor.store.models import Alert

import store_seed

APP = str(Path(__file__).resolve().parent.parent / "dashboard" / "app.py")


@pytest.fixture
def store(tmp_path, monkeypatch):
    url = f"sqlite:///{tmp_path / 'store.sqlite'}"
    store_seed.migrate(url)
    info = store_seed.seed_store(url, now=datetime.now(timezone.utc))
    path = tmp_path / "gapwatch.toml"
    path.write_text('[store]\nurl = "sqlite:///store.sqlite"\n')
    monkeypatch.setenv("GAPWATCH_CONFIG", str(path))
    monkeypatch.delenv("GAPWATCH_DASHBOARD_PASSWORD", raising=False)
    engine = sa.create_engine(url)
    yield engine, info
    engine.dispose()


def _app(page=None, **query):
    at = AppTest.from_file(APP, default_timeout=60)
    at.run()
    if page:
        at.switch_page(page)
    for key, value in query.items():
        at.query_params[key] = value
    if page or query:
        at.run()
    assert not at.exception, [e.message for e in at.exception]
    return at


def _html(at):
    return "\n".join(h.value for h in at.get("html"))


def _metrics(at):
    return {m.label: m.value for m in at.metric}


def test_board_lists_every_live_comparison_with_state_and_numbers(store):
    engine, _ = store
    at = _app()
    assert at.title[0].value == "Board"
    table = _html(at)
    rows = readback.comparison_status(engine)
    for row in rows:
        symbol, words = readback.STATES[row["state"]]
        assert f">{row['name']}</a>" in table
        assert f"{row['n1']:,} / {row['n2']:,}" in table
        assert words in table and symbol in table  # a word and a symbol, not colour alone
        if row["estimate"] is not None:
            assert f"{fmt(row['estimate'])} [{fmt(row['ci_low'])}, {fmt(row['ci_high'])}]" in table
        assert f"{100 * row['fraction']:.0f}%" in table
    assert "design effect" in table  # the warning on pick-seconds
    counts = _metrics(at)
    for state in readback.STATES:
        assert counts[readback.state_label(state)] == str(sum(r["state"] == state for r in rows))
    assert "comparison?name=pick-seconds" in table


def test_board_filters_by_name_and_state(store):
    at = _app()
    at.text_input(key="board_find").input("contact").run()
    table = _html(at)
    assert ">first-contact-rate</a>" in table and ">pick-seconds</a>" not in table
    at.text_input(key="board_find").input("").run()
    at.multiselect(key="board_states").select("collecting").run()
    table = _html(at)
    assert ">pick-seconds</a>" in table and ">line-output-shift</a>" in table
    assert ">dock-turnaround</a>" not in table
    assert not at.exception


def test_comparison_page_opens_from_the_query_and_shows_the_store(store):
    engine, _ = store
    at = _app("views/comparison.py", name="pick-seconds")
    assert at.selectbox(key="comparison_name").value == "pick-seconds"
    row = readback.get_comparison(engine, "pick-seconds")
    metrics = _metrics(at)
    assert metrics["Estimate (east − west)"] == fmt(row["estimate"])
    assert metrics["Events per group"] == f"{row['n1']:,} / {row['n2']:,}"
    assert metrics["Plan reached"] == f"{100 * row['fraction']:.0f}%"
    history = readback.look_history(engine, "pick-seconds")
    assert metrics["Rows excluded"] == f"{history[-1]['excluded_total']:,}"
    assert metrics["Late events"] == f"{sum(h['late_events'] for h in history):,}"
    assert len(at.get("vega_lite_chart")) == 4  # boundary, estimate, groups, excluded rows
    reading = _html(at)
    assert "not evidence that the groups are the same" in reading
    assert "never replaces, operational judgement" in reading
    assert any("design effect" in w.value for w in at.warning)
    assert len(at.get("download_button")) == 1
    table = at.dataframe[-1].value
    assert list(table["look"]) == list(range(1, 10))
    assert table["n1"].iloc[-1] == row["n1"]
    per_day = at.dataframe[0].value  # the day cells, inside the data-quality expander
    cells = readback.cells_by_kind(engine, "pick-seconds")["day"]
    assert per_day["n east"].sum() == sum(c["n"] for c in cells if c["group"] == "east") == row["n1"]


def test_comparison_page_switches_comparison_and_shows_the_stop(store):
    engine, _ = store
    at = _app("views/comparison.py", name="pick-seconds")
    at.selectbox(key="comparison_name").select("first-contact-rate").run()
    assert not at.exception
    assert at.query_params["name"] == "first-contact-rate"
    metrics = _metrics(at)
    adjusted = readback.look_history(engine, "first-contact-rate")[-1]["adjusted"]
    assert metrics["Adjusted estimate"] == fmt(adjusted["estimate"])
    assert metrics["Adjusted p-value"] == fmt(adjusted["p_value"], 3)
    assert "crossed the efficacy boundary" in _html(at)


def test_comparison_page_offers_versions(store):
    at = _app("views/comparison.py", name="line-output-shift")
    radio = at.radio(key="version_line-output-shift")
    assert radio.value == 2 and radio.options == ["v1 (archived)", "v2 (live)"]
    assert "futility boundary" in at.get("vega_lite_chart")[0].proto.spec  # the live plan uses one
    radio.set_value(1).run()
    assert not at.exception
    assert _metrics(at)["Looks"] == "6"
    assert "planned events were reached" in _html(at)


def test_unknown_comparison_in_the_query_falls_back_to_the_first(store):
    at = _app("views/comparison.py", name="no-such-thing")
    assert at.selectbox(key="comparison_name").value == "dock-turnaround"


def test_alerts_page_is_read_only_without_a_password(store):
    at = _app("views/alerts.py")
    assert any("read-only" in i.value for i in at.info)
    assert len(at.get("form")) == 0
    table = at.dataframe[0].value
    assert set(table["state"]) == {"pending", "delivered", "failed", "acknowledged"}
    at.multiselect(key="alert_states").select("failed").run()
    assert list(at.dataframe[0].value["comparison"]) == ["repair-visit-minutes"]


def _alert_state(engine, alert_id):
    with engine.connect() as conn:
        return conn.execute(
            sa.select(Alert.state, Alert.acknowledged_by).where(Alert.id == alert_id)
        ).one()


def test_acknowledging_needs_the_right_password(store, monkeypatch):
    engine, info = store
    monkeypatch.setenv("GAPWATCH_DASHBOARD_PASSWORD", "tide-table-42")
    at = _app("views/alerts.py")
    at.selectbox(key="ack_alert").set_value(info["pending_alert"])
    at.text_input(key="ack_by").input("dock supervisor")
    at.text_input(key="ack_password").input("tide-table-41")
    at.button[0].click().run()
    assert any("Wrong password" in e.value for e in at.error)
    assert _alert_state(engine, info["pending_alert"]).state == "pending"

    at.selectbox(key="ack_alert").set_value(info["pending_alert"])
    at.text_input(key="ack_by").input("dock supervisor")
    at.text_input(key="ack_password").input("tide-table-42")
    at.button[0].click().run()
    assert not at.exception
    assert any("Acknowledged" in s.value for s in at.success)
    row = _alert_state(engine, info["pending_alert"])
    assert row.state == "acknowledged" and row.acknowledged_by == "dock supervisor"


def test_review_lists_stopped_and_archived_and_filters(store):
    at = _app("views/review.py")
    table = at.dataframe[0].value
    assert sorted(zip(table["comparison"], table["version"])) == [
        ("first-contact-rate", 1), ("line-output-shift", 1)]
    at.text_input(key="review_name").input("line").run()
    table = at.dataframe[0].value
    assert list(zip(table["comparison"], table["version"])) == [("line-output-shift", 1)]
    assert "planned events were reached" in _html(at)
    at.text_input(key="review_name").input("").run()
    at.multiselect(key="review_states").unselect("plan_complete").run()
    assert list(at.dataframe[0].value["comparison"]) == ["first-contact-rate"]
    at.toggle(key="review_live").set_value(True).run()
    at.multiselect(key="review_states").select("collecting").run()
    assert "pick-seconds" in list(at.dataframe[0].value["comparison"])
    assert not at.exception


def test_review_filters_by_date(store):
    at = _app("views/review.py")
    today = datetime.now(timezone.utc).date()
    at.date_input(key="review_dates").set_value((today.replace(year=today.year - 1),
                                                today.replace(year=today.year - 1))).run()
    assert any("No comparison matches" in i.value for i in at.info)


def test_open_interval_ends_and_a_clock_running_ahead(tmp_path, monkeypatch):
    from datetime import timedelta

    from monitor.store.models import Comparison, Look

    url = f"sqlite:///{tmp_path / 'store.sqlite'}"
    store_seed.migrate(url)
    ahead = datetime.now(timezone.utc) + timedelta(days=3)  # as a simulated demo clock would be
    store_seed.seed_store(url, now=ahead)
    engine = sa.create_engine(url)
    with engine.begin() as conn:  # a one-sided ("greater") design records no upper end
        cid = conn.execute(sa.select(Comparison.id).where(Comparison.name == "pick-seconds")).scalar_one()
        conn.execute(sa.update(Look).where(Look.comparison_id == cid).values(ci_high=None))
    engine.dispose()
    path = tmp_path / "gapwatch.toml"
    path.write_text('[store]\nurl = "sqlite:///store.sqlite"\n')
    monkeypatch.setenv("GAPWATCH_CONFIG", str(path))
    at = _app()
    table = _html(at)
    assert ", ∞]" in table
    assert "ahead of this machine's clock" in " ".join(c.value for c in at.caption)
    assert "s ago" in table or "min ago" in table  # read against the newest look, not "in 3 days"
    at = _app("views/comparison.py", name="pick-seconds")
    assert len(at.get("vega_lite_chart")) == 4


def test_comparison_page_shows_the_outlook_and_the_changes_of_plan(tmp_path, monkeypatch):
    import numpy as np

    from live_helpers import LiveWorld, at as moment, event_rows
    from monitor.cli import main

    world = LiveWorld(tmp_path, event_rows(np.random.default_rng(5), 400, moment(2, 6)), planned_per_group=None,
                      difference=3.0, sd=10.0, power=0.8)
    config = str(world.config.path)
    world.look(moment(2, 12))
    assert main(["replan", "handle-time", "--planned-per-group", "300", "--reason", "event rate halved",
                 "--by", "dana", "--config", config]) == 0
    world.look(moment(2, 18))
    monkeypatch.setenv("GAPWATCH_CONFIG", config)
    monkeypatch.delenv("GAPWATCH_DASHBOARD_PASSWORD", raising=False)
    app = _app("views/comparison.py", name="handle-time")
    infos = [i.value for i in app.info]
    assert any(v.startswith("At the current rate the plan completes around ") for v in infos), infos
    text = "\n".join(m.value for m in app.markdown)
    assert "Changes of plan" in text
    assert "Replan 1 after look 1" in text and "by dana" in text and "→ 300 events per group — event rate halved" in text
