"""What a printable review holds: one comparison's question, frozen design, looks and result.

Everything is read from the store through :mod:`monitor.store.readback`, the same functions the
command line and the dashboard use; nothing here touches a source.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime
from statistics import NormalDist

from ..design import Design
from ..store import readback
from ..vocabulary import STOPPED_STATES, state_words

__all__ = ["Review", "LookLine", "build_review", "z_equivalent", "CAUTION"]

CAUTION = ("A statistical signal supports, and never replaces, operational judgement and local "
           "rules. A difference found says the data are unlikely under no difference at the error "
           "rate the design promised; it does not say the difference matters, what caused it, or "
           "that it will last.")

_NORMAL = NormalDist()


def z_equivalent(statistic, p_value, alternative):
    """The look's evidence on the z scale its boundary is drawn on.

    For t-based and clustered methods the look decides by comparing its p-value with the
    boundary's nominal level, so the statistic that belongs beside the z boundary is the
    normal quantile of the one-sided p-value (signed like the statistic), not t itself.
    """
    if statistic is None or p_value is None:
        return None
    if alternative == "two-sided":
        one_sided = min(max(p_value / 2.0, 1e-300), 0.5)
        magnitude = -_NORMAL.inv_cdf(one_sided)
        return magnitude if statistic >= 0 else -magnitude
    p = min(max(p_value, 1e-300), 1 - 1e-16)
    z = -_NORMAL.inv_cdf(p)
    return z if alternative == "greater" else -z


@dataclass(frozen=True)
class LookLine:
    """One look as the review prints it."""

    look: int
    as_of: str
    n1: int | None
    n2: int | None
    pairs: int | None
    clusters: int | None
    estimate: float | None
    ci_low: float | None
    ci_high: float | None
    p_value: float | None
    z_equivalent: float | None
    boundary_z: float | None
    nominal_p: float | None
    fraction: float | None
    cumulative_alpha: float | None
    decision: str
    excluded_new: int
    warnings: tuple


@dataclass(frozen=True)
class Review:
    """Everything a reviewer files about one version of one comparison."""

    name: str
    version: int
    state: str
    state_words: str
    stopped: bool
    description: str
    groups: tuple
    labels: tuple
    unit: str
    design: Design              # the design frozen at the version's first look
    settings: dict
    created_at: str | None
    stopped_at: str | None
    looks: tuple
    excluded: dict
    adjusted: dict | None
    alerts: tuple
    versions: tuple
    warnings: tuple
    generated_at: str
    caution: str = CAUTION
    # A before/after comparison: the baseline gap in words and the latest look's figures
    # (``baseline_gap``, ``after_gap``, ``relative``, ``means`` …); None for other comparisons.
    baseline: str | None = None
    before_after: dict | None = None
    extra: dict = field(default_factory=dict)


def build_review(engine, name, version=None, *, now: datetime) -> Review:
    """Gather one comparison's review from the store (``version``: the live one unless given)."""
    row = readback.get_comparison(engine, name, version, now=now)
    history = readback.look_history(engine, name, row["version"])
    design = Design.from_stored(row["design"])
    settings = row["settings"] or {}
    alternative = design.alternative
    lines = []
    for look in history:
        lines.append(LookLine(
            look=look["look"], as_of=look["as_of"], n1=look["n1"], n2=look["n2"],
            pairs=look["pairs"], clusters=look["clusters"], estimate=look["estimate"],
            ci_low=look["ci_low"], ci_high=look["ci_high"], p_value=look["p_value"],
            z_equivalent=z_equivalent(look["statistic"], look["p_value"], alternative),
            boundary_z=look["boundary_z"], nominal_p=look["nominal_p"], fraction=look["fraction"],
            cumulative_alpha=look["cumulative_alpha"], decision=look["decision"] or "",
            excluded_new=int(sum(v for v in look["excluded_new"].values() if isinstance(v, (int, float)))),
            warnings=tuple(look["warnings"]),
        ))
    excluded = dict(history[-1]["excluded"]) if history else {}
    groups = tuple(str(g) for g in row["groups"])
    labels = row.get("labels") or list(groups)
    alerts = tuple(a for a in readback.list_alerts(engine, comparison=name)
                   if a["comparison_id"] == row["id"])
    versions = tuple(readback.list_versions(engine, name))
    return Review(
        name=row["name"], version=row["version"], state=row["state"],
        state_words=state_words(row["state"]), stopped=row["state"] in STOPPED_STATES,
        description=row.get("description") or "", groups=groups,
        labels=tuple(str(label) for label in labels), unit=str(row.get("unit") or ""),
        design=design, settings=settings, created_at=row["created_at"], stopped_at=row["stopped_at"],
        looks=tuple(lines), excluded=excluded, adjusted=row["adjusted"], alerts=alerts,
        versions=versions, warnings=tuple(row["warnings"]), generated_at=now.isoformat(timespec="seconds"),
        extra={"mean2": row.get("mean2"), "evidence": row.get("evidence")},
        baseline=row.get("baseline"), before_after=row.get("before_after") if design.before_after else None,
    )
