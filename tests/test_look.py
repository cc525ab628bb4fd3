"""The look, end to end, on SQLite: figures against scipy/statsmodels from raw rows, and the promises."""

from __future__ import annotations

import threading
from datetime import timedelta

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa
from scipy import stats

from live_helpers import (CHANNELS, event_rows, LiveWorld as World, at, comparison_toml, config_toml,
                          create_events_table, file_digest, insert_events, migrated_store, write_config)
from monitor.store import looks as store_looks
from monitor.alerts import record_source_unreachable
from monitor.stats.boundaries import SequentialBoundary
from monitor.config import load_config
from monitor.design import Design
from monitor.errors import (DesignChangedError, LookAlreadyRecordedError, SourceUnavailableError,
                            StoreBehindError)
from monitor.calendar import bucket_end, bucket_key
from monitor.look import restart_comparison, take_look
from monitor.store.models import Alert, Cell, Comparison, Delivery, Look
from monitor.source.reader import Source
from monitor.stats.sequential_t import SequentialTBoundary

T0 = at(2, 6)  # Monday 2 March 2026, 06:00 UTC


def _rows(rng, count, start=T0, **kw):
    return event_rows(rng, count, start, **kw)


def test_multi_look_welch_matches_scipy_at_every_cutoff(tmp_path):
    rng = np.random.default_rng(20260302)
    w = World(tmp_path, _rows(rng, 900, east=101.5, west=100.0), lateness="5m", planned_per_group=600)
    raw = w.raw()
    # Welch's t: exact sequential t boundaries at the looks' df (stats.sequential_t).
    fresh = SequentialTBoundary(0.05, "obrien-fleming", "two-sided")
    records = []
    for hours in (4, 9, 15, 22, 30, 45):
        record = w.look(T0 + timedelta(hours=hours))
        if record is None:
            break
        records.append(record)
        assert record.cutoff == T0 + timedelta(hours=hours, minutes=-5)
        upto = raw[raw.done_at <= pd.Timestamp(record.cutoff)]
        east = upto[upto.site == "east"].seconds.to_numpy()
        west = upto[upto.site == "west"].seconds.to_numpy()
        ref = stats.ttest_ind(east, west, equal_var=False)
        assert (record.n1, record.n2) == (len(east), len(west))
        assert record.estimate == pytest.approx(east.mean() - west.mean(), rel=1e-9)
        assert record.statistic == pytest.approx(ref.statistic, rel=1e-9)
        assert record.p_value == pytest.approx(ref.pvalue, rel=1e-7)
        assert record.df == pytest.approx(ref.df, rel=1e-9)
        assert record.fraction == pytest.approx(min(len(east), len(west)) / 600)
        # The resumed boundary equals one computed afresh at the same fractions.
        expected = fresh.add_look(record.fraction, record.df)
        assert record.boundary_z == pytest.approx(expected.z, rel=1e-9)
        critical = stats.t.isf(expected.nominal_p, ref.df)
        se = (east.mean() - west.mean()) / ref.statistic
        if np.isfinite(critical):
            assert record.ci_low == pytest.approx(record.estimate - critical * se, rel=1e-7)
            assert record.ci_high == pytest.approx(record.estimate + critical * se, rel=1e-7)
        else:  # nothing spendable yet at this tiny fraction: the interval is unbounded
            assert (record.ci_low, record.ci_high) == (None, None)
        crossed = min(stats.t.sf(ref.statistic, ref.df), stats.t.cdf(ref.statistic, ref.df)) <= expected.nominal_p
        assert (record.decision == "difference_found") == crossed
    assert [r.look for r in records] == list(range(1, len(records) + 1))
    assert records[-1].decision in ("difference_found", "plan_complete")
    # After the stop it looks no more, and the stop look carries the adjusted inference.
    assert w.look(T0 + timedelta(hours=60)) is None
    last = w.looks()[-1]
    assert "p_value" in last.detail["after_stop"] and "median_unbiased_estimate" in last.detail["after_stop"]
    with w.engine.connect() as conn:
        comp = conn.execute(sa.select(Comparison)).one()
    assert comp.state == records[-1].decision and comp.looks_taken == len(records)
    assert comp.stopped_at == records[-1].as_of


