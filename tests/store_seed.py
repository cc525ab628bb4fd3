"""Seed a history store with comparisons, looks, cells and alerts, written straight to the models.

The numbers are computed, not typed in: each comparison draws events from a
normal (or Bernoulli) model with a seeded generator, the looks carry the
Welch / two-proportion statistic of the running totals, an
O'Brien–Fleming-type boundary ``z = z(1 - alpha/2) / sqrt(t)`` (the usual
closed-form approximation to the Lan–DeMets boundary) and the repeated
confidence interval ``estimate ± z * se``. The scenarios are invented
operations comparisons.

Used by the read-side tests and by ``tests/benchmarks/bench_dashboard.py``.
"""

from __future__ import annotations

import math
import uuid
from dataclasses import dataclass, field
from datetime import datetime, timedelta, timezone

import numpy as np
import sqlalchemy as sa
from scipy import stats

from monitor.store.models import Alert, Base, Cell, Comparison, Delivery, Look

__all__ = ["SCENARIOS", "Scenario", "migrate", "seed_store", "seed_many", "NOW"]

NOW = datetime(2026, 3, 2, 12, 0, tzinfo=timezone.utc)


def migrate(url):
    """Bring an empty store to the current schema (Alembic when available)."""
    try:
        from monitor import store
    except ImportError:
        store = None
    if store is not None and hasattr(store, "upgrade"):
        store.upgrade(url)
        return
    engine = sa.create_engine(url)
    Base.metadata.create_all(engine)
    engine.dispose()


@dataclass
class Scenario:
    name: str
    groups: tuple
    metric: str  # mean | proportion
    method: str
    true_means: tuple  # per group: mean, or rate for a proportion
    sds: tuple = (1.0, 1.0)
    planned_per_group: int = 2000
    per_look: tuple = (120, 110)  # events per look per group
    looks: int = 8
    every: object = "10m"
    state: str = "collecting"  # final state the seed records
    archived: bool = False
    version: int = 1
    cluster_by: str | None = None
    design_effect: float | None = None
    clusters: int | None = None
    excluded: dict = field(default_factory=dict)
    late_every: int = 0
    description: str = ""
    futility: bool = False
    stop_at_crossing: bool = True  # False keeps every look (the scale benchmark wants exact counts)


SCENARIOS = (
    Scenario(
        "pick-seconds", ("east", "west"), "mean", "welch", (181.0, 179.2), (41.0, 39.0),
        planned_per_group=3000, per_look=(140, 150), looks=9, every="10m", state="collecting",
        design_effect=2.4, excluded={"null_value": 2, "out_of_range": 1}, late_every=3,
        description="Seconds per pick, east depot against west depot",
    ),
    Scenario(
        "first-contact-rate", ("desk-a", "desk-b"), "proportion", "proportions", (0.79, 0.66),
        planned_per_group=1800, per_look=(160, 155), looks=6, every=900, state="difference_found",
        excluded={"not_binary": 1}, description="Share of calls resolved at first contact",
    ),
    Scenario(
        "line-output-shift", ("line-1", "line-2"), "mean", "welch", (412.0, 410.0), (18.0, 19.0),
        planned_per_group=600, per_look=(110, 105), looks=6, every="*/30 * * * *",
        state="plan_complete", version=1, archived=True,
        description="Units per shift on the two packing lines (first plan)",
    ),
    Scenario(
        "line-output-shift", ("line-1", "line-2"), "mean", "welch", (412.0, 410.5), (18.0, 19.0),
        planned_per_group=900, per_look=(60, 58), looks=4, every="*/30 * * * *", state="collecting",
        version=2, futility=True, description="Units per shift on the two packing lines",
    ),
    Scenario(
        "dock-turnaround", ("north", "south"), "mean", "welch", (47.0, 47.2), (12.0, 12.5),
        planned_per_group=2500, per_look=(90, 95), looks=5, every="1h", state="awaiting_clusters",
        cluster_by="day", clusters=6, design_effect=3.1,
        description="Minutes from truck arrival to departure",
    ),
    Scenario(
        "repair-visit-minutes", ("crew-red", "crew-blue"), "mean", "welch", (64.0, 61.0), (15.0, 15.0),
        planned_per_group=1500, per_look=(0, 80), looks=3, every="30m", state="data_problem",
        excluded={"unknown_group": 14, "null_time": 3}, description="Minutes on site per repair visit",
    ),
)


