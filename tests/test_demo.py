"""The demo: scenario generator, live feed, demo folder and ``gapwatch demo`` end to end."""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys
from dataclasses import replace
from datetime import timedelta
from pathlib import Path

import numpy as np
import pytest
import sqlalchemy as sa
from scipy import stats

from demo_db import scenario
from demo_db.feed import LiveFeed, SimulatedClock, create_databases, database_url, fed_until
from demo_db.folder import CONFIG_NAME, STORE_NAME, comparisons, config_text, prepare_folder
from demo_db.scenario import EPOCH, LIVE_START, TABLES, day_events, events_between
from monitor.design import Design

ROOT = Path(__file__).resolve().parents[1]


def _values(table, days, group=None, seed=scenario.DEFAULT_SEED):
    rows = [e for d in days for e in day_events(table, d, seed=seed)]
    return [e for e in rows if group is None or e.group == group]


def _good_number(value):
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


# ------------------------------------------------------------ generator

@pytest.mark.parametrize("table", [t.name for t in TABLES])
def test_same_seed_same_rows_other_seed_other_rows(table):
    first = day_events(table, 3, seed=11)
    assert first == day_events(table, 3, seed=11)
    assert first != day_events(table, 3, seed=12)
    # A day does not depend on which other days were built before it.
    day_events(table, 1, seed=11)
    assert first == day_events(table, 3, seed=11)


def test_windows_partition_the_arrivals():
    """Feeding in many small windows inserts exactly the rows one big window would."""
    start, end = EPOCH + timedelta(hours=30), EPOCH + timedelta(days=3, hours=5)
    whole = events_between("contacts", start, end)
    pieces, cache, t = [], {}, start
    step = timedelta(minutes=47)
    while t < end:
        nxt = min(end, t + step)
        pieces.extend(events_between("contacts", t, nxt, cache=cache))
        t = nxt
    assert pieces == whole
    assert all(start < e.arrival <= end for e in whole)
    assert [e.arrival for e in whole] == sorted(e.arrival for e in whole)


def test_pick_durations_are_right_skewed_lognormal():
    # Over the two weeks of history, so the day-to-day spread averages out.
    seconds = np.array([e.value for e in _values("pick_tasks", range(-14, 2), "saltmarsh")
                        if _good_number(e.value) and 1 <= e.value <= 3600])
    assert len(seconds) > 2000
    sigma = scenario.PICK_LOG_SD
    # Lognormal skewness (e^σ² + 2)·sqrt(e^σ² − 1): about 1.75 for σ = 0.5.
    expected_skew = (math.exp(sigma**2) + 2) * math.sqrt(math.exp(sigma**2) - 1)
    assert stats.skew(seconds) > 1.0
    assert abs(stats.skew(seconds) - expected_skew) < 0.6
    assert np.median(seconds) < seconds.mean()
    logs = np.log(seconds)
    spread = math.sqrt(sigma**2 + scenario.PICK_SITE_DAY_SD**2 + scenario.PICK_SHARED_DAY_SD**2)
    assert abs(logs.std(ddof=1) - spread) < 0.02
    assert abs(np.exp(np.median(logs)) - scenario.PICK_MEDIAN_SECONDS) < 3
    # Log durations look normal: the KS distance to the fitted normal is small.
    assert stats.kstest(logs, "norm", args=(logs.mean(), logs.std(ddof=1))).statistic < 0.03


def test_pick_history_goes_back_two_weeks():
    assert scenario.first_day("pick_tasks") == -scenario.PICK_HISTORY_DAYS
    assert scenario.first_day("contacts") == 0
    first = day_events("pick_tasks", -scenario.PICK_HISTORY_DAYS)
    assert first and min(e.time for e in first if e.time is not None) >= EPOCH - timedelta(days=14)
    with pytest.raises(ValueError, match="day must be >= -14"):
        day_events("pick_tasks", -15)


def test_pick_path_difference_starts_on_day_two():
    switch = EPOCH + timedelta(days=scenario.PICK_PATH_DAY, hours=scenario.PICK_PATH_HOUR)

    def mean(site, days, after=None):
        vals = [e.value for e in _values("pick_tasks", days, site)
                if _good_number(e.value) and 1 <= e.value <= 3600 and e.time is not None
                and (after is None or (e.time >= switch) == after)]
        return float(np.mean(vals))

    # Hollin Cross was slower long before the change (the gap the baseline measures).
    before = mean("hollin", range(-14, 2)) / mean("saltmarsh", range(-14, 2))
    after = mean("hollin", range(2, 9), after=True) / mean("saltmarsh", range(2, 9), after=True)
    assert abs(before - scenario.PICK_HOLLIN_SLOWER) < 0.03
    assert abs(after - scenario.PICK_HOLLIN_SLOWER * scenario.PICK_PATH_SPEEDUP) < 0.04


