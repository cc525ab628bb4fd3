"""The look's kept state and its handling of NULL pair/cluster keys.

* Events whose pair or cluster column is NULL are left out of the statistic and
  of n, and counted as excluded with reason ``null_key``; the figures match
  statsmodels / scipy computed from the rows that have a key.
* The cells a process keeps between its own looks give the same looks as
  reading them back from the store, and are not used once the store's newest
  look is not the one this process wrote (another writer, a re-created store).
"""

from __future__ import annotations

from datetime import timedelta
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa
from scipy import stats

from live_helpers import (CHANNELS, LiveWorld, at, comparison_toml, config_toml, create_events_table,
                          event_rows, insert_events, migrated_store, write_config)
from monitor.config import load_config
from monitor.look import LookMemory, take_look
from monitor.source.reader import Source
from monitor.store.looks import KeptState
from monitor.vocabulary import NULL_KEY

T0 = at(2, 6)  # Monday 2 March 2026, 06:00 UTC


class KeyedWorld:
    """A source table with a ``crew`` key column (some NULL), a config and a migrated store."""

    def __init__(self, folder: Path, rows, **keys):
        self.folder = folder
        self.source_url = f"sqlite:///{folder / 'ops.sqlite'}"
        self.store_url = f"sqlite:///{folder / 'store.sqlite'}"
        create_events_table(self.source_url, rows=rows, key_column="crew")
        text = config_toml(self.source_url, self.store_url, [comparison_toml(**keys)], CHANNELS)
        self.config = load_config(write_config(folder, text), environ={})
        self.engine = migrated_store(self.store_url)

    def look(self, as_of):
        return take_look(self.config, self.config.comparisons[0].name, as_of=as_of, engine=self.engine)

    def raw(self):
        engine = sa.create_engine(self.source_url)
        frame = pd.read_sql("SELECT site, seconds, done_at, crew FROM events", engine)
        engine.dispose()
        frame["done_at"] = pd.to_datetime(frame["done_at"], utc=True)
        return frame