def _spent(z_alpha, fraction):
    # O'Brien–Fleming-type two-sided spending: 2 - 2 Phi(z(1-a/2) / sqrt(t)), capped at alpha.
    return float(2.0 - 2.0 * stats.norm.cdf(z_alpha / math.sqrt(min(fraction, 1.0))))


def _looks_for(scenario, rng, start, interval):
    """Running totals and look rows for one scenario (no ids yet)."""
    alpha = 0.05
    z_alpha = stats.norm.ppf(1 - alpha / 2)
    s = scenario
    n = [0, 0]
    sums = [0.0, 0.0]
    sums2 = [0.0, 0.0]
    shift = float(round(s.true_means[0])) if s.metric == "mean" else 0.0
    rows = []
    days = {}
    excluded = {}
    for k in range(1, s.looks + 1):
        as_of = start + interval * k
        # Look.excluded holds running totals by reason; detail["excluded_new"] what the look added.
        new_excluded = dict(s.excluded) if k == 1 or k % 2 == 0 else {}
        for reason, count in new_excluded.items():
            excluded[reason] = excluded.get(reason, 0) + count
        for g in (0, 1):
            m = s.per_look[g]
            if m == 0:
                continue
            if s.metric == "mean":
                x = rng.normal(s.true_means[g], s.sds[g], size=m)
            else:
                x = (rng.random(m) < s.true_means[g]).astype(float)
            n[g] += m
            sums[g] += float(np.sum(x - shift))
            sums2[g] += float(np.sum((x - shift) ** 2))
            day = as_of.strftime("%Y-%m-%d")
            cell = days.setdefault((g, day), [0, 0.0, 0.0])
            cell[0] += m
            cell[1] += float(np.sum(x - shift))
            cell[2] += float(np.sum((x - shift) ** 2))
        fraction = min(n) / s.planned_per_group
        row = dict(
            look_number=k, as_of=as_of, cutoff=as_of - timedelta(seconds=30),
            recorded_at=as_of + timedelta(seconds=2), n1=n[0], n2=n[1],
            new_events=sum(s.per_look), late_events=(2 if s.late_every and k % s.late_every == 0 else 0),
            fraction=fraction, warnings=[], duration_ms=float(3.0 + rng.random()),
            excluded=dict(excluded), detail={"shift": shift, "excluded_new": new_excluded},
        )
        if min(n) < 2:
            row.update(decision="data_problem", warnings=["group crew-red has no events"])
            rows.append(row)
            continue
        means = [shift + sums[g] / n[g] for g in (0, 1)]
        var = [max(sums2[g] - sums[g] ** 2 / n[g], 0.0) / (n[g] - 1) for g in (0, 1)]
        estimate = means[0] - means[1]
        if s.metric == "mean":
            se = math.sqrt(var[0] / n[0] + var[1] / n[1])
            df = (var[0] / n[0] + var[1] / n[1]) ** 2 / (
                (var[0] / n[0]) ** 2 / (n[0] - 1) + (var[1] / n[1]) ** 2 / (n[1] - 1)
            )
            statistic = estimate / se
            p_value = float(2 * stats.t.sf(abs(statistic), df))
        else:
            pooled = (sums[0] + sums[1]) / (n[0] + n[1])
            se = math.sqrt(pooled * (1 - pooled) * (1 / n[0] + 1 / n[1]))
            df = None
            statistic = estimate / se
            p_value = float(2 * stats.norm.sf(abs(statistic)))
        boundary = z_alpha / math.sqrt(min(fraction, 1.0))
        deff = s.design_effect
        row.update(
            mean1=means[0], mean2=means[1], sd1=math.sqrt(var[0]), sd2=math.sqrt(var[1]),
            estimate=estimate, standard_error=se, statistic=statistic, df=df, p_value=p_value,
            information=1.0 / se ** 2, boundary_z=boundary,
            # shaped like a beta-spending futility bound: low early, meeting the efficacy bound at t = 1
            futility_z=(min(boundary, 2.8 * math.sqrt(fraction) - 0.84 / math.sqrt(fraction))
                        if s.futility else None),
            nominal_p=float(stats.norm.sf(boundary)), cumulative_alpha=_spent(z_alpha, fraction),
            ci_low=estimate - boundary * se, ci_high=estimate + boundary * se,
            clusters=(s.clusters + k if s.clusters is not None else None),
            design_effect=(deff + 0.05 * math.sin(k) if deff is not None else None),
            effective_n=((n[0] + n[1]) / deff if deff is not None else None),
            decision="collecting",
        )
        if deff is not None and s.cluster_by is None:
            row["warnings"] = [
                f"day-level design effect {row['design_effect']:.2f}: the events are not independent; "
                "the interval is too narrow unless the comparison is clustered"
            ]
        if s.cluster_by is not None:
            row["decision"] = "awaiting_clusters"
        rows.append(row)
        if s.stop_at_crossing and s.state == "difference_found" and abs(statistic) >= boundary:
            break  # a crossing stops the comparison at this look
    # The last look carries the scenario's final decision.
    last = rows[-1]
    last["decision"] = s.state
    if s.state in ("difference_found", "plan_complete", "no_material_difference"):
        # The shape monitor.look records; the numbers are a plausible shrinkage, not computed.
        last["detail"] = dict(last["detail"], after_stop={
            "stop_look": last["look_number"], "z_observed": last["statistic"],
            "p_value": min(1.0, (last.get("p_value") or 0.0) * 1.6),
            "median_unbiased_estimate": last["estimate"] * 0.93,
            "adjusted_ci": [last["ci_low"] * 0.95, last["ci_high"] * 0.97],
            "naive_estimate": last["estimate"],
        })
    cells = [(g, "", n[g], sums[g], sums2[g]) for g in (0, 1) if n[g]]
    day_cells = [(g, day, c[0], c[1], c[2]) for (g, day), c in sorted(days.items())]
    return rows, shift, cells, day_cells