@pytest.mark.parametrize("method", ["pooled", "z", "proportions"])
def test_other_methods_match_references(tmp_path, method):
    from statsmodels.stats.proportion import proportions_ztest

    rng = np.random.default_rng(7)
    rows = _rows(rng, 400)
    keys = dict(method=method)
    if method == "proportions":
        for r in rows:
            r["seconds"] = float(rng.random() < (0.55 if r["site"] == "east" else 0.45))
        keys["metric"] = "proportion"
    if method == "z":
        keys["sigmas"] = [10.0, 10.0]
    w = World(tmp_path, rows, **keys)
    record = w.look(T0 + timedelta(hours=12))
    raw = w.raw()
    upto = raw[raw.done_at <= pd.Timestamp(record.cutoff)]
    east = upto[upto.site == "east"].seconds.to_numpy()
    west = upto[upto.site == "west"].seconds.to_numpy()
    if method == "pooled":
        ref = stats.ttest_ind(east, west, equal_var=True)
        statistic, p = ref.statistic, ref.pvalue
        assert record.df == len(east) + len(west) - 2
    elif method == "z":
        statistic = (east.mean() - west.mean()) / np.sqrt(100 / len(east) + 100 / len(west))
        p = 2 * stats.norm.sf(abs(statistic))
    else:
        statistic, p = proportions_ztest([east.sum(), west.sum()], [len(east), len(west)])
    assert record.statistic == pytest.approx(statistic, rel=1e-9)
    assert record.p_value == pytest.approx(p, rel=1e-7)


def test_paired_by_day_uses_closed_days_only(tmp_path):
    rng = np.random.default_rng(11)
    rows = _rows(rng, 4 * 24 * 20, step_minutes=3, east=101.0, sd=5.0)  # 4 days
    w = World(tmp_path, rows, method="paired", pair_by="day", planned_per_group=30)
    as_of = at(5, 12)  # days 2, 3 and 4 March have closed; 5 March is open
    record = w.look(as_of)
    raw = w.raw()
    raw = raw[raw.done_at <= pd.Timestamp(as_of)]
    raw["day"] = raw.done_at.dt.date
    means = raw.groupby(["day", "site"]).seconds.mean().unstack()
    closed = means[[pd.Timestamp(d, tz="UTC") + pd.Timedelta(days=1) <= pd.Timestamp(as_of) for d in means.index]]
    ref = stats.ttest_rel(closed["east"], closed["west"])
    assert record.pairs == len(closed) == 3
    assert record.statistic == pytest.approx(ref.statistic, rel=1e-9)
    assert record.p_value == pytest.approx(ref.pvalue, rel=1e-7)
    assert record.fraction == pytest.approx(3 / 30)


def test_clustered_by_day_matches_statsmodels_cluster_robust_ols(tmp_path):
    import statsmodels.api as sm

    rng = np.random.default_rng(5)
    rows = _rows(rng, 14 * 24 * 4, step_minutes=15, east=101.0, day_sd=4.0)  # 14 days
    w = World(tmp_path, rows, cluster_by="day", min_clusters=10, planned_per_group=5000)
    early = w.look(at(7, 23))  # 6 days (2-7 March): too few clusters
    assert early.decision == "awaiting_clusters" and early.clusters == 6
    record = w.look(at(16, 12))
    raw = w.raw()
    raw = raw[raw.done_at <= pd.Timestamp(record.cutoff)]
    x = sm.add_constant((raw.site == "east").astype(float).to_numpy())
    fit = sm.OLS(raw.seconds.to_numpy(), x).fit(
        cov_type="cluster", cov_kwds={"groups": pd.factorize(raw.done_at.dt.date)[0]}, use_t=True)
    assert record.clusters == 15
    assert record.estimate == pytest.approx(fit.params[1], rel=1e-9)
    assert record.standard_error == pytest.approx(fit.bse[1], rel=1e-7)
    assert record.df == 14
    assert record.p_value == pytest.approx(fit.pvalues[1], rel=1e-6)
    assert record.decision in ("collecting", "difference_found")
    assert not any("set cluster_by" in text for text in record.warnings)


