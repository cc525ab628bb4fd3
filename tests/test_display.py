"""The operation's own names and units: labels, unit, one number format, the dashboard link.

Labels and the unit are display only: they never start a new design version, they are stored
so every reader of the store shows them, and they travel in alerts with the design's words,
alpha, the look's warnings (consequence and remedy) and a link to the dashboard page.
"""

from __future__ import annotations

import json
from datetime import timedelta

import numpy as np
import pytest

from live_helpers import CHANNELS, LiveWorld, at, event_rows
from monitor.alerts.wording import comparison_page, email_text, webhook_body
from monitor.cli import main
from monitor.config import ConfigError, load_config
from monitor.design import Design
from monitor.store import readback
from monitor.store.models import Alert
from monitor.vocabulary import (OPEN_END, design_words, end_text, estimate_words, evidence_count, figure,
                                interval_width, quantity, relative_change)

import sqlalchemy as sa

T0 = at(1)
LABELS = ["Hollin Cross", "Saltmarsh Lane"]
DASHBOARD = "https://gapwatch.example.org/ops/"
WITH_DASHBOARD = CHANNELS + f'[alerts]\ndashboard_url = "{DASHBOARD}"\n'


# ---------------------------------------------------------------- one number format


@pytest.mark.parametrize(
    ("value", "width", "expected"),
    [
        (431.27381, 22.3, "431"),          # the interval is ~20 wide: whole numbers
        (431.27381, 2.23, "431.3"),        # ~2 wide: one decimal
        (0.0058761, 0.021, "0.006"),       # a rate difference 2 points wide
        (-0.00001, 1.0, "0.0"),            # never "-0.0"
        (1234567.8, None, "1234568"),      # no exponent for large figures
        (0.00000012341, None, "0.0000001234"),  # nor for small ones (4 significant figures)
        (0.05, None, "0.05"),              # trailing zeros dropped without a width
        (3, None, "3"),                    # whole numbers stay whole
        (None, None, "—"),
        (float("nan"), None, "—"),
        (float("inf"), 1.0, "—"),
    ],
    ids=["width-20", "width-2", "rate", "minus-zero", "large", "small", "level", "int", "none", "nan", "inf"],
)
def test_figure_by_the_interval_width(value, width, expected):
    assert figure(value, width) == expected


def test_open_end_units_and_relative_change():
    assert OPEN_END == "open" and end_text(None) == "open"
    assert estimate_words(2.04, None, 3.1, unit="s") == "2.04 [open, 3.1] s"  # no width: 4 figures
    assert estimate_words(4.234, 1.1, 7.33, unit="s") == "4.2 [1.1, 7.3] s"
    # rates in percentage points
    assert estimate_words(0.005876, -0.004, 0.016, metric="proportion") == "0.6 [-0.4, 1.6] pp"
    assert quantity(0.005876, metric="proportion", width=0.02) == "0.6 pp"
    assert estimate_words(2.0, None, None, unit="min") == "2 min (no interval)"
    assert relative_change(4.2, 180.0) == "+2.3 %" and relative_change(-9.0, 180.0) == "-5 %"
    assert relative_change(4.2, 0.0) is None and relative_change(None, 180.0) is None
    assert interval_width(None, 3.0) is None and interval_width(1.0, 3.0) == 2.0
    assert evidence_count(method="paired", pairs=14) == ("pairs", 14)
    assert evidence_count(method="welch", clustered=True, clusters=9) == ("clusters", 9)
    assert evidence_count(method="welch", days=12) == ("days", 12)  # before/after comparisons
    assert evidence_count(method="welch") is None


# ---------------------------------------------------------------- configuration


def _config(tmp_path, extra="", alerts=""):
    text = (f'[sources.ops]\nurl = "sqlite:///ops.sqlite"\n{alerts}\n[[comparison]]\nname = "pick"\n'
            'source = "ops"\ntable = "events"\ngroup_column = "site"\ngroups = ["east", "west"]\n'
            'value_column = "seconds"\ntime_column = "done_at"\nmethod = "welch"\nplanned_per_group = 400\n'
            + extra)
    path = tmp_path / "gapwatch.toml"
    path.write_text(text)
    return path


