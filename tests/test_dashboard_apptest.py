"""Each dashboard page run headless with Streamlit's AppTest against a seeded, migrated store."""

from __future__ import annotations

import re
from datetime import datetime, timezone
from pathlib import Path

import pytest
import sqlalchemy as sa
from streamlit.testing.v1 import AppTest

from dashboard import scale
from monitor.store import readback
from monitor.store.readback import format_number as fmt
from monitor.store.models import Alert
from monitor.vocabulary import STATES, state_label

import dashboard_seed
import store_seed

APP = str(Path(__file__).resolve().parent.parent / "dashboard" / "app.py")
PAGES = ("views/board.py", "views/comparison.py", "views/alerts.py", "views/review.py")

# What must never reach a reader: Python's missing/non-finite values and reprs of Python objects.
UNREADABLE = re.compile(
    r"\b(None|nan|NaN|inf|Infinity)\b|np\.float|Timestamp\(|datetime\.|\bobject at 0x|\{'|\['|\(\)"
)


@pytest.fixture
def store(tmp_path, monkeypatch):
    url = f"sqlite:///{tmp_path / 'store.sqlite'}"
    store_seed.migrate(url)
    now = datetime.now(timezone.utc)
    info = store_seed.seed_store(url, now=now)
    dashboard_seed.add_paired_days(url, now=now)
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
    return "\n".join(h.value for h in at.get("html") if not h.value.lstrip().startswith("<style>"))


def _metrics(at):
    return {m.label: m.value for m in at.metric}


def _texts(at):
    """Every piece of text a reader sees on the page, tables included."""
    texts = [_html(at)]
    for kind in ("title", "subheader", "markdown", "caption", "info", "warning", "success", "error"):
        texts += [e.value for e in getattr(at, kind)]
    texts += [f"{m.label} {m.value}" for m in at.metric]
    for frame in [*at.dataframe, *at.table]:
        value = frame.value
        texts.append(" ".join(map(str, value.columns)) + " " + " ".join(map(str, value.index)))
        texts += [str(cell) for cell in value.to_numpy().ravel()]
    return texts


def _assert_readable(at):
    bad = [t for t in _texts(at) if UNREADABLE.search(re.sub(r"<[^>]+>", " ", t))]
    assert not bad, bad[:3]


def test_the_root_address_opens_the_board_and_every_page_has_its_own(store):
    at = _app()
    assert at.title[0].value == "Board"
    for page, title in zip(PAGES, ("Board", "Comparison", "Alerts", "Review")):
        at = _app(page)
        assert at.title[0].value == title


def test_board_lists_every_live_comparison_with_state_and_numbers(store):
    engine, _ = store
    at = _app()
    table = _html(at)
    rows = readback.comparison_status(engine)
    for row in rows:
        symbol, words = STATES[row["state"]]
        assert f">{row['name']}</a>" in table
        assert f"{row['n1']:,} / {row['n2']:,}" in table
        assert words in table and symbol in table  # a word and a symbol, not colour alone
        if row["estimate"] is not None and row["ci_low"] is not None:
            assert f"{fmt(row['estimate'])} [{fmt(row['ci_low'])}, {fmt(row['ci_high'])}]" in table
        assert f"{100 * row['fraction']:.0f}%" in table
    assert "design effect" in table  # the warning on pick-seconds
    counts = dict(re.findall(r'data-state="(\w+)">.*?<span class="gw-count-n">(\d+)</span>', table))
    for state in STATES:
        assert counts[state] == str(sum(r["state"] == state for r in rows))
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
    assert table["interval"].iloc[-1] == f"[{fmt(row['ci_low'])}, {fmt(row['ci_high'])}]"
    per_day = at.dataframe[0].value  # the day cells, inside the data-quality expander
    cells = readback.cells_by_kind(engine, "pick-seconds")["day"]
    assert per_day["n east"].sum() == sum(c["n"] for c in cells if c["group"] == "east") == row["n1"]
    _assert_readable(at)