def test_day_level_design_effect_warns_unclustered(tmp_path):
    rng = np.random.default_rng(3)
    rows = _rows(rng, 10 * 24 * 4, step_minutes=15, day_sd=6.0)
    w = World(tmp_path, rows, planned_per_group=5000)
    record = w.look(at(12, 12))
    assert record.design_effect > 1.5 and record.effective_n < record.n1 + record.n2
    assert any(t.startswith(f"design effect {record.design_effect:.1f} at day level: events are not "
                            "independent; set cluster_by = \"day\"") for t in record.warnings)
    quiet = World(tmp_path / "q" if (tmp_path / "q").mkdir() is None else None,
                  _rows(np.random.default_rng(4), 10 * 24 * 4, step_minutes=15), planned_per_group=5000)
    calm = quiet.look(at(12, 12))
    assert calm.design_effect is not None and not any("design effect" in t for t in calm.warnings)


def test_late_events_counted_and_picked_up(tmp_path):
    rng = np.random.default_rng(8)
    w = World(tmp_path, _rows(rng, 200), planned_per_group=5000)
    first = w.look(T0 + timedelta(hours=5))
    assert first.late_events == 0
    insert_events(w.source_url, "events", [
        {"site": "east", "seconds": 1000.0, "done_at": T0 + timedelta(hours=1)},   # late: before cutoff 1
        {"site": "west", "seconds": 2000.0, "done_at": T0 + timedelta(hours=2)},   # late
        {"site": "east", "seconds": 3000.0, "done_at": T0 + timedelta(hours=6)},   # on time
    ])
    second = w.look(T0 + timedelta(hours=7))
    assert second.late_events == 2 and second.new_events == 2 + 40 + 1  # 2 late, 40 regular rows in (5h, 7h], 1 inserted
    raw = w.raw()
    upto = raw[raw.done_at <= pd.Timestamp(second.cutoff)]
    assert (second.n1, second.n2) == ((upto.site == "east").sum(), (upto.site == "west").sum())
    assert second.estimate == pytest.approx(upto[upto.site == "east"].seconds.mean()
                                            - upto[upto.site == "west"].seconds.mean(), rel=1e-9)
    assert w.looks()[-1].late_events == 2


def test_bad_rows_of_every_kind_counted_per_reason(tmp_path):
    rng = np.random.default_rng(9)
    good = _rows(rng, 40)
    bad = [
        {"site": "east", "seconds": None, "done_at": T0},                       # null_value
        {"site": "east", "seconds": float("inf"), "done_at": T0},               # not_finite
        {"site": "west", "seconds": float("-inf"), "done_at": T0},              # not_finite
        {"site": "east", "seconds": 1e6, "done_at": T0},                        # out_of_range
        {"site": "north", "seconds": 10.0, "done_at": T0},                      # unknown_group
        {"site": None, "seconds": 10.0, "done_at": T0},                         # unknown_group
        {"site": "east", "seconds": 10.0, "done_at": None},                     # null_time
    ]
    w = World(tmp_path, good + bad, valid_range=[0, 10000], planned_per_group=5000)
    # SQLite keeps text in a REAL column as text: a non-numeric value, bypassing the Float type.
    source = sa.create_engine(w.source_url)
    with source.begin() as conn:
        conn.execute(sa.text("INSERT INTO events (site, seconds, done_at) VALUES ('west', 'fast', :t)"),
                     {"t": T0.replace(tzinfo=None)})
    source.dispose()
    record = w.look(T0 + timedelta(hours=5))
    assert record.excluded == {"null_value": 1, "not_finite": 2, "non_numeric": 1, "out_of_range": 1,
                               "unknown_group": 2, "null_time": 1}
    assert record.n1 + record.n2 == 40
    # Counts accumulate across looks.
    insert_events(w.source_url, "events", [{"site": "west", "seconds": None, "done_at": T0 + timedelta(hours=6)}])
    again = w.look(T0 + timedelta(hours=7))
    assert again.excluded["null_value"] == 2