@pytest.mark.parametrize(
    ("extra", "problem"),
    [
        ('labels = ["Hollin Cross"]\n', "'labels' must name each of the 2 groups once, in group order; got 1 name"),
        ('labels = ["A", "B", "C"]\n', "got 3 names"),
        ('labels = ["Hollin Cross", " "]\n', "'labels' name 2 is empty"),
        ('labels = "Hollin Cross"\n', "'labels' must be a list of 2 names"),
        ('labels = ["Same", "Same"]\n', "'labels' must be two different names"),
        ('unit = ""\n', "'unit' is empty"),
        ("unit = 3\n", "'unit' must be text"),
    ],
    ids=["one-label", "three-labels", "empty-label", "not-a-list", "same-labels", "empty-unit", "unit-number"],
)
def test_bad_labels_and_units_are_one_line_each(tmp_path, extra, problem):
    with pytest.raises(ConfigError) as caught:
        load_config(_config(tmp_path, extra))
    lines = str(caught.value).splitlines()
    assert len(lines) == 1 and "comparison 'pick'" in lines[0] and problem in lines[0]


def test_dashboard_url_must_be_an_address(tmp_path):
    with pytest.raises(ConfigError) as caught:
        load_config(_config(tmp_path, alerts='[alerts]\ndashboard_url = "gapwatch.example.org"\n'))
    assert "[alerts]: 'dashboard_url' must be the dashboard's http(s) address" in str(caught.value)
    config = load_config(_config(tmp_path, 'labels = ["Hollin Cross", "Saltmarsh Lane"]\nunit = "s"\n',
                                 alerts=f'[alerts]\ndashboard_url = "{DASHBOARD}"\n'))
    assert config.dashboard_url == DASHBOARD.rstrip("/")
    assert comparison_page(config.dashboard_url, "pick seconds", 2) == \
        "https://gapwatch.example.org/ops/comparison?name=pick%20seconds&version=2"
    c = config.comparisons[0]
    assert c.labels == tuple(LABELS) and c.unit == "s"


def test_labels_and_unit_are_display_only(tmp_path):
    plain = load_config(_config(tmp_path)).comparisons[0]
    shown = load_config(_config(tmp_path, 'labels = ["Hollin Cross", "Saltmarsh Lane"]\nunit = "s"\n')).comparisons[0]
    a, b = Design.from_config(plain), Design.from_config(shown)
    assert a.differences(b) == [] and a.fingerprint() == b.fingerprint()
    stored = b.to_stored()
    assert stored["display"] == {"labels": LABELS, "unit": "s"}
    assert "display" not in a.to_stored()  # designs frozen before the display existed read back equal
    assert Design.from_stored(stored).display == b.display


# ---------------------------------------------------------------- through the look


def _difference_rows(seed=3):
    # Ten days every 15 minutes, east 18 s slower, each site's day with its own staffing (a
    # day-level design effect well above the warning threshold).
    return event_rows(np.random.default_rng(seed), 10 * 24 * 4, T0, step_minutes=15, east=118.0, west=100.0,
                      sd=10.0, day_sd=6.0)


def test_names_and_unit_change_without_a_new_version(tmp_path):
    w = LiveWorld(tmp_path, _difference_rows()[:400], planned_per_group=5000)
    first = w.look(T0 + timedelta(hours=60))
    assert first.decision == "collecting"
    row = readback.get_comparison(w.engine, "handle-time")
    assert row["labels"] == ["east", "west"] and row["unit"] == ""
    w.write(planned_per_group=5000, labels=LABELS, unit="s")  # a look later: the names arrive
    from live_helpers import insert_events

    insert_events(w.source_url, "events", _difference_rows()[400:420])
    second = w.look(T0 + timedelta(hours=70))
    assert second.look == 2 and second.version == 1  # the same version goes on
    row = readback.get_comparison(w.engine, "handle-time")
    assert row["labels"] == LABELS and row["unit"] == "s"
    assert row["design_words"] == "Welch t, two-sided, alpha 0.05, O'Brien–Fleming-type spending"