def test_a_paired_comparison_is_drawn_and_read_on_its_decision_scale(store):
    engine, _ = store
    at = _app("views/comparison.py", name=dashboard_seed.PAIRED)
    looks = readback.look_history(engine, dashboard_seed.PAIRED)
    tested = [h for h in looks if h["boundary_z"] is not None][-1]
    assert abs(tested["statistic"]) > tested["boundary_z"]  # the raw t is beyond the z boundary ...
    z = scale.z_equivalent(tested["statistic"], tested["df"])
    reading = _html(at)
    # ... but the decision, the picture and the words all use its z-equivalent
    assert f"the same tail as z = {fmt(z)}), is inside this look's boundary of ±{fmt(tested['boundary_z'])}" in reading
    assert f"Look {looks[-1]['look']} took no test" in reading
    assert "z-equivalent of t" in at.get("vega_lite_chart")[0].proto.spec
    assert any("z-equivalent" in c.value for c in at.caption)
    assert "Europe/London" in at.get("vega_lite_chart")[1].proto.spec  # dated axis in the comparison's zone
    table = at.dataframe[-1].value
    assert list(table["z-equivalent"].iloc[:1]) == [fmt(scale.z_equivalent(looks[0]["statistic"], looks[0]["df"]))]
    assert "—" in list(table["boundary"]) and "—" in list(table["interval"])  # untested looks, said plainly
    _assert_readable(at)


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
    _assert_readable(at)


def test_comparison_page_offers_versions(store):
    at = _app("views/comparison.py", name="line-output-shift")
    radio = at.radio(key="version_line-output-shift")
    assert radio.value == 2 and radio.options == ["v1 (archived)", "v2 (live)"]
    assert "futility boundary" in at.get("vega_lite_chart")[0].proto.spec  # the live plan uses one
    radio.set_value(1).run()
    assert not at.exception
    assert _metrics(at)["Looks"] == "6"
    assert "planned evidence was reached" in _html(at)


def test_unknown_comparison_in_the_query_falls_back_to_the_first(store):
    at = _app("views/comparison.py", name="no-such-thing")
    assert at.selectbox(key="comparison_name").value == "dock-turnaround"


def test_alerts_page_shows_every_whole_message_and_is_read_only_without_a_password(store):
    engine, _ = store
    at = _app("views/alerts.py")
    assert any("read-only" in i.value for i in at.info)
    assert len(at.get("form")) == 0 and not [b for b in at.button if b.key and b.key.startswith("ack-")]
    cards = _html(at)
    for alert in readback.list_alerts(engine):
        assert alert["message"] in cards  # whole, never cut
    for words in ("waiting to be delivered", "delivered", "delivery failed", "acknowledged"):
        assert words in cards
    at.multiselect(key="alert_states").select("failed").run()
    assert ">repair-visit-minutes</a>" in _html(at) and ">pick-seconds</a>" not in _html(at)
    _assert_readable(at)


def _alert_state(engine, alert_id):
    with engine.connect() as conn:
        return conn.execute(
            sa.select(Alert.state, Alert.acknowledged_by).where(Alert.id == alert_id)
        ).one()