def test_an_alert_with_no_channel_to_notify_is_on_record_as_delivered(tmp_path):
    # notify = []: a decision alert and a source alert follow the one rule of the store's
    # alert writer (delivered to nobody, no deliveries); a decision alert used to stay pending.
    rng = np.random.default_rng(15)
    w = World(tmp_path, _rows(rng, 600, east=110.0), planned_per_group=200, notify=[])
    record = w.look(T0 + timedelta(hours=30))
    assert record.decision == "difference_found" and record.alert_id
    source_alert = record_source_unreachable(w.engine, "handle-time", "connection refused",
                                             now=T0 + timedelta(hours=31), alert_after=0, notify=())
    with w.engine.connect() as conn:
        alerts = {a.kind: a for a in conn.execute(sa.select(Alert))}
        deliveries = conn.execute(sa.select(Delivery)).all()
    assert set(alerts) == {"difference_found", "source_unreachable"}
    assert alerts["difference_found"].id == record.alert_id
    assert alerts["source_unreachable"].id == source_alert
    assert {a.state for a in alerts.values()} == {"delivered"}
    assert deliveries == []


def test_as_of_without_a_zone_is_utc(tmp_path):
    rng = np.random.default_rng(16)
    rows = _rows(rng, 300)
    aware = World(tmp_path / "a" if (tmp_path / "a").mkdir() is None else None, rows)
    naive = World(tmp_path / "n" if (tmp_path / "n").mkdir() is None else None, rows)
    a = aware.look(T0 + timedelta(hours=5))
    b = naive.look((T0 + timedelta(hours=5)).replace(tzinfo=None))
    assert b.as_of == a.as_of and b.as_of.utcoffset() == timedelta(0)
    assert (b.cutoff, b.n1, b.n2, b.estimate) == (a.cutoff, a.n1, a.n2, a.estimate)
    with pytest.raises(ValueError, match="as_of"):
        naive.look("2026-03-02 11:00")


def test_not_binary_and_data_problems(tmp_path):
    rows = [{"site": s, "seconds": v, "done_at": T0 + timedelta(minutes=i)}
            for i, (s, v) in enumerate([("east", 1.0), ("west", 0.0), ("east", 2.0), ("west", 1.0), ("east", 0.0)])]
    w = World(tmp_path, rows, metric="proportion", method="proportions", planned_per_group=100)
    record = w.look(T0 + timedelta(hours=1))
    assert record.excluded == {"not_binary": 1}
    # Zero variance: all the same value in both groups.
    flat = World(tmp_path / "flat" if (tmp_path / "flat").mkdir() is None else None,
                 [{"site": s, "seconds": 5.0, "done_at": T0 + timedelta(minutes=i)}
                  for i, s in enumerate(["east", "west"] * 5)])
    assert flat.look(T0 + timedelta(hours=1)).decision == "data_problem"
    # One group empty.
    lone = World(tmp_path / "lone" if (tmp_path / "lone").mkdir() is None else None,
                 [{"site": "east", "seconds": float(i), "done_at": T0 + timedelta(minutes=i)} for i in range(5)])
    problem = lone.look(T0 + timedelta(hours=1))
    assert problem.decision == "data_problem" and "'west' has no valid events" in problem.warnings[0]
    with lone.engine.connect() as conn:
        alert = conn.execute(sa.select(Alert)).one()
    assert alert.kind == "data_problem" and alert.payload["look"] == 1
    # data_problem stays open: the next look happens.
    assert lone.look(T0 + timedelta(hours=2)) is not None


def test_source_unreachable_records_nothing_then_next_look_is_fine(tmp_path):
    rng = np.random.default_rng(10)
    w = World(tmp_path, _rows(rng, 100))
    broken = Source(f"sqlite:///{tmp_path / 'missing' / 'nowhere.sqlite'}", name="ops")
    with pytest.raises(SourceUnavailableError, match="ops"):
        w.look(T0 + timedelta(hours=3), source=broken)
    assert w.count(Comparison) == 0 and w.count(Look) == 0
    assert w.look(T0 + timedelta(hours=3)).look == 1
    with pytest.raises(SourceUnavailableError):
        w.look(T0 + timedelta(hours=4), source=broken)
    assert w.count(Look) == 1
    assert w.look(T0 + timedelta(hours=4)).look == 2


