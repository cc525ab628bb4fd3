"""Replaying recorded looks from the raw source rows (``gapwatch verify``).

Each look is replayed with its own cutoff and arrival watermark: the valid rows
the source holds up to that cutoff (and arrived by that look) are pulled once,
summarised with pandas, and tested with the fixed-sample functions; the result
is compared with what the look recorded. Incremental cells, shifted sums and
slot roll-ups are not used, so a mismatch points at the incremental path. The
replay follows the design frozen with the comparison, not the current
configuration.
"""

from __future__ import annotations

import json
import math
from dataclasses import replace
from zoneinfo import ZoneInfo

import pandas as pd
import sqlalchemy as sa
from sqlalchemy.orm import Session

from .calendar import bucket_end, bucket_key
from .design import Design
from .errors import UnknownComparisonError
from .source.reader import Source, SourceSpec
from .stats import fixed
from .look.statistic import cluster_variance
from .stats.before_after import difference_in_differences
from .stats.clustered import cluster_counts, cluster_robust_difference
from .stats.ratio import RatioCells, ratio_difference
from .store.models import Comparison, Look
from .vocabulary import NULL_KEY

__all__ = ["verify_looks"]

_REL = 1e-6
_FIELDS = ("n1", "n2", "pairs", "estimate", "statistic", "p_value")


def _local_bucket(times, kind, zone_name, shift_starts):
    local = times.dt.tz_convert(zone_name)
    if kind == "day":
        return local.dt.strftime("%Y-%m-%d")
    if kind == "week":
        return (local.dt.normalize() - pd.to_timedelta(local.dt.weekday, unit="D")).dt.strftime("%Y-%m-%d")
    zone = ZoneInfo(zone_name)
    seconds = (times - pd.Timestamp(0, tz="UTC")) // pd.Timedelta(seconds=1)
    return seconds.map(lambda s: bucket_key(int(s), kind, zone, shift_starts))


def _paired(design: Design, frame, cutoff, common, out):
    pairing, timezone = design.pairing, design.measure.timezone
    by = pairing.pair_by
    keys = frame["key"].fillna("").astype(str) if by is None else _local_bucket(
        frame["time"], by, timezone, pairing.shift_starts)
    means = frame.assign(bucket=keys).groupby(["bucket", "group_index"])["value"].mean().unstack()
    means = means.dropna()
    if by is not None:
        zone = ZoneInfo(timezone)
        means = means[[bucket_end(k, by, zone, pairing.shift_starts) <= cutoff for k in means.index]]
    diffs = (means[0] - means[1]).to_numpy()
    out["pairs"] = int(len(diffs))
    if len(diffs) < 2:
        return None
    return fixed.paired_t(len(diffs), float(diffs.mean()), float(diffs.std(ddof=1)), **common)


def _clustered(design: Design, frame, g1, g2, common):
    clustering = design.clustering
    keys = (frame["key"].fillna("").astype(str) if clustering.cluster_column
            else _local_bucket(frame["time"], clustering.cluster_by, design.measure.timezone, ()))
    cells = frame.assign(cluster=keys).groupby(["group_index", "cluster"])["value"].agg(["count", "sum"])
    if len(g1) == 0 or len(g2) == 0:
        return None
    cells = cells.reset_index()
    enough = cluster_counts(cells["group_index"].tolist(), cells["cluster"].tolist(), cells["count"].tolist(),
                            min_clusters=design.min_clusters).enough
    if not enough:
        return None     # the look records no statistic while it waits for clusters
    result = cluster_robust_difference(cells["group_index"].tolist(), cells["cluster"].tolist(),
                                       cells["count"].tolist(), cells["sum"].tolist(), 0.0,
                                       variance=cluster_variance(design), **common)
    return None if result.degenerate else result


def _unclustered(design: Design, g1, g2, common):
    if len(g1) == 0 or len(g2) == 0:
        return None
    if design.method == "proportions":
        return fixed.two_proportions(len(g1), int(round(g1.sum())), len(g2), int(round(g2.sum())), **common)
    if design.method == "z":
        s1, s2 = design.sigmas
        return fixed.z_test(len(g1), float(g1.mean()), s1, len(g2), float(g2.mean()), s2, **common)
    if len(g1) < 2 or len(g2) < 2:
        return None
    test = fixed.pooled_t if design.method == "pooled" else fixed.welch_t
    return test(len(g1), float(g1.mean()), float(g1.std(ddof=1)), len(g2), float(g2.mean()),
                float(g2.std(ddof=1)), **common)