def test_bad_rows_of_every_kind_are_present():
    days = [0, 1, 2, 3]
    kinds = {}
    for spec in TABLES:
        rows = _values(spec.name, days)
        config = next(c for c in comparisons() if c["table"] == spec.name)
        low, high = config.get("valid_range", [-math.inf, math.inf])
        counted = {
            "null_value": sum(e.value is None for e in rows),
            "non_numeric": sum(isinstance(e.value, str) for e in rows),
            "unknown_group": sum(e.group not in spec.groups for e in rows),
            "null_time": sum(e.time is None for e in rows),
            "out_of_range": sum(_good_number(e.value) and not low <= e.value <= high for e in rows),
            "not_binary": sum(_good_number(e.value) and e.value not in (0, 1) for e in rows)
            if config["metric"] == "proportion" else 0,
        }
        assert sum(counted.values()) > 0, spec.name
        assert sum(counted.values()) < 0.05 * len(rows), spec.name  # a small share, not a flood
        for kind, n in counted.items():
            kinds[kind] = kinds.get(kind, 0) + n
    assert all(n > 0 for n in kinds.values()), kinds


@pytest.mark.parametrize("table", [t.name for t in TABLES])
def test_late_arrivals_are_present(table):
    rows = [e for e in _values(table, [0, 1, 2, 3]) if e.time is not None]
    delays = np.array([(e.arrival - e.time).total_seconds() for e in rows])
    assert (delays >= 0).all()
    # Hours late: behind any look's cutoff (looks come every few simulated hours at most).
    assert (delays > 3600).sum() >= 2
    assert (delays > 3600).mean() < 0.05
    assert delays.max() <= scenario.MAX_ARRIVAL_DELAY.total_seconds()


def test_null_desks_do_not_differ_and_line_five_packs_more():
    days = range(1, 13)
    rates = {}
    for desk in ("heron", "wren"):
        vals = [e.value for e in _values("contacts", days, desk) if e.value in (0, 1) and e.group == desk]
        rates[desk] = np.mean(vals)
    assert abs(rates["heron"] - 0.74) < 0.02 and abs(rates["wren"] - 0.74) < 0.02
    cases = {line: np.mean([e.value for e in _values("line_output", days, line)
                            if _good_number(e.value) and 0 <= e.value <= 900])
             for line in ("line-2", "line-5")}
    assert 2 < cases["line-5"] - cases["line-2"] < 10


# ------------------------------------------------------------ databases and feed

def test_databases_have_integer_keys_time_indexes_and_the_backlog(tmp_path):
    counts = create_databases(tmp_path)
    assert set(counts) == {t.name for t in TABLES}
    assert all(n > 0 for n in counts.values())
    assert fed_until(tmp_path) == LIVE_START
    for spec in TABLES:
        engine = sa.create_engine(database_url(tmp_path, spec.database))
        try:
            inspector = sa.inspect(engine)
            assert inspector.get_pk_constraint(spec.name)["constrained_columns"] == ["id"]
            indexed = {tuple(ix["column_names"]) for ix in inspector.get_indexes(spec.name)}
            assert (spec.time_column,) in indexed
            with engine.connect() as conn:
                table = sa.Table(spec.name, sa.MetaData(), autoload_with=conn)
                n = conn.execute(sa.select(sa.func.count()).select_from(table)).scalar()
                latest = conn.execute(sa.select(sa.func.max(table.c[spec.time_column]))).scalar()
        finally:
            engine.dispose()
        assert n == counts[spec.name]
        assert latest <= scenario.format_time(LIVE_START)


def test_every_comparison_meets_bad_rows_in_the_backlog(tmp_path):
    """What the monitor itself counts as excluded on the first look, per comparison."""
    from monitor.config import load_config
    from monitor.source.reader import Source, SourceSpec

    create_databases(tmp_path)
    (tmp_path / CONFIG_NAME).write_text(config_text())
    config = load_config(tmp_path / CONFIG_NAME)
    reasons = set()
    for comparison in config.comparisons:
        source = Source(config.sources[comparison.source].url)
        try:
            spec = SourceSpec.from_design(Design.from_config(comparison), shift=0.0,
                                           arrival_column=comparison.arrival_column)
            assert source.check(spec) == [], comparison.name
            batch = source.read_cells(spec, None, LIVE_START)
            if comparison.before_after:
                # Its backlog is its baseline, read once at the first look after it ends.
                window = comparison.window
                baseline = source.read_cells(replace(spec, start=window["baseline_from"], end=window["baseline_to"]),
                                             None, window["baseline_to"])
                batch = replace(baseline, excluded={**baseline.excluded, **batch.excluded})
        finally:
            source.dispose()
        assert batch.new_events > 0, comparison.name
        assert sum(batch.excluded.values()) > 0, (comparison.name, batch.excluded)
        reasons |= {reason for reason, n in batch.excluded.items() if n}
    assert {"null_value", "non_numeric", "unknown_group", "out_of_range", "not_binary", "null_time"} <= reasons