def test_store_a_migration_behind_is_refused(tmp_path):
    from monitor.store.engine import downgrade

    w = World(tmp_path, _rows(np.random.default_rng(1), 20))
    downgrade(w.store_url, "0001")
    with pytest.raises(StoreBehindError, match="gapwatch db upgrade"):
        w.look(T0 + timedelta(hours=3))


def test_design_change_refused_and_restart_starts_a_new_version(tmp_path):
    rng = np.random.default_rng(12)
    w = World(tmp_path, _rows(rng, 300))
    w.look(T0 + timedelta(hours=3))
    w.write(alpha=0.01, value_column="seconds", every="1h")  # schedule changes are fine, alpha is not
    with pytest.raises(DesignChangedError) as info:
        w.look(T0 + timedelta(hours=4))
    message = str(info.value)
    assert "alpha" in message and "every" not in message.split("in:")[1].split(".")[0]
    assert "gapwatch restart handle-time" in message and "new name" in message
    assert w.count(Look) == 1
    w.write(every="1h")  # back to the frozen design: looks again
    assert w.look(T0 + timedelta(hours=4)).look == 2
    w.write(alpha=0.01)
    done = restart_comparison(w.engine, "handle-time", made_at=T0 + timedelta(hours=4), made_by="dana")
    assert (done["name"], done["archived_version"], done["next_version"], done["from_start"]) == (
        "handle-time", 1, 2, False)
    record = w.look(T0 + timedelta(hours=5))
    assert (record.version, record.look) == (2, 1)
    raw = w.raw()
    # Only what came after version 1's last cutoff: nothing version 1 tested is tested again.
    last_cutoff = pd.Timestamp(T0 + timedelta(hours=4))
    new = (raw.done_at > last_cutoff) & (raw.done_at <= pd.Timestamp(record.cutoff))
    assert 0 < record.n1 + record.n2 == new.sum()
    assert record.detail["restart"] == {"after_version": 1, "from_start": False,
                                        "starts_after": last_cutoff.isoformat(), "made_by": "dana"}
    # --from-start reads everything again, and the first look says so.
    restart_comparison(w.engine, "handle-time", made_at=T0 + timedelta(hours=5), made_by="dana",
                       reason="audit wants all data", from_start=True)
    record = w.look(T0 + timedelta(hours=6))
    assert (record.version, record.look) == (3, 1)
    assert record.n1 + record.n2 == (raw.done_at <= pd.Timestamp(record.cutoff)).sum()  # reads from the start
    assert record.detail["restart"]["from_start"] is True
    assert any("tested again" in w for w in record.warnings)
    with w.engine.connect() as conn:
        versions = conn.execute(sa.select(Comparison.version, Comparison.archived, Comparison.looks_taken)
                                .order_by(Comparison.version)).all()
    assert versions == [(1, True, 2), (2, True, 1), (3, False, 1)]


def test_injection_in_filter_values_is_harmless_and_source_unchanged(tmp_path):
    rng = np.random.default_rng(13)
    rows = _rows(rng, 60)
    for i, r in enumerate(rows):
        r["status"] = "done" if i % 3 else "x'; DROP TABLE events; --"
    folder = tmp_path
    url = f"sqlite:///{folder / 'ops.sqlite'}"
    create_events_table(url, rows=rows, extra_columns=[("status", sa.String(50))])
    text = config_toml(url, f"sqlite:///{folder / 'store.sqlite'}",
                       [comparison_toml(filters=[["status", "!=", "x'; DROP TABLE events; --"],
                                                 ["status", "in", ["done", "' OR 1=1 --"]]])])
    config = load_config(write_config(folder, text), environ={})
    engine = migrated_store(config.store_url)
    before = file_digest(folder / "ops.sqlite")
    for hours in (2, 4, 8):
        record = take_look(config, "handle-time", as_of=T0 + timedelta(hours=hours), engine=engine)
    assert file_digest(folder / "ops.sqlite") == before
    assert record.n1 + record.n2 == sum(1 for i in range(60) if i % 3)
    source = sa.create_engine(url)
    with source.connect() as conn:
        assert conn.execute(sa.text("SELECT count(*) FROM events")).scalar() == 60