def test_an_alert_carries_names_units_design_warning_and_link(tmp_path):
    w = LiveWorld(tmp_path, _difference_rows(), WITH_DASHBOARD, planned_per_group=600, labels=LABELS, unit="s")
    record = w.look(at(12, 12))
    assert record.decision == "difference_found" and record.alert_id
    with w.engine.connect() as conn:
        payload = conn.execute(sa.select(Alert.payload).where(Alert.id == record.alert_id)).scalar_one()
    assert payload["labels"] == LABELS and payload["unit"] == "s" and payload["groups"] == ["east", "west"]
    assert payload["alpha"] == 0.05 and payload["method"] == "welch" and payload["alternative"] == "two-sided"
    assert payload["spending"] == "obrien-fleming"
    assert payload["design"] == "Welch t, two-sided, alpha 0.05, O'Brien–Fleming-type spending"
    assert payload["link"] == "https://gapwatch.example.org/ops/comparison?name=handle-time&version=1"
    [warning] = [x for x in payload["warnings"] if "design effect" in x]
    assert "times too narrow" in warning and "may not be real" in warning
    assert 'Remedy: add cluster_by = "day"' in warning
    width = interval_width(record.ci_low, record.ci_high)
    assert payload["message"].startswith(
        f"handle-time: Hollin Cross minus Saltmarsh Lane differs by {quantity(record.estimate, unit='s', width=width)}")

    body = json.loads(webhook_body(record.alert_id, payload))
    for key in ("labels", "unit", "alpha", "design", "link", "warnings", "method", "alternative", "spending"):
        assert body[key] == payload[key]

    subject, text = email_text(record.alert_id, payload)
    assert subject == "gapwatch: handle-time - difference found"
    assert "held at 0.05 across all the planned looks" in text
    assert "Design: Welch t, two-sided, alpha 0.05, O'Brien–Fleming-type spending" in text
    assert f"Dashboard: {payload['link']}" in text
    assert f"Warning: {warning}" in text
    assert "Hollin Cross minus Saltmarsh Lane" in text
    adjusted = payload["adjusted"]
    assert (f"Adjusted estimate (Hollin Cross minus Saltmarsh Lane, allowing for the looks): "
            + estimate_words(adjusted["estimate"], adjusted["ci_low"], adjusted["ci_high"], unit="s")) in text
    assert relative_change(adjusted["estimate"], payload["mean2"]) in text
    for word in ("None", "nan", "inf", "{'"):
        assert word not in text.replace("information", "").replace("planned", "")


def test_an_alert_without_a_dashboard_has_no_link(tmp_path):
    w = LiveWorld(tmp_path, _difference_rows(), planned_per_group=600)
    record = w.look(at(12, 12))
    with w.engine.connect() as conn:
        payload = conn.execute(sa.select(Alert.payload).where(Alert.id == record.alert_id)).scalar_one()
    assert "link" not in payload and "Dashboard:" not in email_text(record.alert_id, payload)[1]
    assert payload["labels"] == ["east", "west"] and payload["unit"] == ""


def test_status_and_history_print_names_units_and_the_design(tmp_path, capsys):
    w = LiveWorld(tmp_path, _difference_rows(), planned_per_group=600, labels=LABELS, unit="s")
    record = w.look(at(12, 12))
    assert main(["status", "--config", str(w.config.path)]) == 0
    out = capsys.readouterr().out
    row = readback.get_comparison(w.engine, "handle-time")
    adjusted = row["adjusted"]
    assert (estimate_words(adjusted["estimate"], adjusted["ci_low"], adjusted["ci_high"], unit="s")
            + " adjusted") in out  # after a stop the adjusted estimate is the headline
    assert "Hollin Cross minus Saltmarsh Lane: Welch t, two-sided, alpha 0.05" in out
    assert "None" not in out and "nan" not in out and " inf" not in out
    assert main(["history", "handle-time", "--config", str(w.config.path)]) == 0
    table = capsys.readouterr().out.splitlines()
    assert table[0].split("  ")[0] == "look"
    assert "n Hollin Cross" in table[0] and "n Saltmarsh Lane" in table[0] and "estimate (s)" in table[0]
    width = interval_width(record.ci_low, record.ci_high)
    assert end_text(record.estimate, width=width) in table[1]


