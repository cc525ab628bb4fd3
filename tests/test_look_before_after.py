"""Before/after comparisons through the real look: a start, a frozen baseline, the DiD."""

from __future__ import annotations

import math
import re
from datetime import timedelta

import numpy as np
import pytest

from live_helpers import LiveWorld, at, insert_events
from monitor.errors import ConfigError
from monitor.stats.before_after import difference_in_differences
from monitor.verify import verify_looks
from monitor.vocabulary import figure

START = at(15, 6)          # the change goes live: Sunday 15 March 2026, 06:00 UTC


def site_rows(rng, first_day, last_day, *, gap=10.0, change=0.0, per_day=40, sd=8.0, day_sd=1.5):
    """Events of two sites every day, east ``gap`` above west, and ``change`` at east from START."""
    rows = []
    for day in range(first_day, last_day):
        for site in ("east", "west"):
            shock = rng.normal(0.0, day_sd)
            for i in range(per_day):
                when = at(1, 0) + timedelta(days=day, minutes=int(i * 1440 / per_day) + (7 if site == "east" else 0))
                level = 100.0 + (gap if site == "east" else 0.0) + (change if site == "east" and when >= START else 0.0)
                rows.append({"site": site, "seconds": float(level + shock + rng.normal(0, sd)), "done_at": when})
    return rows


def did_from_rows(rows, start, baseline_from):
    """The DiD the look should report, from the raw rows (day cells built here, CR2)."""
    cells = {}
    for r in rows:
        when = r["done_at"]
        if when < baseline_from:
            continue
        period = int(when >= start)
        key = (0 if r["site"] == "east" else 1, period, when.date().isoformat())
        n, s, q = cells.get(key, (0, 0.0, 0.0))
        cells[key] = (n + 1, s + r["seconds"], q + r["seconds"] ** 2)
    keys = sorted(cells)
    return difference_in_differences([k[0] for k in keys], [k[1] for k in keys], [k[2] for k in keys],
                                     [cells[k][0] for k in keys], [cells[k][1] for k in keys], 0.0,
                                     sum_dev2=[cells[k][2] for k in keys])


BEFORE_AFTER = dict(start="2026-03-15T06:00:00+00:00", baseline="14d", min_clusters=4, planned_per_group=600,
                    every="1d", arrival_column="id")


def test_a_persistent_gap_is_not_reported_as_the_change(tmp_path):
    rng = np.random.default_rng(3)
    rows = site_rows(rng, 0, 21)
    world = LiveWorld(tmp_path, rows, **BEFORE_AFTER)
    # Before the baseline has ended nothing is read and nothing compared.
    early = world.look(at(14, 12))
    assert early.decision == "collecting" and early.n1 == 0 and "baseline ends" in early.warnings[0]
    for day in (16, 17, 18, 19, 20, 21):
        record = world.look(at(day, 0))
    after = [r for r in rows if START <= r["done_at"] <= at(21, 0)]
    assert record.n1 == sum(r["site"] == "east" for r in after)
    want = did_from_rows([r for r in rows if r["done_at"] <= at(21, 0)], START, START - timedelta(days=14))
    assert record.estimate == pytest.approx(want.estimate, rel=1e-9, abs=1e-9)
    assert record.standard_error == pytest.approx(want.standard_error, rel=1e-6)
    assert record.df == pytest.approx(want.df, rel=1e-6)
    figures = record.detail["before_after"]
    assert figures["baseline_gap"]["estimate"] == pytest.approx(want.baseline_gap.estimate, rel=1e-9)
    assert figures["baseline_gap"]["estimate"] == pytest.approx(10.0, abs=2.0)
    assert figures["after_gap"]["estimate"] == pytest.approx(10.0, abs=2.5)
    assert abs(record.estimate) < 3.0
    assert record.decision == "collecting"
    assert not any("cluster_by" in w for w in record.warnings)