def test_feed_appends_in_simulated_time_and_late_rows_reach_the_source(tmp_path):
    from monitor.config import load_config
    from monitor.source.reader import Source, SourceSpec

    create_databases(tmp_path)
    (tmp_path / CONFIG_NAME).write_text(config_text())
    config = load_config(tmp_path / CONFIG_NAME)
    fake = {"t": 0.0}
    clock = SimulatedClock(LIVE_START, 3600, monotonic=lambda: fake["t"])
    assert clock() == LIVE_START
    fake["t"] = 2.5
    assert clock() == LIVE_START + timedelta(seconds=9000)

    comparison = next(c for c in config.comparisons if c.name == "pick-seconds")
    source = Source(config.sources[comparison.source].url)
    feed = LiveFeed(tmp_path, clock)
    try:
        # The whole history, not only the events from the comparison's start.
        spec = replace(SourceSpec.from_design(Design.from_config(comparison), shift=90.0,
                                              arrival_column=comparison.arrival_column), start=None)
        first = source.read_cells(spec, None, LIVE_START)
        assert sum(first.excluded.values()) > 0
        assert {"null_value", "non_numeric", "unknown_group", "out_of_range"} <= set(first.excluded)
        watermark = first.watermark
        late = 0
        # Twelve simulated hours, read every two: late rows must turn up.
        for step in range(1, 7):
            fake["t"] = 7200 * step / 3600
            inserted = feed.advance()
            assert inserted > 0
            batch = source.read_cells(spec, watermark, clock())
            late += batch.late_events
            watermark = batch.watermark
        assert late > 0
        assert fed_until(tmp_path) == clock()
    finally:
        feed.close()
        source.dispose()


def test_demo_config_covers_every_kind_of_comparison(tmp_path):
    from monitor.config import load_config

    (tmp_path / CONFIG_NAME).write_text(config_text())
    config = load_config(tmp_path / CONFIG_NAME)
    by_name = {c.name: c for c in config.comparisons}
    assert len(by_name) >= 5
    assert by_name["pick-seconds"].method == "welch" and by_name["pick-seconds"].alternative == "two-sided"
    assert by_name["desk-first-contact"].metric == "proportion"
    assert by_name["line-daily-output"].pair_by == "day"
    assert by_name["fill-giveaway"].method == "z" and by_name["fill-giveaway"].alternative != "two-sided"
    assert tuple(by_name["fill-giveaway"].sigmas) == (2.4, 2.4)
    assert by_name["qc-defect-rate"].metric == "ratio" and by_name["qc-defect-rate"].denominator_column == "units"
    assert by_name["delivery-lateness"].cluster_by == "day" and by_name["delivery-lateness"].min_clusters >= 2
    # Paths are relative in the file and resolved against its folder.
    assert "sqlite:///gapwatch-store.sqlite" in config_text()
    assert str(tmp_path.resolve()) in config.store_url
    assert all(str(tmp_path.resolve()) in s.url for s in config.sources.values())


def test_prepare_refuses_a_folder_of_other_files(tmp_path):
    (tmp_path / "notes.txt").write_text("mine")
    with pytest.raises(FileExistsError):
        prepare_folder(tmp_path)
    assert (tmp_path / "notes.txt").read_text() == "mine"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["notes.txt"]


