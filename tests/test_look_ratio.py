"""Ratio comparisons through the real look path: figures equal an explicit computation from raw rows.

The reference below is written out from the formulas, not taken from monitor.stats.ratio:
each group's ratio of sums R = Σy/Σx, residuals e = y − R·x, Var(R) = Σe²/(n−1) · n/(Σx)²
(Cochran 1977, *Sampling Techniques*, 3rd ed., §6.3) with Welch–Satterthwaite degrees of
freedom; clustered, the CR1 sandwich over cluster totals of e/Σx (factor G/(G−1)·(N−1)/(N−2)),
t on G − 1 degrees of freedom. monitor.stats.ratio itself is checked against statsmodels in
tests/test_ratio.py.
"""

from __future__ import annotations

from datetime import timedelta

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa
from scipy import stats

from live_helpers import CHANNELS, at, comparison_toml, config_toml, create_events_table, insert_events, \
    migrated_store, write_config
from monitor.verify import verify_looks
from monitor.config import load_config
from monitor.look import LookMemory, take_look
from monitor.store.models import Cell

T0 = at(2, 6)


def _rows(rng, count, start, *, rate_east=0.004, rate_west=0.004, crews=12):
    """Batches every 4 minutes, alternating lines: units packed and defects found."""
    rows = []
    for i in range(count):
        site = "east" if i % 2 else "west"
        units = float(rng.integers(50, 2000))
        rate = rate_east if site == "east" else rate_west
        rows.append({"site": site, "defects": float(rng.poisson(rate * units)), "units": units,
                     "done_at": start + timedelta(minutes=4 * i), "crew": f"crew-{rng.integers(crews)}"})
    return rows


class RatioWorld:
    def __init__(self, folder, rows, *, source_url=None, store_url=None, **keys):
        self.source_url = source_url or f"sqlite:///{folder / 'ops.sqlite'}"
        store_url = store_url or f"sqlite:///{folder / 'store.sqlite'}"
        create_events_table(self.source_url, rows=rows, key_column="crew",
                            extra_columns=[("defects", sa.Float), ("units", sa.Float)])
        keys = {"name": "defect-rate", "value_column": None, "metric": "ratio", "numerator_column": "defects",
                "denominator_column": "units", "planned_per_group": 5000, "arrival_column": "id", **keys}
        text = config_toml(self.source_url, store_url, [comparison_toml(**keys)], CHANNELS)
        self.config = load_config(write_config(folder, text), environ={})
        self.engine = migrated_store(store_url)
        self.memory = LookMemory()

    def look(self, as_of):
        return take_look(self.config, "defect-rate", as_of=as_of, engine=self.engine, memory=self.memory)

    def raw(self):
        engine = sa.create_engine(self.source_url)
        frame = pd.read_sql("SELECT site, defects, units, done_at, crew FROM events", engine)
        engine.dispose()
        frame["done_at"] = pd.to_datetime(frame["done_at"], utc=True)
        return frame


def _explicit(world, cutoff, clustered=False):
    """(n1, n2, estimate, statistic, df, p, ratio1, ratio2) from the raw rows up to the cutoff."""
    raw = world.raw()
    raw = raw[(raw.done_at <= pd.Timestamp(cutoff)) & raw.defects.notna() & raw.units.notna()
              & (raw.units > 0) & raw.site.isin(["east", "west"])]
    if clustered:
        raw = raw[raw.crew.notna()]
    groups = [raw[raw.site == s] for s in ("east", "west")]
    ratios = [g.defects.sum() / g.units.sum() for g in groups]
    if not clustered:
        parts = []
        for g, r in zip(groups, ratios):
            e = g.defects.to_numpy() - r * g.units.to_numpy()
            n = len(g)
            parts.append((e @ e) / (n - 1) * n / g.units.sum() ** 2)
        se = np.sqrt(sum(parts))
        df = sum(parts) ** 2 / sum(p ** 2 / (len(g) - 1) for p, g in zip(parts, groups))
    else:
        scores = {}
        for sign, g, r in ((1.0, groups[0], ratios[0]), (-1.0, groups[1], ratios[1])):
            e = g.defects - r * g.units
            for crew, total in (sign * e / g.units.sum()).groupby(g.crew).sum().items():
                scores[crew] = scores.get(crew, 0.0) + total
        G, N = len(scores), len(groups[0]) + len(groups[1])
        se = np.sqrt(G / (G - 1) * (N - 1) / (N - 2) * sum(v * v for v in scores.values()))
        df = G - 1
    estimate = ratios[0] - ratios[1]
    t = estimate / se
    return len(groups[0]), len(groups[1]), estimate, t, df, 2 * stats.t.sf(abs(t), df), ratios[0], ratios[1]


def _check(world, record, clustered=False):
    n1, n2, estimate, t, df, p, r1, r2 = _explicit(world, record.cutoff, clustered)
    assert (record.n1, record.n2) == (n1, n2)
    assert record.estimate == pytest.approx(estimate, rel=1e-9)
    assert record.statistic == pytest.approx(t, rel=1e-7)
    assert record.df == pytest.approx(df, rel=1e-7)
    assert record.p_value == pytest.approx(p, rel=1e-6)
    ratio = record.detail["ratio"]
    assert ratio["ratio1"] == pytest.approx(r1, rel=1e-12) and ratio["ratio2"] == pytest.approx(r2, rel=1e-12)
    assert ratio["relative_change"] == pytest.approx(r1 / r2 - 1, rel=1e-9)