def test_the_change_is_found_and_estimated_after_the_stop(tmp_path):
    rng = np.random.default_rng(4)
    rows = site_rows(rng, 0, 40, change=-12.0)
    world = LiveWorld(tmp_path, rows, **BEFORE_AFTER)
    record = None
    for day in range(16, 40):
        record = world.look(at(1, 0) + timedelta(days=day - 1))
        if record is None or record.decision == "difference_found":
            break
    assert record is not None and record.decision == "difference_found"
    assert record.estimate == pytest.approx(-12.0, abs=3.0)
    after = record.detail["after_stop"]
    assert after["median_unbiased_estimate"] == pytest.approx(-12.0, abs=4.0)
    low, high = after["adjusted_ci"]
    assert low < after["median_unbiased_estimate"] < high
    # The after-only gap is the old gap plus the change; the baseline gap the old one.
    figures = record.detail["before_after"]
    assert figures["after_gap"]["estimate"] == pytest.approx(-2.0, abs=3.0)
    assert figures["relative"]["percent"] == pytest.approx(-12.0 / 110.0 * 100, abs=3.0)


def test_decisions_wait_for_days_since_the_start(tmp_path):
    rows = site_rows(np.random.default_rng(5), 0, 18, change=-30.0)
    world = LiveWorld(tmp_path, rows, **BEFORE_AFTER)
    record = world.look(at(16, 12))
    assert record.decision == "awaiting_clusters"
    assert "2 day(s) since the start so far; decisions start at 4" in record.warnings[0]
    assert record.detail["before_after"]["baseline_gap"]["estimate"] == pytest.approx(10.0, abs=2.0)


def test_a_late_baseline_row_is_counted_not_used(tmp_path):
    rng = np.random.default_rng(6)
    rows = site_rows(rng, 0, 18)
    world = LiveWorld(tmp_path, rows, **BEFORE_AFTER)
    first = world.look(at(17, 0))
    gap = first.detail["before_after"]["baseline_gap"]["estimate"]
    insert_events(world.source_url, "events", [{"site": "east", "seconds": 5000.0, "done_at": at(10, 9)},
                                               {"site": "east", "seconds": 100.0, "done_at": at(17, 1)}])
    second = world.look(at(17, 12))
    assert second.excluded.get("before_start") == 1
    assert second.detail["excluded_new"] == {"before_start": 1}
    assert second.detail["before_after"]["baseline_gap"]["estimate"] == pytest.approx(gap, rel=1e-12)
    assert second.new_events == sum(START <= r["done_at"] <= at(17, 12) and r["done_at"] > at(17, 0)
                                    for r in rows) + 1


def test_a_start_without_a_baseline_counts_events_from_the_start_only(tmp_path):
    rows = site_rows(np.random.default_rng(7), 0, 18)
    world = LiveWorld(tmp_path, rows, start="2026-03-15 07:00", timezone="Europe/Lisbon", planned_per_group=600)
    record = world.look(at(18, 0))
    # 07:00 in Lisbon in March is 07:00 UTC.
    assert record.n1 == sum(r["site"] == "east" and at(15, 7) <= r["done_at"] <= at(18, 0) for r in rows)
    assert "before_after" not in record.detail


@pytest.mark.parametrize("keys, message", [
    (dict(baseline="14d"), "'baseline' needs a start"),
    (dict(start="2026-03-15T06:00+00:00", baseline="14d", baseline_from="2026-03-01"), "not both"),
    (dict(start="yesterday"), "'start' must be an ISO-8601 date-time"),
    (dict(start="2026-03-15T06:00+00:00", baseline_from="2026-03-10", baseline_to="2026-03-16"),
     "'baseline_to' must not be after the start"),
    (dict(start="2026-03-15T06:00+00:00", baseline="14d", method="paired", pair_by="day"),
     "cannot be a before/after comparison"),
    (dict(start="2026-03-15T06:00+00:00", baseline="14d", cluster_by="week"), "clustered by calendar day"),
    (dict(day_sd=2.0), "plans a before/after comparison"),
])
def test_bad_before_after_keys_name_the_key(tmp_path, keys, message):
    with pytest.raises(ConfigError, match=message):
        LiveWorld(tmp_path, (), **keys)


def test_a_baseline_too_short_for_the_plan_is_said_by_check_and_the_look(tmp_path, capsys):
    from monitor import cli
    from monitor.design import Design
    from monitor.errors import InvalidArgumentError

    world = LiveWorld(tmp_path, (), start="2026-03-15T06:00:00+00:00", baseline="1d", planned_per_group=None,
                      difference=-1.0, sd=10.0, power=0.8, day_sd=5.0, events_per_day=40)
    with pytest.raises(InvalidArgumentError, match="baseline_days 1 is too short"):
        Design.from_config(world.comparison)
    assert cli.main(["check", "--config", str(world.config.path)]) == 1
    assert "baseline_days 1 is too short" in capsys.readouterr().out