def test_design_words_name_the_method_sides_alpha_and_spending():
    stored = {"method": "welch", "alternative": "greater", "alpha": 0.025, "spending": "hsd:-4",
              "clustering": {"cluster_by": "day", "cluster_column": None}, "groups": ["a", "b"]}
    assert design_words(stored, LABELS) == ("cluster-robust t (clusters: day), one-sided (Hollin Cross above "
                                            "Saltmarsh Lane), alpha 0.025, Hwang–Shih–DeCani spending (γ = -4)")
    paired = {"method": "paired", "alternative": "two-sided", "alpha": 0.05, "spending": "pocock"}
    assert design_words(paired) == "paired t, two-sided, alpha 0.05, Pocock-type spending"


def test_the_dashboard_reads_only_the_store_table(tmp_path, monkeypatch):
    from monitor.config import store_url_from_config

    # A comparison with a problem does not keep the dashboard (a reader of the store) from starting.
    path = _config(tmp_path, 'labels = ["only one"]\n', alerts='[store]\nurl = "sqlite:///${STORE_FILE}"\n')
    monkeypatch.setenv("STORE_FILE", "history.sqlite")
    with pytest.raises(ConfigError):
        store_url_from_config(path)
    assert store_url_from_config(path, store_only=True) == f"sqlite:///{(tmp_path / 'history.sqlite').resolve()}"
    path.write_text('[store]\nurl = "not a url"\n')
    with pytest.raises(ConfigError) as caught:
        store_url_from_config(path, store_only=True)
    assert str(caught.value).splitlines() == ["gapwatch.toml: [store]: 'url' is not a database URL SQLAlchemy understands"]
    monkeypatch.delenv("STORE_FILE")
    path.write_text('[store]\nurl = "sqlite:///${STORE_FILE}"\n')
    with pytest.raises(ConfigError) as caught:
        store_url_from_config(path, store_only=True)
    assert "environment variable 'STORE_FILE' is not set" in str(caught.value)


def test_status_writes_the_relative_change_beside_the_absolute_one():
    from monitor.commands.status import _interval

    row = {"stopped": False, "estimate": 12.0, "ci_low": 4.0, "ci_high": 20.0, "mean2": 300.0,
           "metric": "mean", "unit": "s"}
    assert _interval(row) == "12 [4, 20] s (+4 %)"
    rate = {"stopped": False, "estimate": -0.012, "ci_low": -0.03, "ci_high": 0.006, "mean2": 0.08,
            "metric": "proportion", "unit": ""}
    assert _interval(rate) == "-1.2 [-3.0, 0.6] pp (-15 %)"
    # A before/after comparison's relative change is against group 1 without the change: not here.
    assert "%" not in _interval(dict(row, baseline="before the change, a was 3 s slower than b"))
    assert "%" not in _interval(dict(row, mean2=0.0)) and "%" not in _interval(dict(row, mean2=None))


def test_design_words_say_what_a_ratio_and_a_before_after_comparison_test():
    ratio = {"method": "welch", "metric": "ratio", "alternative": "two-sided", "alpha": 0.05,
             "spending": "obrien-fleming", "clustering": {"cluster_by": None, "cluster_column": "crew"}}
    assert design_words(ratio, ["Line 5", "Line 2"]).startswith(
        "difference of ratios of sums (t, cluster-robust, clusters: crew), two-sided")
    before_after = {"method": "welch", "metric": "mean", "alternative": "two-sided", "alpha": 0.05,
                    "spending": "pocock", "start": "2026-03-04T05:00:00+00:00",
                    "before_after": {"baseline_from": "2026-02-18T05:00:00+00:00"}}
    words = design_words(before_after, LABELS)
    assert words.startswith("difference in differences against a baseline") and "Welch" not in words


# ---------------------------------------------------------------- names changed after a stop


