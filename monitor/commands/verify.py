"""``gapwatch verify NAME``: recompute every recorded look from the raw source rows.

Each look is replayed with its own cutoff and arrival watermark: the valid rows
the source holds up to that cutoff (and arrived by that look) are pulled once,
summarised with pandas, and tested with the fixed-sample functions; the result
is compared with what the look recorded. Incremental cells, shifted sums and
slot roll-ups are not used, so a mismatch points at the incremental path.
"""

from __future__ import annotations

import json
from dataclasses import replace
from datetime import datetime
import math

import sqlalchemy as sa

from ..config import load_config
from ..errors import UnknownComparisonError
from ._common import add_config_option, whole_number_type

__all__ = ["verify_looks"]

_REL = 1e-6


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "verify", help="recompute every recorded look from raw source rows and report mismatches",
        description="Recompute every recorded look of a comparison from the raw source rows (same cutoffs "
                    "and arrival watermarks) and report any look whose figures differ. Exit 1 on a mismatch.")
    p.add_argument("name", metavar="NAME", help="comparison name")
    p.add_argument("--version", type=whole_number_type(1), default=None, metavar="V",
                   help="comparison version (default: the newest)")
    add_config_option(p)
    p.set_defaults(func=run)


def _spec(design, settings):
    from ..source.reader import SourceSpec

    pairing = design.get("pairing") or {}
    clustering = design.get("clustering") or {}
    return SourceSpec(
        table=design["table"], group_column=design["group_column"], groups=tuple(design["groups"]),
        value_column=design["value_column"], time_column=design["time_column"], metric=design["metric"],
        shift=float(design.get("shift") or 0.0), schema=design.get("schema"),
        time_format=design.get("time_format", "auto"),
        key_column=pairing.get("pair_column") or clustering.get("cluster_column"),
        arrival_column=(settings or {}).get("arrival_column"),
        filters=tuple((f[0], f[1], tuple(f[2]) if isinstance(f[2], list) else f[2]) for f in design["filters"]),
        valid_range=tuple(design["valid_range"]) if design.get("valid_range") else None,
        start=datetime.fromisoformat(design["start"]) if design.get("start") else None,
    )


def _rows_before(source, spec, end, cutoff, arrival):
    """Rows (valid and bad) dated before ``end`` that had arrived by ``arrival``."""
    frame = source.read_rows(replace(spec, start=None, end=end), cutoff, arrival_max=arrival)
    return len(frame) + sum(frame.attrs.get("excluded", {}).values())


def _before_after_figures(design, baseline, frame):
    """The DiD of one look from the frozen baseline rows and the rows since the start."""
    from ..stats.before_after import difference_in_differences

    out = {}
    parts = []
    for period, rows in ((0, baseline), (1, frame)):
        days = _local_bucket(rows["time"], "day", design["timezone"], ())
        cells = rows.assign(day=days).groupby(["group_index", "day"])["value"].agg(["count", "sum"]).reset_index()
        parts.append(cells.assign(period=period))
    if min(len(p) for p in parts) == 0:
        return out
    groups = [int(g) for p in parts for g in p["group_index"]]
    if len(set(zip(groups, [int(x) for p in parts for x in p["period"]]))) < 4:
        return out
    result = difference_in_differences(
        groups, [int(x) for p in parts for x in p["period"]], [str(d) for p in parts for d in p["day"]],
        [int(c) for p in parts for c in p["count"]], [float(v) for p in parts for v in p["sum"]], 0.0,
        null_difference=design["null_difference"], alternative=design["alternative"], alpha=design["alpha"])
    return {"estimate": float(result.estimate), "statistic": float(result.statistic),
            "p_value": float(result.p_value)}


def _local_bucket(times, kind, zone_name, shift_starts):
    import pandas as pd

    from ..calendar import bucket_key

    local = times.dt.tz_convert(zone_name)
    if kind == "day":
        return local.dt.strftime("%Y-%m-%d")
    if kind == "week":
        return (local.dt.normalize() - pd.to_timedelta(local.dt.weekday, unit="D")).dt.strftime("%Y-%m-%d")
    from zoneinfo import ZoneInfo

    zone = ZoneInfo(zone_name)
    seconds = (times - pd.Timestamp(0, tz="UTC")) // pd.Timedelta(seconds=1)
    return seconds.map(lambda s: bucket_key(int(s), kind, zone, shift_starts))