def _design(s, shift):
    # The stored shape of a Design (Design.to_stored()), the shift fixed at the first look.
    if s.metric == "proportion":
        inputs = {"p1": s.true_means[0], "p2": s.true_means[1], "power": 0.8}
    else:
        inputs = {"difference": round(abs(s.true_means[0] - s.true_means[1]) or 1.0, 2),
                  "sd": s.sds[0], "power": 0.8}
    return {
        "method": s.method, "metric": s.metric, "groups": list(s.groups), "alternative": "two-sided",
        "alpha": 0.05, "spending": "obrien-fleming", "null_difference": 0.0,
        "plan": {"planned_per_group": s.planned_per_group, "inputs": inputs},
        "sigmas": None, "pairing": None,
        "clustering": {"cluster_by": s.cluster_by, "cluster_column": None} if s.cluster_by else None,
        "futility": s.futility, "valid_range": None, "filters": [],
        "table": s.name.replace("-", "_"), "schema": None, "group_column": "grp",
        "value_column": "value", "time_column": "done_at", "time_format": "auto",
        "timezone": "UTC", "min_clusters": 10 if s.cluster_by else None, "shift": shift,
    }


def _add(session, s, rng, *, now, offset_looks=0, alerts=True):
    interval = timedelta(minutes=10)
    start = now - interval * (s.looks + offset_looks)
    rows, shift, cells, day_cells = _looks_for(s, rng, start, interval)
    stopped = s.state in ("difference_found", "plan_complete", "no_material_difference")
    comp = Comparison(
        name=s.name, version=s.version, design=_design(s, shift), design_hash=uuid.uuid4().hex,
        settings={"source": "ops", "table": s.name.replace("-", "_"), "every": s.every,
                  "notify": ["ops-log"], "description": s.description},
        state=s.state, looks_taken=len(rows),
        watermark={"cutoff": rows[-1]["cutoff"].isoformat(), "arrival": None},
        created_at=start, last_look_at=rows[-1]["as_of"],
        stopped_at=rows[-1]["as_of"] if stopped else None, archived=s.archived,
    )
    session.add(comp)
    session.flush()
    looks = []
    for row in rows:
        look = Look(comparison_id=comp.id, **row)
        looks.append(look)
    session.add_all(looks)
    session.flush()
    for g, key, count, sd, sd2 in cells:
        session.add(Cell(comparison_id=comp.id, kind="total", group_index=g, key=key, n=count,
                         sum_dev=sd, sum_dev2=sd2))
    for g, key, count, sd, sd2 in day_cells:
        session.add(Cell(comparison_id=comp.id, kind="day", group_index=g, key=key, n=count,
                         sum_dev=sd, sum_dev2=sd2))
    created = []
    if alerts and s.state != "collecting":
        last = looks[-1]
        alert = Alert(
            id=str(uuid.uuid4()), comparison_id=comp.id, comparison_name=s.name, look_id=last.id,
            kind="state_change", created_at=last.as_of,
            payload={
                "alert_id": None, "comparison": s.name, "version": s.version, "kind": "state_change",
                "decision": s.state, "look": last.look_number, "as_of": last.as_of.isoformat(),
                "estimate": last.estimate, "ci_low": last.ci_low, "ci_high": last.ci_high,
                "p_value": last.p_value, "fraction": last.fraction, "n1": last.n1, "n2": last.n2,
                "groups": list(s.groups),
                "message": f"{s.name}: {s.state.replace('_', ' ')} at look {last.look_number}.",
            },
            state={"difference_found": "delivered", "plan_complete": "acknowledged",
                   "data_problem": "failed"}.get(s.state, "pending"),
        )
        alert.payload = dict(alert.payload, alert_id=alert.id)
        if alert.state == "acknowledged":
            alert.acknowledged_at = last.as_of + timedelta(minutes=20)
            alert.acknowledged_by = "shift lead"
        session.add(alert)
        session.flush()
        session.add(Delivery(
            alert_id=alert.id, channel="ops-log",
            state="failed" if alert.state == "failed" else ("pending" if alert.state == "pending" else "delivered"),
            attempts=8 if alert.state == "failed" else 1, next_attempt_at=last.as_of,
            last_error="connection refused by 127.0.0.1:8099" if alert.state == "failed" else None,
            delivered_at=None if alert.state in ("failed", "pending") else last.as_of + timedelta(seconds=5),
        ))
        created.append(alert.id)
    return comp, created