def _bad_rows(when):
    return [{"site": "east", "defects": 3.0, "units": 0.0, "done_at": when, "crew": "crew-1"},
            {"site": "west", "defects": 1.0, "units": -20.0, "done_at": when, "crew": "crew-1"},
            {"site": "west", "defects": 2.0, "units": None, "done_at": when, "crew": "crew-2"},
            {"site": "east", "defects": None, "units": 100.0, "done_at": when, "crew": "crew-2"}]


def _run_looks(world, clustered=False):
    first = world.look(T0 + timedelta(hours=8))
    _check(world, first, clustered)
    assert first.excluded == {"null_value": 1, "bad_denominator": 3}
    # A late batch (event time before the last cutoff) and more bad rows arrive.
    insert_events(world.source_url, "events",
                  [{"site": "west", "defects": 9.0, "units": 700.0, "done_at": T0 + timedelta(hours=1),
                    "crew": "crew-3"}] + _bad_rows(T0 + timedelta(hours=9)))
    records = [first]
    for hours in (14, 20, 31):
        record = world.look(T0 + timedelta(hours=hours))
        _check(world, record, clustered)
        records.append(record)
    assert records[1].late_events == 1 and records[1].excluded["bad_denominator"] == 6
    assert all(r["ok"] for r in verify_looks(world.config, "defect-rate", world.engine))
    return records


@pytest.mark.parametrize("clustered", [False, True], ids=["rows", "crews"])
def test_ratio_looks_match_an_explicit_computation_sqlite(tmp_path, clustered):
    rng = np.random.default_rng(7)
    rows = _rows(rng, 420, T0, rate_east=0.005) + _bad_rows(T0 + timedelta(hours=2))
    keys = {"cluster_column": "crew", "min_clusters": 4} if clustered else {}
    world = RatioWorld(tmp_path, rows, **keys)
    records = _run_looks(world, clustered)
    assert records[-1].estimate > 0
    with world.engine.connect() as conn:
        stored = conn.execute(sa.select(Cell.sum_den, Cell.sum_cross).where(Cell.kind == "total")).all()
    assert len(stored) == 2 and all(r.sum_den is not None and r.sum_cross is not None for r in stored)


def test_ratio_look_without_the_memory_reads_six_sums_back(tmp_path):
    """A second process (no kept state) reads the ratio cells from the store and agrees."""
    rng = np.random.default_rng(8)
    world = RatioWorld(tmp_path, _rows(rng, 300, T0))
    world.look(T0 + timedelta(hours=6))
    world.memory = LookMemory()
    record = world.look(T0 + timedelta(hours=12))
    _check(world, record)


def test_ratio_config_refuses_value_column_and_other_methods(tmp_path):
    from monitor.errors import ConfigError

    base = dict(name="r", value_column=None, metric="ratio", numerator_column="defects",
                denominator_column="units")
    for extra, message in (({"value_column": "seconds"}, "'value_column' is not used by metric 'ratio'"),
                           ({"method": "pooled"}, "does not fit metric 'ratio'"),
                           ({"denominator_column": None}, "'denominator_column' is required for metric 'ratio'")):
        text = config_toml("sqlite:///x.sqlite", "sqlite:///s.sqlite", [comparison_toml(**{**base, **extra})])
        with pytest.raises(ConfigError, match=message):
            load_config(write_config(tmp_path, text), environ={})


@pytest.mark.postgres
@pytest.mark.parametrize("clustered", [False, True], ids=["rows", "crews"])
def test_ratio_looks_match_an_explicit_computation_postgres(pg_database_url, tmp_path, clustered):
    rng = np.random.default_rng(11)
    rows = _rows(rng, 420, T0, rate_west=0.006) + _bad_rows(T0 + timedelta(hours=2))
    keys = {"cluster_column": "crew", "min_clusters": 4} if clustered else {}
    world = RatioWorld(tmp_path, rows, source_url=pg_database_url, store_url=pg_database_url, **keys)
    records = _run_looks(world, clustered)
    assert records[-1].estimate < 0


@pytest.mark.slow
@pytest.mark.parametrize("day_sd, days", [(0.0, 20), (0.10, 30)], ids=["independent-batches", "day-shocks-clustered"])
def test_ratio_false_alarm_rate_under_daily_looks_through_the_decision_step(day_sd, days):
    """No true difference, one look a day through weigh/decide on the exact sequential t
    boundary: false alarms within α + 3 MC SE.

    2,000 streams: Monte Carlo SE sqrt(0.05 · 0.95 / 2000) = 0.0049, so the bound is 0.0646.
    Streams share the boundaries of equal model df histories (tests/ratio_simulation.py);
    every look still goes through ``decide`` and the boundary engine's own ``add_look``.
    """
    from ratio_simulation import SharedBoundaryStats, ratio_false_alarms

    stats = SharedBoundaryStats()
    rate, se, looks = ratio_false_alarms(2000, 20261203, day_sd=day_sd, days=days, stats=stats)
    assert looks >= 20
    assert se == pytest.approx(0.00487, abs=1e-4)
    assert rate <= 0.05 + 3 * se
    # Every stream that never stopped took every testing look, each through a boundary the engine solved.
    assert 0 < stats.solved < stats.looks
    assert stats.looks >= round(2000 * (1 - rate)) * looks


@pytest.mark.slow
def test_shared_ratio_boundaries_match_each_streams_own_boundary():
    """Sharing boundaries between streams whose model df agree in 1/df to 0.001 moves the
    calibrated nominal level by less than 0.1 % of itself (each stream also solves its own)."""
    from ratio_simulation import SharedBoundaryStats, ratio_false_alarms

    stats = SharedBoundaryStats(check_own=True)
    ratio_false_alarms(16, 5, day_sd=0.0, days=20, stats=stats)
    assert stats.solved < stats.looks
    assert 0 < stats.largest_gap < 1e-3