def _keyed_rows(rng, count, start, crews, null_every, east=100.0):
    rows = event_rows(rng, count, start, east=east)
    crew_effect = {c: rng.normal(0, 3.0) for c in crews}
    for i, row in enumerate(rows):
        if i % null_every == 0:
            row["crew"] = None
        else:
            row["crew"] = crews[(i // 2) % len(crews)]
            row["seconds"] += crew_effect[row["crew"]]
    return rows


def test_null_cluster_keys_are_excluded_and_counted(tmp_path):
    rng = np.random.default_rng(41)
    crews = [f"crew-{k:02d}" for k in range(14)]
    first = _keyed_rows(rng, 600, T0, crews, null_every=7, east=101.0)
    w = KeyedWorld(tmp_path, first, cluster_column="crew", min_clusters=10, planned_per_group=5000)
    record = w.look(T0 + timedelta(days=3))
    raw = w.raw()
    upto = raw[raw.done_at <= pd.Timestamp(record.cutoff)]
    keyed = upto[upto.crew.notna()]
    nulls = int(upto.crew.isna().sum())
    assert nulls > 50
    assert (record.n1, record.n2) == ((keyed.site == "east").sum(), (keyed.site == "west").sum())
    assert record.excluded == {NULL_KEY: nulls}
    assert record.new_events == len(keyed)
    assert record.clusters == len(crews)

    # Reference: OLS of value on a group indicator, CR1 errors clustered on crew (statsmodels).
    import statsmodels.api as sm

    x = sm.add_constant((keyed.site == "east").astype(float).to_numpy())
    fit = sm.OLS(keyed.seconds.to_numpy(), x).fit(
        cov_type="cluster", cov_kwds={"groups": pd.factorize(keyed.crew)[0]}, use_t=True)
    assert record.estimate == pytest.approx(fit.params[1], rel=1e-9)
    assert record.standard_error == pytest.approx(fit.bse[1], rel=1e-7)
    assert record.df == len(crews) - 1

    # A later look adds only the new rows' NULL keys to the running count.
    later = _keyed_rows(rng, 200, T0 + timedelta(days=3, minutes=1), crews, null_every=5)
    insert_events(w.source_url, "events", later)
    again = w.look(T0 + timedelta(days=5))
    new_nulls = sum(1 for r in later if r["crew"] is None)
    assert again.excluded == {NULL_KEY: nulls + new_nulls}
    assert again.detail["excluded_new"] == {NULL_KEY: new_nulls}
    assert again.new_events == len(later) - new_nulls
    assert again.n1 + again.n2 == record.n1 + record.n2 + len(later) - new_nulls


def test_null_pair_keys_never_form_a_pair(tmp_path):
    rng = np.random.default_rng(42)
    crews = [f"line-{k}" for k in range(9)]
    rows = _keyed_rows(rng, 400, T0, crews, null_every=4, east=102.0)
    w = KeyedWorld(tmp_path, rows, method="paired", pair_column="crew", planned_per_group=200)
    record = w.look(T0 + timedelta(days=2))
    raw = w.raw()
    keyed = raw[raw.crew.notna() & (raw.done_at <= pd.Timestamp(record.cutoff))]
    means = keyed.groupby(["crew", "site"]).seconds.mean().unstack().dropna()
    ref = stats.ttest_rel(means["east"], means["west"])
    # NULL keys filed under one empty key would have made a tenth pair.
    assert record.pairs == len(crews) == len(means)
    assert record.statistic == pytest.approx(ref.statistic, rel=1e-9)
    assert record.p_value == pytest.approx(ref.pvalue, rel=1e-7)
    assert record.excluded == {NULL_KEY: int(raw.crew.isna().sum())}
    assert (record.n1, record.n2) == ((keyed.site == "east").sum(), (keyed.site == "west").sum())


@pytest.mark.parametrize("keys", [dict(cluster_column="crew", min_clusters=10, planned_per_group=5000),
                                  dict(method="paired", pair_column="crew", planned_per_group=200)],
                         ids=["clustered", "paired"])
def test_verify_replays_looks_with_null_keys(tmp_path, keys):
    from monitor.verify import verify_looks

    rng = np.random.default_rng(45)
    crews = [f"crew-{k:02d}" for k in range(12)]
    w = KeyedWorld(tmp_path, _keyed_rows(rng, 500, T0, crews, null_every=6), **keys)
    w.look(T0 + timedelta(days=2))
    insert_events(w.source_url, "events", _keyed_rows(rng, 150, T0 + timedelta(days=2, minutes=1), crews, 4))
    w.look(T0 + timedelta(days=4))
    results = verify_looks(w.config, w.config.comparisons[0].name, w.engine)
    assert [r["look"] for r in results] == [1, 2]
    assert all(r["ok"] for r in results), results


def test_null_keys_without_a_key_column_are_not_a_reason(tmp_path):
    rng = np.random.default_rng(43)
    w = LiveWorld(tmp_path, event_rows(rng, 200, T0), cluster_by="day", min_clusters=4, planned_per_group=5000)
    record = w.look(T0 + timedelta(days=1))
    assert NULL_KEY not in record.excluded and record.n1 + record.n2 == record.new_events


def _figures(r):
    return (r.look, r.decision, r.n1, r.n2, r.estimate, r.standard_error, r.statistic, r.df, r.p_value,
            r.fraction, r.boundary_z, r.boundary_look, r.ci_low, r.ci_high, r.design_effect, r.excluded)


def test_kept_state_gives_the_looks_a_store_read_gives(tmp_path):
    rows = event_rows(np.random.default_rng(44), 1500, T0, east=100.8, day_sd=1.0)
    (tmp_path / "kept").mkdir()
    (tmp_path / "read").mkdir()
    kept = LiveWorld(tmp_path / "kept", rows, planned_per_group=900)
    read = LiveWorld(tmp_path / "read", rows, planned_per_group=900)
    source_kept, source_read = Source(kept.source_url, name="ops"), Source(read.source_url, name="ops")
    try:
        for hours in range(6, 80, 6):
            a = kept.look(T0 + timedelta(hours=hours), source=source_kept)
            # A fresh process: nothing kept, every look reads its state back.
            b = read.look(T0 + timedelta(hours=hours), source=source_read, memory=LookMemory())
            if a is None:
                assert b is None
                break
            assert kept.memory.holds(kept.engine)["states"] == 1
            assert _figures(a) == _figures(b)
    finally:
        source_kept.dispose()
        source_read.dispose()


def test_kept_state_is_not_used_after_another_writer_or_a_new_store(tmp_path):
    rng = np.random.default_rng(45)
    w = LiveWorld(tmp_path, event_rows(rng, 300, T0), planned_per_group=5000)
    w.look(T0 + timedelta(hours=4))
    # Another process (its own engine and memory, same store) records the next look;
    # this one still holds the state it kept after look 1.
    other = migrated_store(w.store_url)
    take_look(w.config, w.comparison.name, as_of=T0 + timedelta(hours=8), engine=other, memory=LookMemory())
    other.dispose()
    assert w.memory.holds(w.engine)["states"] == 1
    third = w.look(T0 + timedelta(hours=12))
    raw = w.raw()
    upto = raw[raw.done_at <= pd.Timestamp(third.cutoff)]
    assert third.look == 3
    assert (third.n1, third.n2) == ((upto.site == "east").sum(), (upto.site == "west").sum())

    # The store is deleted and made again with other rows; another process takes looks 1-3
    # there (same comparison id, same look numbers) while this one still holds look 3's state.
    w.engine.dispose()
    for suffix in ("", "-wal", "-shm"):
        Path(str(tmp_path / "store.sqlite") + suffix).unlink(missing_ok=True)
    Path(tmp_path / "ops.sqlite").unlink()
    # Rows up to 15 h: every one of the looks below finds something new (a look that finds
    # nothing records only a check).
    create_events_table(w.source_url, rows=event_rows(rng, 300, T0, east=130.0))
    other, other_memory = migrated_store(w.store_url), LookMemory()
    for hours in (4, 8, 12):
        take_look(w.config, w.comparison.name, as_of=T0 + timedelta(hours=hours), engine=other, memory=other_memory)
    other.dispose()
    assert w.memory.holds(w.engine)["states"] == 1
    w.engine = migrated_store(w.store_url)
    fresh = w.look(T0 + timedelta(hours=16))
    upto = w.raw()
    upto = upto[upto.done_at <= pd.Timestamp(fresh.cutoff)]
    east, west = upto[upto.site == "east"].seconds, upto[upto.site == "west"].seconds
    assert fresh.look == 4 and (fresh.n1, fresh.n2) == (len(east), len(west))
    assert fresh.estimate == pytest.approx(east.mean() - west.mean(), rel=1e-9)


def test_service_keeps_one_source_per_configured_source_across_looks(tmp_path, monkeypatch):
    from monitor import source as source_module
    from monitor.service.scheduler import Service

    rows = event_rows(np.random.default_rng(46), 200, T0)
    w = LiveWorld(tmp_path, rows, planned_per_group=5000)
    moments = iter(T0 + timedelta(hours=h) for h in range(3, 40))
    service = Service(w.config.path, clock=lambda: next(moments), holder="test-worker")
    opened = []
    original_init = source_module.Source.__init__

    def counting_init(self, *args, **kwargs):
        opened.append(self)
        original_init(self, *args, **kwargs)

    monkeypatch.setattr(source_module.Source, "__init__", counting_init)
    disposed = []
    original_dispose = source_module.Source.dispose

    def counting_dispose(self):
        disposed.append(self)
        original_dispose(self)

    monkeypatch.setattr(source_module.Source, "dispose", counting_dispose)
    service.load()
    service.open_store(wait=False)
    try:
        kept = service.sources["ops"]
        for _ in range(3):
            assert service.look_once(w.comparison.name, honour_backoff=False) == "recorded"
        # One Source for three looks: reflection and the built statement are reused.
        assert opened == [kept] and service.sources["ops"] is kept and kept._statements
        # … and one memory: the cells of the newest look are kept for the next.
        assert service.memory.holds(service.engine)["states"] == 1
        # A reload that leaves the source's address alone keeps the open Source …
        path = Path(w.config.path)
        path.write_text(path.read_text().replace('every = "10m"', 'every = "5m"'))
        assert service.reload("test") and service.sources["ops"] is kept and not disposed
        # … a new address opens a new one and disposes of the old.
        copy = tmp_path / "ops-copy.sqlite"
        copy.write_bytes(Path(tmp_path / "ops.sqlite").read_bytes())
        path.write_text(path.read_text().replace(str(tmp_path / "ops.sqlite"), str(copy)))
        assert service.reload("test")
        assert service.sources["ops"] is not kept and disposed == [kept]
        assert service.look_once(w.comparison.name, honour_backoff=False) == "recorded"
        assert len(opened) == 2
    finally:
        service.shutdown()
    assert disposed[-1] is opened[-1]


def test_look_memory_is_bounded_and_hands_an_entry_to_one_look_at_a_time():
    store = SimpleNamespace(url="sqlite:///one.sqlite")
    other = SimpleNamespace(url="sqlite:///two.sqlite")
    memory = LookMemory(size=3)
    for comparison_id in range(1, 6):
        memory.keep_state(store, comparison_id, KeptState(f"t{comparison_id}", 1, {}, None))
    # The oldest entries went first; at most three are kept.
    assert memory.holds(store) == {"boundaries": 0, "states": 3}
    assert memory.take_state(store, 1) is None and memory.take_state(store, 2) is None
    # Same comparison id in another store: a different entry.
    assert memory.take_state(other, 5) is None
    kept = memory.take_state(store, 5)
    assert kept.token == "t5"
    # Taken out: a second look of the comparison gets nothing until the first puts it back.
    assert memory.take_state(store, 5) is None
    memory.keep_boundary(store, 4, "design", "boundary")
    memory.forget(store)
    assert memory.holds(store) == {"boundaries": 0, "states": 0}
    with pytest.raises(ValueError, match="size"):
        LookMemory(size=0)