def test_rehearsal_tells_the_story_with_the_default_seed(tmp_path):
    """The real look code on the demo data, in simulated time only (no waiting on real time)."""
    from demo_db.rehearsal import rehearse

    result = rehearse(tmp_path / "demo", hours=84, step_hours=2)
    # Before/after: the baseline gap (Hollin Cross slower) is not the change; the change is found
    # once four days since the start are in (min_clusters), from Saturday 00:00 (+66 h).
    pick = result.stop("pick-seconds")
    assert pick is not None and pick[1] == "difference_found" and 66 <= pick[0] <= 84, pick
    last = result.looks["pick-seconds"][-1][2]
    figures = last.detail["before_after"]
    assert figures["baseline_gap"]["estimate"] > 4 and figures["baseline_gap"]["ci"][0] > 0
    assert last.estimate < figures["after_gap"]["estimate"] < 0
    assert -20 < last.detail["after_stop"]["median_unbiased_estimate"] < -8
    assert "awaiting_clusters" in result.decisions("pick-seconds")
    assert "difference_found" not in result.decisions("desk-first-contact")
    fill = result.stop("fill-giveaway")
    assert fill is not None and fill[1] == "plan_complete", fill
    assert "difference_found" not in result.decisions("fill-giveaway")
    line = result.looks["line-daily-output"]
    assert all(record.pairs is not None for _, _, record in line)
    # Delivery drops are judged on days: none until four days are in.
    delivery = result.looks["delivery-lateness"]
    assert delivery[0][1] == "awaiting_clusters"
    assert {d for _, d, r in delivery if (r.clusters or 0) >= 4} <= {"collecting", "difference_found"}
    assert any(d == "collecting" for _, d, _ in delivery)
    # Defects per unit packed: a ratio of sums over batches, aborted batches excluded and counted.
    qc = result.looks["qc-defect-rate"]
    last = qc[-1][2]
    assert last.detail["ratio"]["ratio1"] < last.detail["ratio"]["ratio2"] and last.excluded["bad_denominator"] > 0
    assert last.estimate == pytest.approx(last.detail["ratio"]["ratio1"] - last.detail["ratio"]["ratio2"])
    # Bench 2 opens on Thursday 09:00: a data problem before, a comparison after.
    opens = EPOCH + timedelta(days=scenario.BENCH_TWO_OPENS_DAY, hours=scenario.BENCH_TWO_OPENS_HOUR)
    returns = result.looks["returns-grading"]
    assert {d for at, d, _ in returns if at < opens} == {"data_problem"}
    assert returns[-1][1] == "collecting"
    # Late rows are picked up and counted, bad rows excluded and counted.
    late = sum(r.late_events for looks in result.looks.values() for _, _, r in looks)
    excluded = sum(sum(r.excluded.values()) for looks in result.looks.values() for _, _, r in looks)
    assert late > 0 and excluded > 0


# ------------------------------------------------------------ gapwatch demo, end to end

def _gapwatch(args, *, cwd, env=None, timeout=240):
    environ = dict(os.environ)
    environ["PYTHONPATH"] = str(ROOT) + (os.pathsep + environ["PYTHONPATH"] if environ.get("PYTHONPATH") else "")
    environ.update(env or {})
    return subprocess.run([sys.executable, "-m", "monitor", *args], cwd=cwd, env=environ,
                          capture_output=True, text=True, timeout=timeout)


@pytest.mark.slow
def test_gapwatch_demo_runs_end_to_end(tmp_path):
    from monitor.store.readback import comparison_status, look_history
    from monitor.store.engine import make_engine

    folder = tmp_path / "demo"
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    done = _gapwatch(["demo", "--dir", str(folder), "--no-dashboard", "--duration", "80", "--speed", "3600"],
                     cwd=elsewhere)
    assert done.returncode == 0, done.stdout[-3000:] + done.stderr[-3000:]
    assert "pick-seconds" in done.stdout
    assert sorted(p.name for p in elsewhere.iterdir()) == []  # nothing written outside --dir
    for name in (CONFIG_NAME, STORE_NAME, "warehouse.sqlite", "service.sqlite", "plant.sqlite", ".gitignore"):
        assert (folder / name).exists(), name

    engine = make_engine(f"sqlite:///{folder / STORE_NAME}")
    try:
        status = {row["name"]: row for row in comparison_status(engine)}
        assert set(status) == {c["name"] for c in comparisons()}
        for name, row in status.items():
            assert row["looks"] >= 2, (name, row)
        assert status["pick-seconds"]["state"] == "difference_found", status["pick-seconds"]
        assert status["pick-seconds"]["estimate"] < 0  # Hollin Cross got faster
        assert status["pick-seconds"]["baseline"].startswith("before the change, Hollin Cross was")
        assert status["desk-first-contact"]["state"] != "difference_found"
        history = {name: look_history(engine, name) for name in status}
    finally:
        engine.dispose()
    # Every look's as_of is simulated time: after the live start, increasing.
    for name, looks in history.items():
        times = [look["as_of"] for look in looks]
        assert times == sorted(times), name
        assert times[0] >= LIVE_START.isoformat(), name
    # Bad rows and late events were counted.
    excluded = sum(sum((look.get("excluded") or {}).values()) for looks in history.values() for look in looks)
    late = sum(look.get("late_events") or 0 for looks in history.values() for look in looks)
    assert excluded > 0 and late > 0
    # The returns bench that opens on Thursday starts as a data problem.
    assert history["returns-grading"][0]["decision"] == "data_problem"
    assert history["delivery-lateness"][0]["decision"] == "awaiting_clusters"

    shown = _gapwatch(["status", "--format", "json"], cwd=elsewhere,
                      env={"GAPWATCH_CONFIG": str(folder / CONFIG_NAME)}, timeout=60)
    assert shown.returncode == 0, shown.stderr
    rows = json.loads(shown.stdout)
    rows = rows.get("comparisons", rows) if isinstance(rows, dict) else rows
    assert {row["name"] for row in rows} == set(status)
    # Every recorded look replays from the raw rows (late rows and bad rows included).
    for name in ("pick-seconds", "delivery-lateness"):
        replay = _gapwatch(["verify", "--config", str(folder / CONFIG_NAME), name], cwd=elsewhere, timeout=120)
        assert replay.returncode == 0, replay.stdout + replay.stderr
    assert sorted(p.name for p in elsewhere.iterdir()) == []