def test_acknowledging_from_the_alerts_row_keeps_that_alert_after_a_refusal(store, monkeypatch):
    engine, info = store
    monkeypatch.setenv("GAPWATCH_DASHBOARD_PASSWORD", "tide-table-42")
    at = _app("views/alerts.py")
    row_buttons = [b for b in at.button if b.key and b.key.startswith("ack-")]
    open_ids = [a["id"] for a in readback.list_alerts(engine) if a["state"] != "acknowledged"]
    assert [b.key[4:] for b in row_buttons] == open_ids  # one per open alert, newest first
    at.button(key=f"ack-{info['pending_alert']}").click().run()
    assert at.session_state["ack_alert"] == info["pending_alert"]
    assert len(at.get("form")) == 1

    at.text_input(key="ack_by").input("dock supervisor")
    at.text_input(key="ack_password").input("tide-table-41")
    at.button(key="ack_submit").click().run()
    assert any("Wrong password" in e.value for e in at.error)
    assert _alert_state(engine, info["pending_alert"]).state == "pending"
    # the refusal keeps the chosen alert and the name, and clears the password
    assert at.session_state["ack_alert"] == info["pending_alert"]
    assert at.text_input(key="ack_by").value == "dock supervisor"
    assert at.text_input(key="ack_password").value == ""

    at.text_input(key="ack_password").input("tide-table-42")
    at.button(key="ack_submit").click().run()
    assert not at.exception
    assert any("Acknowledged: pick-seconds (design effect) by dock supervisor" in s.value for s in at.success)
    row = _alert_state(engine, info["pending_alert"])
    assert row.state == "acknowledged" and row.acknowledged_by == "dock supervisor"
    assert at.session_state["ack_alert"] is None and len(at.get("form")) == 0
    others = [a for a in readback.list_alerts(engine) if a["id"] != info["pending_alert"]]
    assert all(a["acknowledged_by"] != "dock supervisor" for a in others)


def test_cancel_closes_the_acknowledgement(store, monkeypatch):
    _, info = store
    monkeypatch.setenv("GAPWATCH_DASHBOARD_PASSWORD", "tide-table-42")
    at = _app("views/alerts.py")
    at.button(key=f"ack-{info['pending_alert']}").click().run()
    at.button(key="ack_cancel").click().run()
    assert at.session_state["ack_alert"] is None and len(at.get("form")) == 0


def _review_rows(at):
    return re.findall(r'<a href="comparison\?name=([^&"]+)&amp;version=(\d+)"', _html(at))


def test_review_lists_every_archived_version_whatever_its_state(store):
    at = _app("views/review.py")
    assert sorted(_review_rows(at)) == [
        ("first-contact-rate", "1"), ("line-daily-output", "1"), ("line-output-shift", "1")]
    assert "archived" in _html(at) and state_label("collecting").split()[1] in _html(at)
    at.text_input(key="review_name").input("line").run()
    assert sorted(_review_rows(at)) == [("line-daily-output", "1"), ("line-output-shift", "1")]
    assert "Cases packed per hour" in _html(at)  # the first one opens below
    at.text_input(key="review_name").input("").run()
    at.multiselect(key="review_states").select("difference_found").run()
    assert _review_rows(at) == [("first-contact-rate", "1")]
    _assert_readable(at)


def test_review_include_live_adds_the_running_comparisons(store):
    at = _app("views/review.py")
    assert ("pick-seconds", "1") not in _review_rows(at)
    at.toggle(key="review_live").set_value(True).run()
    rows = _review_rows(at)
    assert ("pick-seconds", "1") in rows and ("line-daily-output", "2") in rows
    at.multiselect(key="review_states").select("collecting").run()
    rows = _review_rows(at)
    assert ("pick-seconds", "1") in rows and ("first-contact-rate", "1") not in rows
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
    _assert_readable(at)


def test_every_stored_version_opens_readably(store):
    """Whatever its state or method (no looks yet, a data problem, waiting for clusters, stopped)."""
    engine, _ = store
    with engine.begin() as conn:  # a comparison registered but not looked at yet
        from monitor.store.models import Comparison

        conn.execute(sa.insert(Comparison).values(
            name="a-new-one", version=1, design={"groups": ["left", "right"], "method": "welch",
                                                 "metric": "mean", "alpha": 0.05, "alternative": "two-sided",
                                                 "plan": {"planned_per_group": 100}},
            design_hash="0" * 32, settings={"every": "1h"}, state="collecting", looks_taken=0,
            watermark={}, created_at=datetime.now(timezone.utc), archived=False))
    at = _app("views/comparison.py")
    for row in readback.comparison_status(engine, include_archived=True):
        at.query_params["name"] = row["name"]
        at.query_params["version"] = str(row["version"])
        at = _app("views/comparison.py", name=row["name"], version=str(row["version"]))
        assert at.subheader[0].value.startswith(row["name"])
        _assert_readable(at)


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