def _recompute(design, frame, cutoff):
    """Figures of one look from its raw rows: dict of n1, n2, pairs, estimate, statistic, p_value."""
    from ..stats import fixed

    common = dict(null_difference=design["null_difference"], alternative=design["alternative"],
                  alpha=design["alpha"])
    g1 = frame.loc[frame.group_index == 0, "value"]
    g2 = frame.loc[frame.group_index == 1, "value"]
    out = {"n1": int(len(g1)), "n2": int(len(g2)), "pairs": None}
    method = design["method"]
    if design.get("pairing"):
        from ..calendar import bucket_end
        from zoneinfo import ZoneInfo

        pairing = design["pairing"]
        by = pairing["pair_by"]
        keys = frame["key"].fillna("").astype(str) if by is None else _local_bucket(
            frame["time"], by, design["timezone"], pairing["shift_starts"])
        means = frame.assign(bucket=keys).groupby(["bucket", "group_index"])["value"].mean().unstack()
        means = means.dropna()
        if by is not None:
            zone = ZoneInfo(design["timezone"])
            means = means[[bucket_end(k, by, zone, pairing["shift_starts"]) <= cutoff for k in means.index]]
        diffs = (means[0] - means[1]).to_numpy()
        out["pairs"] = int(len(diffs))
        if len(diffs) < 2:
            return out
        r = fixed.paired_t(len(diffs), float(diffs.mean()), float(diffs.std(ddof=1)), **common)
    elif design.get("clustering"):
        from ..stats.clustered import cluster_robust_difference

        clustering = design["clustering"]
        keys = (frame["key"].fillna("").astype(str) if clustering.get("cluster_column")
                else _local_bucket(frame["time"], clustering["cluster_by"], design["timezone"], ()))
        cells = frame.assign(cluster=keys).groupby(["group_index", "cluster"])["value"].agg(["count", "sum"])
        if len(g1) == 0 or len(g2) == 0:
            return out
        cells = cells.reset_index()
        r = cluster_robust_difference(cells["group_index"].tolist(), cells["cluster"].tolist(),
                                      cells["count"].tolist(), cells["sum"].tolist(), 0.0, **common)
    else:
        if len(g1) == 0 or len(g2) == 0:
            return out
        if method == "proportions":
            r = fixed.two_proportions(len(g1), int(round(g1.sum())), len(g2), int(round(g2.sum())), **common)
        elif method == "z":
            s1, s2 = design["sigmas"]
            r = fixed.z_test(len(g1), float(g1.mean()), s1, len(g2), float(g2.mean()), s2, **common)
        else:
            if len(g1) < 2 or len(g2) < 2:
                return out
            test = fixed.pooled_t if method == "pooled" else fixed.welch_t
            r = test(len(g1), float(g1.mean()), float(g1.std(ddof=1)), len(g2), float(g2.mean()),
                     float(g2.std(ddof=1)), **common)
    out.update(estimate=float(r.estimate), statistic=float(r.statistic), p_value=float(r.p_value))
    return out


def _close(recorded, recomputed):
    if recorded is None or recomputed is None:
        return recorded is None and (recomputed is None or not math.isfinite(recomputed))
    if isinstance(recorded, int) and isinstance(recomputed, int):
        return recorded == recomputed
    if not (math.isfinite(recorded) and math.isfinite(recomputed)):
        return recorded == recomputed
    return math.isclose(recorded, recomputed, rel_tol=_REL, abs_tol=1e-9)