def _ratio(design: Design, frame, out, common):
    """A ratio look's figures from raw rows: per-cluster (or one per-group) sums, no shift."""
    if out["n1"] == 0 or out["n2"] == 0:
        return None
    clustering = design.clustering
    if clustering is not None:
        keys = (frame["key"].fillna("").astype(str) if clustering.cluster_column
                else _local_bucket(frame["time"], clustering.cluster_by, design.measure.timezone, ()))
    else:
        keys = [""] * len(frame)
    y, x = frame["value"].to_numpy(), frame["denominator"].to_numpy()
    sums = (frame.assign(cluster=keys, y=y, x=x, yy=y * y, xx=x * x, xy=x * y)
            .groupby(["group_index", "cluster"])[["y", "x", "yy", "xx", "xy"]].agg(["count", "sum"])
            .reset_index())
    cells = RatioCells(
        group=tuple(sums["group_index"]),
        key=tuple(sums["cluster"]) if clustering is not None else (None,) * len(sums),
        n=tuple(sums[("y", "count")]), num=tuple(sums[("y", "sum")]), den=tuple(sums[("x", "sum")]),
        num2=tuple(sums[("yy", "sum")]), den2=tuple(sums[("xx", "sum")]), cross=tuple(sums[("xy", "sum")]))
    return ratio_difference(cells, clustered=clustering is not None, **common)


def _recompute(design: Design, frame, cutoff):
    """Figures of one look from its raw rows: dict of n1, n2, pairs, estimate, statistic, p_value."""
    common = dict(null_difference=design.null_difference, alternative=design.alternative, alpha=design.alpha)
    g1 = frame.loc[frame.group_index == 0, "value"]
    g2 = frame.loc[frame.group_index == 1, "value"]
    out = {"n1": int(len(g1)), "n2": int(len(g2)), "pairs": None}
    if design.ratio is not None:
        result = _ratio(design, frame, out, common)
    elif design.paired:
        result = _paired(design, frame, cutoff, common, out)
    elif design.clustered:
        result = _clustered(design, frame, g1, g2, common)
    else:
        result = _unclustered(design, g1, g2, common)
    if result is not None:
        out.update(estimate=float(result.estimate), statistic=float(result.statistic),
                   p_value=float(result.p_value))
    return out


def _close(recorded, recomputed):
    if recorded is None or recomputed is None:
        return recorded is None and (recomputed is None or not math.isfinite(recomputed))
    if isinstance(recorded, int) and isinstance(recomputed, int):
        return recorded == recomputed
    if not (math.isfinite(recorded) and math.isfinite(recomputed)):
        return recorded == recomputed
    return math.isclose(recorded, recomputed, rel_tol=_REL, abs_tol=1e-9)


def _stored(engine, name, version):
    with Session(engine) as session:
        query = sa.select(Comparison).where(Comparison.name == name)
        if version:
            query = query.where(Comparison.version == version)
        else:
            query = query.order_by(Comparison.version.desc())
        comp = session.scalars(query.limit(1)).first()
        if comp is None:
            known = sorted(set(session.scalars(sa.select(Comparison.name))))
            what = f"version {version} of {name!r}" if version and name in known else repr(name)
            hint = f"; known: {', '.join(known)}" if known else "; the store holds no comparison yet"
            raise UnknownComparisonError(f"no comparison {what} in the store{hint}")
        looks = list(session.scalars(
            sa.select(Look).where(Look.comparison_id == comp.id).order_by(Look.look_number)))
        session.expunge_all()
    return comp, looks