def test_planned_from_the_baseline_and_the_spread(tmp_path):
    world = LiveWorld(tmp_path, (), start="2026-03-15T06:00+00:00", baseline="14d", planned_per_group=None,
                      difference=-6.0, sd=8.0, power=0.8, day_sd=1.5, events_per_day=40, looks=3)
    from monitor.design import Design

    design = Design.from_config(world.comparison)
    plan = design.plan.to_stored()
    assert plan["inputs"]["events_per_day"] == 40 and plan["figures"]["baseline_days"] == 14
    assert plan["planned_per_group"] == math.ceil(plan["figures"]["after_days_exact"] * 40 - 1e-9)
    stored = design.to_stored()
    assert stored["before_after"]["baseline_days"] == 14.0
    assert stored["start"] == "2026-03-15T06:00:00+00:00"
    assert Design.from_stored(stored) == design


def test_status_and_history_say_how_the_sites_differed_before(tmp_path):
    from monitor.commands import history as history_command
    from monitor.commands import status as status_command
    from monitor.store import readback

    rows = site_rows(np.random.default_rng(8), 0, 19)
    world = LiveWorld(tmp_path, rows, **BEFORE_AFTER)
    world.look(at(14, 12))                       # before the baseline ends: no gap measured yet
    record = world.look(at(18, 0))
    gap = record.detail["before_after"]["baseline_gap"]
    status = readback.comparison_status(world.engine, now=at(18, 0))[0]
    assert status["start"] == "2026-03-15T06:00:00+00:00"
    assert status["baseline"].startswith(f"before the change, east was {gap['estimate']:.3g} seconds slower than west")
    assert status["before_after"]["baseline_gap"]["estimate"] == gap["estimate"]
    text = "\n".join(status_command.table_lines([status], at(18, 0)))
    assert "before the change, east was" in text and "nan" not in text and "None" not in text
    history = readback.look_history(world.engine, "handle-time")
    assert "not measured yet" in history[0]["baseline"]
    assert history[-1]["baseline"] == status["baseline"]
    assert history_command.table_lines(history)[-1].startswith("before the change, east was") or any(
        line.startswith("before the change, east was") for line in history_command.table_lines(history))


@pytest.mark.parametrize("gap, warned", [(10.0, True), (0.0, False)], ids=["old-gap", "no-gap"])
def test_check_warns_when_the_groups_differed_before_a_start_without_baseline(tmp_path, capsys, gap, warned):
    from monitor import cli

    rows = site_rows(np.random.default_rng(9), 0, 18, gap=gap)
    world = LiveWorld(tmp_path, rows, start="2026-03-15T06:00:00+00:00", planned_per_group=600)
    code = cli.main(["check", "--config", str(world.config.path), "--before-start"])
    out = capsys.readouterr().out
    assert code == 0
    line = next(l for l in out.splitlines() if "days before the start" in l)
    assert line.startswith("comparison 'handle-time': " + ("warning: before the change, east was" if warned
                                                           else "before the change"))
    assert ('Add baseline = "14d"' in line) == warned
    # Without the option nothing is measured.
    cli.main(["check", "--config", str(world.config.path)])
    assert "days before the start" not in capsys.readouterr().out


def test_verify_replays_a_before_after_comparison_from_raw_rows(tmp_path):
    from monitor.verify import verify_looks

    rng = np.random.default_rng(10)
    rows = site_rows(rng, 0, 19, change=-5.0)
    world = LiveWorld(tmp_path, rows, **BEFORE_AFTER)
    world.look(at(14, 12))
    world.look(at(16, 0))
    insert_events(world.source_url, "events", [{"site": "west", "seconds": 90.0, "done_at": at(12, 9)},
                                               {"site": "west", "seconds": None, "done_at": at(16, 9)}])
    world.look(at(17, 0))
    world.look(at(19, 0))
    results = verify_looks(world.config, "handle-time", world.engine)
    assert [r["ok"] for r in results] == [True] * 4, results