def _version_rows(engine):
    """Every comparison row as stored, and the counts of looks, checks' looks and alerts."""
    from monitor.store.models import Comparison, Look

    with engine.connect() as conn:
        rows = [dict(r) for r in conn.execute(sa.select(Comparison.__table__).order_by(Comparison.id)).mappings()]
        looks = conn.execute(sa.select(sa.func.count()).select_from(Look)).scalar()
        alerts = conn.execute(sa.select(sa.func.count()).select_from(Alert)).scalar()
    return rows, looks, alerts


def _without_display(row):
    return {**row, "design": {k: v for k, v in row["design"].items() if k != "display"}}


def test_names_changed_after_a_stop_are_shown_without_a_look_or_a_new_version(tmp_path, capsys, monkeypatch):
    from pathlib import Path

    from streamlit.testing.v1 import AppTest

    w = LiveWorld(tmp_path, _difference_rows(), planned_per_group=600)
    record = w.look(at(12, 12))
    assert record.decision == "difference_found"  # stopped: it takes no more looks
    before, looks, alerts = _version_rows(w.engine)
    assert readback.get_comparison(w.engine, "handle-time")["labels"] == ["east", "west"]

    w.write(planned_per_group=600, labels=LABELS, unit="s")
    assert w.look(at(12, 14)) is None  # still no look: the pass records the names only

    after, looks_after, alerts_after = _version_rows(w.engine)
    assert (looks_after, alerts_after) == (looks, alerts) and len(after) == len(before) == 1
    assert after[0]["design"]["display"] == {"labels": LABELS, "unit": "s"}
    assert _without_display(after[0]) == _without_display(before[0])  # nothing else of the version changed
    row = readback.get_comparison(w.engine, "handle-time")
    assert row["labels"] == LABELS and row["unit"] == "s" and row["version"] == 1 and row["stopped"]

    config = tmp_path / "gapwatch.toml"
    assert main(["status", "--config", str(config)]) == 0
    out = capsys.readouterr().out
    assert "    Hollin Cross minus Saltmarsh Lane: Welch t" in out and "east minus west" not in out
    assert " s adjusted" in out  # the unit beside the adjusted estimate
    assert main(["history", "handle-time", "--config", str(config)]) == 0
    assert "Hollin Cross" in capsys.readouterr().out
    # The board page itself, reading the store as the dashboard does.
    monkeypatch.setenv("GAPWATCH_CONFIG", str(config))
    board = AppTest.from_file(str(Path(__file__).resolve().parent.parent / "dashboard" / "app.py"),
                              default_timeout=60)
    board.run()
    assert not board.exception, [e.message for e in board.exception]
    table = "\n".join(h.value for h in board.get("html"))
    assert "Hollin Cross − Saltmarsh Lane" in table and "east − west" not in table

    w.look(at(12, 16))  # a later pass with the same names writes nothing
    assert _version_rows(w.engine)[0] == after


def test_names_wait_when_the_configuration_describes_another_design(tmp_path):
    w = LiveWorld(tmp_path, _difference_rows(), planned_per_group=600)
    assert w.look(at(12, 12)).decision == "difference_found"
    before = _version_rows(w.engine)
    w.write(planned_per_group=600, labels=LABELS, unit="s", alpha=0.01)  # another design: a restart's
    assert w.look(at(12, 14)) is None
    assert _version_rows(w.engine) == before
    assert readback.get_comparison(w.engine, "handle-time")["labels"] == ["east", "west"]


def test_names_changed_reach_a_running_comparison_with_nothing_new(tmp_path):
    w = LiveWorld(tmp_path, _difference_rows()[:400], planned_per_group=5000)
    assert w.look(T0 + timedelta(hours=110)).decision == "collecting"  # every row read (they end at 100 h)
    before, looks, alerts = _version_rows(w.engine)
    w.write(planned_per_group=5000, labels=LABELS, unit="s")
    quiet = w.look(T0 + timedelta(hours=112))
    assert getattr(quiet, "quiet", False)  # nothing new in the source: no look row
    after, looks_after, alerts_after = _version_rows(w.engine)
    assert (looks_after, alerts_after) == (looks, alerts)
    assert _without_display(after[0]) == _without_display(before[0])
    row = readback.get_comparison(w.engine, "handle-time")
    assert row["labels"] == LABELS and row["unit"] == "s" and row["looks"] == 1