def seed_store(url, *, now=NOW, seed=20260302):
    """Write the SCENARIOS into a migrated store; returns {"alerts": [...ids], "comparisons": [...]}."""
    from sqlalchemy.orm import Session

    engine = sa.create_engine(url)
    rng = np.random.default_rng(seed)
    out = {"alerts": [], "comparisons": []}
    try:
        with Session(engine) as session, session.begin():
            for i, s in enumerate(SCENARIOS):
                offset = 12 if s.archived else 0
                comp, alerts = _add(session, s, rng, now=now, offset_looks=offset)
                out["comparisons"].append((comp.name, comp.version))
                out["alerts"].extend(alerts)
            # One pending alert to acknowledge, on the live comparison.
            pending_id = str(uuid.uuid4())
            pick = session.execute(
                sa.select(Comparison).where(Comparison.name == "pick-seconds")
            ).scalar_one()
            session.add(Alert(
                id=pending_id, comparison_id=pick.id, comparison_name=pick.name, look_id=None,
                kind="design_effect", created_at=now - timedelta(minutes=5),
                payload={"alert_id": pending_id, "comparison": pick.name, "version": 1,
                         "kind": "design_effect", "decision": "collecting", "look": pick.looks_taken,
                         "message": "pick-seconds: events look clustered by day; consider cluster_by."},
                state="pending",
            ))
            session.flush()
            session.add(Delivery(alert_id=pending_id, channel="ops-log", state="pending", attempts=0,
                                 next_attempt_at=now))
            out["alerts"].append(pending_id)
            out["pending_alert"] = pending_id
    finally:
        engine.dispose()
    return out


def seed_many(url, *, comparisons=200, looks=5000, now=NOW, seed=7):
    """A large store for the scale benchmark: ``comparisons`` comparisons sharing ``looks`` looks."""
    from sqlalchemy.orm import Session

    engine = sa.create_engine(url)
    rng = np.random.default_rng(seed)
    per = max(1, looks // comparisons)
    states = ["collecting"] * 6 + ["difference_found", "plan_complete", "awaiting_clusters", "data_problem"]
    try:
        with Session(engine) as session, session.begin():
            for i in range(comparisons):
                base = SCENARIOS[i % 2]
                s = Scenario(
                    f"{base.name}-{i:03d}", base.groups, base.metric, base.method, base.true_means,
                    base.sds, planned_per_group=per * 150, per_look=(100, 104), looks=per,
                    every=base.every, state=states[i % len(states)] if states[i % len(states)] != "data_problem" else "collecting",
                    design_effect=base.design_effect, stop_at_crossing=False,
                )
                _add(session, s, rng, now=now, alerts=(i % 10 == 0))
    finally:
        engine.dispose()