def verify_looks(config, name, engine, *, version=None, source=None) -> list[dict]:
    """Replay every recorded look of ``name`` from raw rows.

    Returns one dict per look: ``look``, ``ok`` and ``mismatches`` (a list of
    ``{"field", "recorded", "recomputed"}``).
    """
    from ..vocabulary import NULL_KEY
    from ..store.models import Comparison, Look
    from ..source.reader import Source

    from sqlalchemy.orm import Session

    with Session(engine) as session:
        query = sa.select(Comparison).where(Comparison.name == name)
        query = query.where(Comparison.version == version) if version else query.order_by(Comparison.version.desc())
        comp = session.scalars(query.limit(1)).first()
        if comp is None:
            raise UnknownComparisonError(f"no comparison named {name!r} in the store")
        looks = list(session.scalars(
            sa.select(Look).where(Look.comparison_id == comp.id).order_by(Look.look_number)))
        session.expunge_all()
    design = comp.design
    spec = _spec(design, comp.settings)
    own = source is None
    if own:
        source_name = (comp.settings or {}).get("source")
        if source_name not in config.sources:
            raise UnknownComparisonError(f"comparison {name!r} read from source {source_name!r}, "
                                         f"which the configuration no longer names")
        source = Source(config.sources[source_name].url, name=source_name)
    results = []
    window = design.get("before_after")
    baseline = baseline_excluded = baseline_arrival = None
    try:
        for look in looks:
            arrival = json.loads(look.arrival_watermark) if look.arrival_watermark else None
            frame = source.read_rows(spec, look.cutoff, arrival_max=arrival)
            excluded = dict(frame.attrs.get("excluded", {}))
            if window and baseline is None and look.cutoff >= datetime.fromisoformat(window["baseline_to"]):
                # The baseline as this look read it (and froze it): rows that had arrived by then.
                baseline_spec = replace(spec, start=datetime.fromisoformat(window["baseline_from"]),
                                        end=datetime.fromisoformat(window["baseline_to"]))
                baseline = source.read_rows(baseline_spec, look.cutoff, arrival_max=arrival)
                baseline_excluded = dict(baseline.attrs.get("excluded", {}))
                baseline_arrival = arrival
            if baseline is not None:
                for reason, count in baseline_excluded.items():
                    excluded[reason] = excluded.get(reason, 0) + count
                if spec.start is not None and arrival is not None and arrival != baseline_arrival:
                    late = (_rows_before(source, spec, spec.start, look.cutoff, arrival)
                            - _rows_before(source, spec, spec.start, look.cutoff, baseline_arrival))
                    if late:
                        excluded["before_start"] = late
            if spec.key_column:
                # As the look does: an event without a pair or cluster key cannot join the statistic.
                no_key = frame["key"].isna()
                if no_key.any():
                    excluded[NULL_KEY] = int(no_key.sum())
                    frame = frame[~no_key]
            if window:
                figures = {"n1": int((frame.group_index == 0).sum()), "n2": int((frame.group_index == 1).sum())}
                if baseline is not None:
                    figures.update(_before_after_figures(design, baseline, frame))
            else:
                figures = _recompute(design, frame, look.cutoff)
            mismatches = []
            for field in ("n1", "n2", "pairs", "estimate", "statistic", "p_value"):
                if field not in figures:
                    continue
                recorded = getattr(look, field)
                if not _close(recorded, figures[field]):
                    mismatches.append({"field": field, "recorded": recorded, "recomputed": figures[field]})
            if dict(look.excluded or {}) != excluded:
                mismatches.append({"field": "excluded", "recorded": look.excluded, "recomputed": excluded})
            results.append({"look": look.look_number, "ok": not mismatches, "mismatches": mismatches})
    finally:
        if own:
            source.dispose()
    return results


def run(args) -> int:
    from ..store.engine import make_engine

    config = load_config(args.config)
    engine = make_engine(config.store_url)
    try:
        results = verify_looks(config, args.name, engine, version=args.version)
    finally:
        engine.dispose()
    bad = [r for r in results if not r["ok"]]
    for r in results:
        if r["ok"]:
            continue
        parts = ", ".join(f"{m['field']} recorded {m['recorded']!r} recomputed {m['recomputed']!r}"
                          for m in r["mismatches"])
        print(f"{args.name} look {r['look']}: MISMATCH: {parts}")
    print(f"{args.name}: {len(results) - len(bad)} of {len(results)} looks match the raw rows")
    return 1 if bad else 0