class _Baseline:
    """A before/after comparison's baseline as the look that read it saw it (then frozen)."""

    def __init__(self):
        self.frame = self.excluded = self.arrival = None

    def replay(self, look, source, spec, design, arrival, excluded):
        """Fold the baseline's bad rows and the late rows dated before the start into ``excluded``."""
        window = design.window.moments()
        if self.frame is None and look.cutoff >= window["baseline_to"]:
            baseline_spec = replace(spec, start=window["baseline_from"], end=window["baseline_to"])
            self.frame = source.read_rows(baseline_spec, look.cutoff, arrival_max=arrival)
            self.excluded = dict(self.frame.attrs.get("excluded", {}))
            self.arrival = arrival
        if self.frame is None:
            return
        for reason, count in self.excluded.items():
            excluded[reason] = excluded.get(reason, 0) + count
        if arrival is not None and self.arrival is not None and arrival != self.arrival:
            late = (source.count_before(spec, window["start"], arrival)
                    - source.count_before(spec, window["start"], self.arrival))
            if late:
                excluded["before_start"] = late


def _before_after(design: Design, baseline, frame) -> dict:
    """The DiD of one look from the frozen baseline rows and the rows since the start (CR2)."""

    out = {"n1": int((frame.group_index == 0).sum()), "n2": int((frame.group_index == 1).sum())}
    if baseline is None:
        return out
    parts = []
    for period, rows in ((0, baseline), (1, frame)):
        days = _local_bucket(rows["time"], "day", design.measure.timezone, ())
        cells = rows.assign(day=days).groupby(["group_index", "day"])["value"].agg(["count", "sum"]).reset_index()
        parts.append(cells.assign(period=period))
    groups = [int(g) for p in parts for g in p["group_index"]]
    periods = [int(x) for p in parts for x in p["period"]]
    if len(set(zip(groups, periods))) < 4:
        return out
    result = difference_in_differences(
        groups, periods, [str(d) for p in parts for d in p["day"]], [int(c) for p in parts for c in p["count"]],
        [float(v) for p in parts for v in p["sum"]], 0.0, null_difference=design.null_difference,
        alternative=design.alternative, alpha=design.alpha)
    out.update(estimate=float(result.estimate), statistic=float(result.statistic), p_value=float(result.p_value))
    return out


def _replay(look, source, spec, design, baseline=None):
    arrival = json.loads(look.arrival_watermark) if look.arrival_watermark else None
    frame = source.read_rows(spec, look.cutoff, arrival_max=arrival)
    excluded = dict(frame.attrs.get("excluded", {}))
    if baseline is not None:
        baseline.replay(look, source, spec, design, arrival, excluded)
    if spec.key_column:
        # As the look does: an event without a pair or cluster key cannot join the statistic.
        no_key = frame["key"].isna()
        if no_key.any():
            excluded[NULL_KEY] = int(no_key.sum())
            frame = frame[~no_key]
    if baseline is not None:
        figures = _before_after(design, baseline.frame, frame)
    else:
        figures = _recompute(design, frame, look.cutoff)
    mismatches = []
    for field in _FIELDS:
        if field not in figures:
            continue
        recorded = getattr(look, field)
        if not _close(recorded, figures[field]):
            mismatches.append({"field": field, "recorded": recorded, "recomputed": figures[field]})
    if dict(look.excluded or {}) != excluded:
        mismatches.append({"field": "excluded", "recorded": look.excluded, "recomputed": excluded})
    return {"look": look.look_number, "ok": not mismatches, "mismatches": mismatches}


def verify_looks(config, name, engine, *, version=None, source=None) -> list[dict]:
    """Replay every recorded look of ``name`` from raw rows.

    Returns one dict per look: ``look``, ``ok`` and ``mismatches`` (a list of
    ``{"field", "recorded", "recomputed"}``). ``config`` gives the source's address;
    everything else comes from the design frozen with the comparison.
    """
    comp, looks = _stored(engine, name, version)
    settings = comp.settings or {}
    design = Design.from_stored(comp.design)
    spec = SourceSpec.from_design(design, arrival_column=settings.get("arrival_column"))
    own = source is None
    if own:
        source_name = settings.get("source")
        if source_name not in config.sources:
            raise UnknownComparisonError(f"comparison {name!r} read from source {source_name!r}, "
                                         f"which the configuration no longer names")
        source = Source(config.sources[source_name].url, name=source_name)
    try:
        baseline = _Baseline() if design.before_after else None
        return [_replay(look, source, spec, design, baseline) for look in looks]
    finally:
        if own:
            source.dispose()