@pytest.mark.parametrize("args, named", [
    (["--speed", "0"], "--speed"),
    (["--speed", "-5"], "--speed"),
    (["--duration", "0"], "--duration"),
    (["--port", "70000"], "--port"),
], ids=["speed-zero", "speed-negative", "duration-zero", "port-too-big"])
def test_bad_options_exit_2_naming_the_option(args, named, tmp_path, capsys):
    from monitor.cli import main

    folder = tmp_path / "demo"
    assert main(["demo", "--dir", str(folder), "--no-dashboard", *args]) == 2
    err = capsys.readouterr().err
    assert named in err and args[1] in err
    assert not folder.exists()


def test_a_folder_of_other_files_is_refused_by_the_command(tmp_path, capsys):
    from monitor.cli import main

    (tmp_path / "report.csv").write_text("a,b\n")
    assert main(["demo", "--dir", str(tmp_path), "--no-dashboard", "--duration", "1"]) == 2
    assert "--dir" in capsys.readouterr().err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report.csv"]


def _looks(store_path):
    from monitor.store.readback import comparison_status
    from monitor.store.engine import make_engine

    engine = make_engine(f"sqlite:///{store_path}")
    try:
        return {row["name"]: (row["looks"] or 0, row["last_look_at"]) for row in comparison_status(engine)}
    except Exception:  # noqa: BLE001 - the store may not be migrated yet
        return {}
    finally:
        engine.dispose()


@pytest.mark.slow
def test_ctrl_c_stops_cleanly_and_a_second_run_resumes(tmp_path):
    import signal
    import time

    folder = tmp_path / "demo"
    environ = dict(os.environ)
    environ["PYTHONPATH"] = str(ROOT) + (os.pathsep + environ["PYTHONPATH"] if environ.get("PYTHONPATH") else "")
    process = subprocess.Popen([sys.executable, "-m", "monitor", "demo", "--dir", str(folder), "--no-dashboard"],
                               cwd=tmp_path, env=environ, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            looks = _looks(folder / STORE_NAME) if (folder / STORE_NAME).exists() else {}
            if looks and all(n >= 1 for n, _ in looks.values()) and len(looks) == len(comparisons()):
                break
            time.sleep(0.5)
        else:
            pytest.fail("no looks within 60 s")
        process.send_signal(signal.SIGINT)
        out, err = process.communicate(timeout=60)
    finally:
        if process.poll() is None:
            process.kill()
            process.communicate()
    assert process.returncode == 0, err[-2000:]
    assert "where things stand" in out
    before = _looks(folder / STORE_NAME)

    again = _gapwatch(["demo", "--dir", str(folder), "--no-dashboard", "--duration", "8"], cwd=tmp_path)
    assert again.returncode == 0, again.stderr[-2000:]
    assert "resumed" in again.stdout
    after = _looks(folder / STORE_NAME)
    assert sum(n for n, _ in after.values()) > sum(n for n, _ in before.values())
    for name, (n, last) in after.items():
        assert n >= before[name][0] and last >= before[name][1], name
    assert sorted(p.name for p in tmp_path.iterdir()) == ["demo"]

    fresh = _gapwatch(["demo", "--dir", str(folder), "--no-dashboard", "--duration", "3", "--reset"], cwd=tmp_path)
    assert fresh.returncode == 0, fresh.stderr[-2000:]
    assert "created" in fresh.stdout
    assert sum(n for n, _ in _looks(folder / STORE_NAME).values()) < sum(n for n, _ in after.values())