def test_a_look_is_all_or_nothing(tmp_path, monkeypatch):
    rng = np.random.default_rng(14)
    w = World(tmp_path, _rows(rng, 300))
    w.look(T0 + timedelta(hours=3))
    with w.engine.connect() as conn:
        cells_before = conn.execute(sa.select(Cell).order_by(Cell.kind, Cell.group_index, Cell.key)).all()
        comp_before = conn.execute(sa.select(Comparison)).one()

    def fail(*args, **kwargs):
        raise RuntimeError("disk full while writing cells")

    monkeypatch.setattr(store_looks, "upsert_cells", fail)
    with pytest.raises(RuntimeError, match="disk full"):
        w.look(T0 + timedelta(hours=6))
    with w.engine.connect() as conn:
        assert conn.execute(sa.select(Cell).order_by(Cell.kind, Cell.group_index, Cell.key)).all() == cells_before
        comp_after = conn.execute(sa.select(Comparison)).one()
    assert (comp_after.looks_taken, comp_after.watermark) == (comp_before.looks_taken, comp_before.watermark)
    assert w.count(Look) == 1
    monkeypatch.undo()
    record = w.look(T0 + timedelta(hours=6))
    raw = w.raw()
    assert record.look == 2 and record.n1 + record.n2 == (raw.done_at <= pd.Timestamp(record.cutoff)).sum()


def test_alert_and_deliveries_written_with_the_stopping_look(tmp_path):
    rng = np.random.default_rng(15)
    w = World(tmp_path, _rows(rng, 600, east=110.0), planned_per_group=200, notify=["other-log"])
    record = w.look(T0 + timedelta(hours=30))
    assert record.decision == "difference_found" and record.alert_id
    with w.engine.connect() as conn:
        alert = conn.execute(sa.select(Alert)).one()
        deliveries = conn.execute(sa.select(Delivery)).all()
    assert alert.id == record.alert_id and alert.payload["alert_id"] == alert.id
    assert set(alert.payload) >= {"alert_id", "comparison", "version", "kind", "decision", "look", "as_of",
                                  "estimate", "ci_low", "ci_high", "p_value", "fraction", "n1", "n2",
                                  "groups", "message"}
    assert alert.payload["message"].startswith("handle-time: east minus west differs by")
    assert [(d.channel, d.state, d.next_attempt_at) for d in deliveries] == [
        ("other-log", "pending", record.as_of)]