def test_the_printed_review_says_the_baseline_gap_and_shows_its_figures(tmp_path):
    from monitor.report import build_review, render_html

    rng = np.random.default_rng(4)
    rows = site_rows(rng, 0, 40, change=-12.0)
    world = LiveWorld(tmp_path, rows, **BEFORE_AFTER)
    record = as_of = None
    for day in range(16, 40):
        as_of = at(1, 0) + timedelta(days=day - 1)
        record = world.look(as_of)
        if record is None or record.decision == "difference_found":
            break
    review = build_review(world.engine, "handle-time", now=as_of)
    page = render_html(review)
    text = re.sub(r"\s+", " ", re.sub(r"<[^>]+>", " ", page))
    figures = record.detail["before_after"]
    gap = figures["baseline_gap"]
    # The sentence status and history print, and the baseline's own figures beside the change.
    assert review.baseline and review.baseline.startswith("before the change, east was")
    assert review.baseline[:1].upper() + review.baseline[1:] in text
    assert "Did the change that went live at 2026-03-15 06:00 UTC" in text
    assert "before the change (baseline)" in text and "since the start" in text
    for shown in (gap, figures["after_gap"]):
        width = shown["ci"][1] - shown["ci"][0]
        assert figure(shown["estimate"], width) in text
    assert f"{gap['n'][0]:,} / {gap['n'][1]:,}" in text or f"{gap['n'][0]} / {gap['n'][1]}" in text
    assert "difference in differences" in text and "Bell–McCaffrey" in text
    assert "Adjusted estimate" in text
    assert not re.search(r"\b(None|nan|NaN|inf|-inf|Infinity)\b|<object|\{'", text)


def test_replan_refuses_a_before_after_comparison_in_one_line(tmp_path, capsys):
    from monitor.cli import main

    rows = site_rows(np.random.default_rng(7), 0, 22)
    world = LiveWorld(tmp_path, rows, **BEFORE_AFTER)
    for day in (17, 20, 21):
        world.look(at(day, 0))
    looks_before = len(world.looks())
    code = main(["replan", "handle-time", "--planned-per-group", "900", "--reason", "busier than planned",
                 "--config", str(world.config.path)])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1, err
    assert "before/after comparison cannot be replanned" in err[0] and "restart" in err[0]
    assert len(world.looks()) == looks_before


def test_an_information_fraction_is_refused_with_a_baseline(tmp_path):
    with pytest.raises(ConfigError, match="'information' is not used with a baseline"):
        LiveWorld(tmp_path, [], start="2026-03-15T06:00:00+00:00", baseline="14d", difference=-5.0, sd=20.0,
                  power=0.8, events_per_day=80, fraction="information")


def test_baseline_rows_arriving_before_it_is_read_are_used_not_counted_as_before_start(tmp_path):
    """A first look before the start sets an arrival watermark (from a NULL time alone); rows
    of the baseline arriving after it are the baseline's, read when it ends, never before_start."""
    rng = np.random.default_rng(8)
    rows = [r for r in site_rows(rng, 0, 22) if r["done_at"] < at(14, 22)]
    world = LiveWorld(tmp_path, rows + [{"site": "east", "seconds": 90.0, "done_at": None}], **BEFORE_AFTER)
    first = world.look(at(14, 23))   # before the start: the baseline is not read yet
    assert first.n1 == 0 and first.excluded == {"null_time": 1}
    # The last hours of the baseline and the first days after the start arrive afterwards.
    later = [r for r in site_rows(np.random.default_rng(8), 0, 22) if r["done_at"] >= at(14, 22)]
    insert_events(world.source_url, "events", later)
    second = world.look(at(20, 0))
    assert "before_start" not in second.excluded
    everything = rows + later
    want = did_from_rows([r for r in everything if r["done_at"] <= at(20, 0)], START, START - timedelta(days=14))
    gap = second.detail["before_after"]["baseline_gap"]
    assert gap["estimate"] == pytest.approx(want.baseline_gap.estimate, rel=1e-9)
    assert sum(gap["n"]) == sum(START - timedelta(days=14) <= r["done_at"] < START for r in everything)
    assert all(r["ok"] for r in verify_looks(world.config, "handle-time", world.engine))


def test_a_ratio_with_a_baseline_is_refused(tmp_path):
    with pytest.raises(ConfigError, match="metric 'ratio' cannot be a before/after comparison"):
        LiveWorld(tmp_path, [], start="2026-03-15T06:00:00+00:00", baseline="14d", planned_per_group=600,
                  metric="ratio", method="welch", numerator_column="seconds", denominator_column="seconds")