def _concurrent(w, as_of, workers=4):
    barrier = threading.Barrier(workers)
    results, errors = [], []

    def run():
        barrier.wait()
        try:
            results.append(w.look(as_of))
        except LookAlreadyRecordedError as exc:
            errors.append(exc)

    threads = [threading.Thread(target=run) for _ in range(workers)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    return results, errors


def test_concurrent_looks_never_duplicate_numbers_nor_double_count(tmp_path):
    rng = np.random.default_rng(16)
    w = World(tmp_path, _rows(rng, 400), planned_per_group=5000)
    for hours in (3, 6, 9):
        results, errors = _concurrent(w, T0 + timedelta(hours=hours))
        assert len(results) + len(errors) == 4 and results
    looks = w.looks()
    numbers = [l.look_number for l in looks]
    assert numbers == sorted(set(numbers)) == list(range(1, len(looks) + 1))
    raw = w.raw()
    last = looks[-1]
    assert last.n1 + last.n2 == (raw.done_at <= pd.Timestamp(last.cutoff)).sum()
    with w.engine.connect() as conn:
        total = conn.execute(sa.select(sa.func.sum(Cell.n)).where(Cell.kind == "total")).scalar()
    assert total == last.n1 + last.n2


def test_buckets_in_a_time_zone_across_daylight_saving():
    from zoneinfo import ZoneInfo

    lisbon = ZoneInfo("Europe/Lisbon")
    # 29 March 2026: clocks go from 01:00 to 02:00 local in Lisbon.
    slot = int(at(29, 0, 30).timestamp())
    assert bucket_key(slot, "day", lisbon) == "2026-03-29"
    assert bucket_end("2026-03-29", "day", lisbon) == at(29, 23)  # midnight local = 23:00 UTC (summer time)
    assert bucket_key(slot, "week", lisbon) == "2026-03-23"
    assert bucket_key(slot, "hour", lisbon) == "2026-03-29T00:00+00:00"
    assert bucket_key(int(at(29, 1, 15).timestamp()), "hour", lisbon) == "2026-03-29T02:00+01:00"
    starts = ("06:00", "14:00", "22:00")
    assert bucket_key(int(at(3, 3).timestamp()), "shift", ZoneInfo("UTC"), starts) == "2026-03-02T22:00+00:00"
    assert bucket_end("2026-03-02T22:00+00:00", "shift", ZoneInfo("UTC"), starts) == at(3, 6)


def test_futility_boundary_stops_for_no_material_difference(tmp_path):
    from monitor.stats.boundaries import FutilitySpec
    from monitor.stats.planning import plan_mean

    rng = np.random.default_rng(17)
    keys = dict(planned_per_group=None, alternative="greater", difference=5.0, sd=10.0, power=0.8, looks=4,
                futility=True)
    w = World(tmp_path, _rows(rng, 600, east=97.0, west=100.0), **keys)  # east is worse, not better
    plan = plan_mean(5.0, 10.0, alpha=0.05, power=0.8, alternative="greater", looks=4, futility=True)
    assert Design.from_config(w.comparison).planned_per_group == plan.max_per_group
    fresh = SequentialTBoundary(0.05, "obrien-fleming", "greater",
                                futility=FutilitySpec("obrien-fleming", 0.2, plan.drift))
    decisions = []
    for hours in (2, 4, 6, 8, 12, 16):
        record = w.look(T0 + timedelta(hours=hours))
        if record is None:
            break
        expected = fresh.add_look(record.fraction, record.df)
        assert record.boundary_z == pytest.approx(expected.z, rel=1e-9)
        assert w.looks()[-1].futility_z == pytest.approx(expected.futility_z, rel=1e-9)
        z_equivalent = stats.norm.isf(stats.t.sf(record.statistic, record.df))
        if record.decision == "no_material_difference":
            assert z_equivalent < expected.futility_z
        decisions.append(record.decision)
    assert decisions[-1] == "no_material_difference"
    assert decisions[:-1] == ["collecting"] * (len(decisions) - 1)


def test_final_look_without_crossing_completes_the_plan(tmp_path):
    rng = np.random.default_rng(18)
    w = World(tmp_path, _rows(rng, 300), planned_per_group=100)
    first = w.look(T0 + timedelta(hours=4))  # 80 events: fraction 0.4
    assert first.decision == "collecting" and first.fraction == pytest.approx(0.4)
    final = w.look(T0 + timedelta(hours=12))  # 120 per group: past the plan
    assert final.fraction > 1 and final.p_value > 0.05
    assert final.decision == "plan_complete"
    last = w.looks()[-1]
    assert last.cumulative_alpha == pytest.approx(0.05)
    assert last.detail["after_stop"]["p_value"] > 0.05
    with w.engine.connect() as conn:
        alert = conn.execute(sa.select(Alert)).one()
    assert alert.kind == "plan_complete" and "without a difference being found" in alert.payload["message"]


def test_one_sided_less_reads_the_lower_tail(tmp_path):
    rng = np.random.default_rng(19)
    w = World(tmp_path, _rows(rng, 800, east=96.0), alternative="less", planned_per_group=300)
    record = w.look(T0 + timedelta(hours=20))
    raw = w.raw()
    upto = raw[raw.done_at <= pd.Timestamp(record.cutoff)]
    ref = stats.ttest_ind(upto[upto.site == "east"].seconds, upto[upto.site == "west"].seconds,
                          equal_var=False, alternative="less")
    assert record.p_value == pytest.approx(ref.pvalue, rel=1e-7)
    assert record.ci_low is None and record.ci_high is not None
    assert record.decision == "difference_found"


def test_holder_claims_the_comparison_for_the_look(tmp_path):
    from monitor.store.claims import current_holder, try_claim
    from monitor.errors import ClaimHeldError

    w = World(tmp_path, _rows(np.random.default_rng(20), 100))
    as_of = T0 + timedelta(hours=3)
    assert try_claim(w.engine, "handle-time", "worker-b", now=as_of, seconds=60) is not None
    with pytest.raises(ClaimHeldError):
        w.look(as_of, holder="worker-a")
    assert w.count(Look) == 0
    later = as_of + timedelta(minutes=5)  # worker-b's claim has expired
    assert w.look(later, holder="worker-a").look == 1
    assert current_holder(w.engine, "handle-time", now=later) is None  # released after the look


def _cells(world):
    with world.engine.connect() as conn:
        return {(c.kind, c.group_index, c.key): (c.n, c.sum_dev, c.sum_dev2)
                for c in conn.execute(sa.select(Cell))}


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_many_small_looks_add_up_to_one_big_look(tmp_path, seed):
    rng = np.random.default_rng(seed)
    rows = _rows(rng, 2000, step_minutes=4, day_sd=2.0)
    keys = dict(method="paired", pair_by="hour", planned_per_group=100000, timezone="America/Chicago")
    many = World(tmp_path / "many" if (tmp_path / "many").mkdir() is None else None, rows, **keys)
    one = World(tmp_path / "one" if (tmp_path / "one").mkdir() is None else None, rows, **keys)
    end = T0 + timedelta(days=5)
    moments = sorted(T0 + timedelta(minutes=float(m)) for m in rng.uniform(0, 5 * 24 * 60, size=12))
    for moment in moments + [end]:
        last = many.look(moment)
    single = one.look(end)
    a, b = _cells(many), _cells(one)
    assert a.keys() == b.keys()
    for key in a:
        assert a[key][0] == b[key][0]
        assert a[key][1:] == pytest.approx(b[key][1:], rel=1e-9, abs=1e-6)
    assert (last.n1, last.n2, last.pairs) == (single.n1, single.n2, single.pairs)
    assert last.estimate == pytest.approx(single.estimate, rel=1e-9)


def test_swapping_the_groups_flips_the_estimate(tmp_path):
    rows = _rows(np.random.default_rng(22), 500, east=102.0)
    forward = World(tmp_path / "f" if (tmp_path / "f").mkdir() is None else None, rows, planned_per_group=600)
    backward = World(tmp_path / "b" if (tmp_path / "b").mkdir() is None else None, rows, planned_per_group=600,
                     groups=["west", "east"])
    a, b = forward.look(T0 + timedelta(hours=20)), backward.look(T0 + timedelta(hours=20))
    assert (a.n1, a.n2) == (b.n2, b.n1)
    assert a.estimate == pytest.approx(-b.estimate, rel=1e-9)
    assert a.p_value == pytest.approx(b.p_value, rel=1e-9)
    assert a.ci_low is not None and a.ci_low == pytest.approx(-b.ci_high, rel=1e-9)
    assert a.decision == b.decision


def test_boundary_resumed_from_the_store_equals_the_one_kept_in_memory(tmp_path):
    rows = _rows(np.random.default_rng(23), 900, east=100.5)
    kept = World(tmp_path / "k" if (tmp_path / "k").mkdir() is None else None, rows, planned_per_group=500)
    resumed = World(tmp_path / "r" if (tmp_path / "r").mkdir() is None else None, rows, planned_per_group=500)
    for hours in (5, 10, 15, 20, 25):
        a = kept.look(T0 + timedelta(hours=hours))
        b = resumed.look(T0 + timedelta(hours=hours))
        # Forget the second store's boundary, as a freshly started process would.
        resumed.memory.forget()
        assert kept.memory.holds(kept.engine)["boundaries"] == 1 or a.boundary_look is None
        if a is None:
            assert b is None
            break
        assert (a.boundary_look, a.decision) == (b.boundary_look, b.decision)
        assert a.boundary_z == b.boundary_z and a.nominal_p == b.nominal_p
