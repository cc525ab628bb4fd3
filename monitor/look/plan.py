"""The plan a look measures against: the frozen plan, changed by replans, counted in events or information.

Every fraction the boundary sees is on the scale of the *original* plan (its events, or
its maximum information): ``τ = events / original planned events`` or ``τ = (1/se²) /
original maximum information``. A replan moves the plan's end to ``τ_end`` (2 when the
plan doubles); the share of the current plan shown to people is ``τ / τ_end``. Without a
replan ``τ_end = 1`` and everything is as before.

* ``fraction = "events"`` (default): events so far over planned events per group (the
  smaller group; pairs for paired comparisons).
* ``fraction = "information"`` (means planned from a difference and an sd): observed
  information over the plan's maximum information (Mehta & Tsiatis 2001), so a wrong
  planning sd no longer silently costs power.

Conditional power (Jennison & Turnbull 2000, ch. 10) is the chance of crossing at an
analysis at the plan's end, under the current estimate (drift ``z/√τ``) and under the
planned difference (the plan's drift; after a replan with new planning inputs, the new
plan's drift, which on the original scale is ``θ_new / √τ_end``). The conditional error of
a replan uses the plan's remaining equally spaced looks instead (see ``work_out_replan``).

Pure: no SQL, no clock.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import date, datetime, timedelta

from scipy import special

from ..errors import InvalidArgumentError, ReplanRefusedError
from ..stats.adaptive import AdaptiveBoundary, Replan, remaining_planned_fractions
from ..stats.forecast import project_completion
from ..stats.information import (FRACTION_KINDS, events_for_information, information_fraction, max_information,
                                 plan_information)
from ..stats.planning import plan_mean, plan_proportion

__all__ = ["PlanState", "plan_state", "original_fraction", "resume_boundary", "reference_fractions",
           "conditional_powers", "z_of", "recent_rates", "projection", "WorkedReplan", "work_out_replan"]

DEFAULT_LOOKS = 5
RATE_WINDOW_DAYS = 7


@dataclass(frozen=True)
class PlanState:
    """The plan as it stands after the recorded replans.

    Attributes
    ----------
    kind : {"events", "information"}
    planned : int
        The frozen design's planned events (pairs) per group.
    maximum : float or None
        The frozen design's maximum information (information fractions only).
    end : float
        The current plan's end on the original plan's scale (1 without replans).
    drift : float or None
        Expected z at the original plan's end under the planned difference, signed
        (group 1 − group 2); None when the plan has no planning inputs.
    looks : int
        Planned looks (the reference continuation for conditional error and power).
    replans : tuple of Replan
    """

    kind: str
    planned: int
    maximum: float | None
    end: float
    drift: float | None
    looks: int
    replans: tuple

    @property
    def planned_now(self) -> int:
        """Planned events (pairs) per group of the current plan."""
        return int(math.ceil(self.planned * self.end - 1e-9))


def _signed(drift, difference):
    return math.copysign(abs(float(drift)), float(difference)) if difference else float(drift)


def plan_state(design: dict, replan_rows=()) -> PlanState:
    """The plan of a frozen design after the replans recorded for it (``plan_change`` rows)."""
    plan = design.get("plan") or {}
    figures = plan.get("figures") or {}
    inputs = plan.get("inputs") or {}
    kind = design.get("fraction") or "events"
    if kind not in FRACTION_KINDS:
        raise InvalidArgumentError(f"fraction must be one of {', '.join(FRACTION_KINDS)}; got {kind!r}")
    planned = int(plan["planned_per_group"])
    drift = None
    if figures.get("drift") is not None and figures.get("difference") is not None:
        drift = _signed(figures["drift"], figures["difference"])
    maximum = None
    if kind == "information":
        if drift is None:
            raise InvalidArgumentError("an information fraction needs a plan from a difference and an sd")
        maximum = max_information(figures["drift"], figures["difference"] - design.get("null_difference", 0.0))
    end = 1.0
    changes = []
    for row in replan_rows:
        record = Replan.from_dict(row["record"])
        changes.append(record)
        end = record.end_fraction
        new = row.get("new_plan") or {}
        if new.get("drift") is not None and new.get("difference") is not None:
            drift = _signed(new["drift"], new["difference"]) / math.sqrt(end)
    return PlanState(kind=kind, planned=planned, maximum=maximum, end=end, drift=drift,
                     looks=int(inputs.get("looks") or DEFAULT_LOOKS), replans=tuple(changes))


def original_fraction(state: PlanState, *, events, standard_error=None) -> float:
    """τ: the information so far on the original plan's scale (nan when it cannot be measured)."""
    if state.kind == "information":
        return information_fraction(standard_error, state.maximum)
    return events / state.planned


def resume_boundary(design: dict, state: PlanState, futility, testing_looks) -> AdaptiveBoundary:
    """The boundary standing at the recorded testing looks, replans applied where they were made.

    ``testing_looks``: per testing look in order, a mapping with ``fraction`` (τ),
    ``boundary_z``, ``futility_z`` and ``bounds`` (the look's ``detail["bounds"]``, present
    on looks after a replan).
    """
    looks = []
    for r in testing_looks:
        bounds = r.get("bounds")
        if bounds:
            looks.append({"fraction": r["fraction"], "bound_upper": bounds.get("bound_upper"),
                          "bound_lower": bounds.get("bound_lower")})
        else:
            z = math.inf if r["boundary_z"] is None else r["boundary_z"]
            looks.append({"fraction": r["fraction"], "z": z,
                          "futility_z": -math.inf if r.get("futility_z") is None else r["futility_z"]})
    return AdaptiveBoundary.resume(design["alpha"], design["spending"], design["alternative"], looks,
                                   state.replans, futility=futility)


def reference_fractions(state: PlanState, boundary: AdaptiveBoundary) -> list:
    """The running segment's remaining planned looks (equally spaced), for conditional error and power."""
    here = 0.0
    if boundary.looks and boundary.looks[-1].segment == boundary.segment:
        here = boundary.looks[-1].segment_fraction
    return remaining_planned_fractions(here, state.looks)


def z_of(statistic, df, p_upper=None) -> float:
    """The z with the same upper tail as the look's statistic (itself for z statistics)."""
    if df is None:
        return float(statistic)
    p = float(special.stdtr(df, -statistic)) if p_upper is None else float(p_upper)
    if p <= 0.0:
        return 40.0
    if p >= 1.0:
        return -40.0
    return float(-special.ndtri(p))


def conditional_powers(state: PlanState, boundary: AdaptiveBoundary, z, fraction) -> dict:
    """Chance of finding a difference by the plan's end, under the current estimate and the planned difference.

    Each is the chance of crossing in the direction of the difference assumed. Empty
    when the plan has ended.
    """
    if boundary.complete or not boundary.looks or not fraction or fraction <= 0:
        return {}
    # By one analysis at the plan's end: a look costs about 1 ms this way, against about 5 ms
    # with every remaining planned look (which adds little: boundaries of looks to come are
    # spent mostly at the end).
    drifts = [z / math.sqrt(fraction)] + ([state.drift] if state.drift is not None else [])
    powers = boundary.conditional_powers(z, drifts)
    out = {"current_estimate": powers[0].in_direction}
    if state.drift is not None:
        out["planned_difference"] = powers[1].in_direction
    return out


def recent_rates(day_counts, cutoff_local: datetime, window_days=RATE_WINDOW_DAYS):
    """Events per day per group over the last ``window_days`` local days up to the cutoff.

    ``day_counts`` maps group index → {local date (ISO text) → events}. The window starts
    at local midnight ``window_days − 1`` days before the cutoff's date, or at the first day
    with events when that is later; the day holding the cutoff counts only as far as the
    cutoff. Returns (rates, days) or None when the window is empty.
    """
    first_day = min((date.fromisoformat(k) for counts in day_counts.values() for k, n in counts.items() if n),
                    default=None)
    if first_day is None:
        return None
    zone = cutoff_local.tzinfo
    start_day = max(first_day, cutoff_local.date() - timedelta(days=window_days - 1))
    start = datetime.combine(start_day, datetime.min.time(), tzinfo=zone)
    days = (cutoff_local - start).total_seconds() / 86400.0
    if days <= 0:
        return None
    rates = []
    for g in (0, 1):
        counts = day_counts.get(g, {})
        rates.append(sum(n for k, n in counts.items() if date.fromisoformat(k) >= start_day) / days)
    return tuple(rates), days


def projection(state: PlanState, *, events, pairs, share, rates, cutoff_local: datetime):
    """When the current plan completes at the given per-group rates (or None when it cannot be said).

    Events-based: the smaller group reaches the current plan's events; information-based:
    the events at which the information would reach the plan at the present variance.
    """
    if rates is None:
        return None
    per_day, _ = rates
    if pairs is not None:
        return None  # pairs close with their buckets, not at an event rate
    if state.kind == "information":
        target = events_for_information(min(events), share)
        if not math.isfinite(target):
            return None
    else:
        target = state.planned_now
    p = project_completion(list(events), target, list(per_day))
    out = {"days_left": p.days_left if p.reachable else None, "rates": list(per_day), "target": target}
    if p.reachable:
        out["completes_on"] = (cutoff_local + timedelta(days=p.days_left)).date().isoformat()
    return out


@dataclass(frozen=True)
class WorkedReplan:
    """A replan worked out from the recorded looks, ready to be recorded."""

    old_plan: dict
    new_plan: dict
    change: Replan
    boundary: AdaptiveBoundary
    state: PlanState
    power_after: float | None   # chance of finding the planned difference under the new plan


def _planning_inputs(design, state_rows):
    """The latest planning inputs: the last replan's, else the frozen plan's (None without any)."""
    for row in reversed(list(state_rows)):
        inputs = (row.get("new_plan") or {}).get("inputs")
        if inputs:
            return dict(inputs)
    inputs = (design.get("plan") or {}).get("inputs")
    return dict(inputs) if inputs else None


def work_out_replan(design: dict, testing_looks, replan_rows, futility, *, planned_per_group=None,
                    difference=None, sd=None, power=None, p1=None, p2=None) -> WorkedReplan:
    """The new plan and the boundaries it gets, from the recorded looks (nothing is written).

    Give ``planned_per_group``, or planning inputs (``difference`` and/or ``sd``/``power``
    for means, ``p1``/``p2``/``power`` for proportions); inputs not given keep their
    current values. Raises ``ReplanRefusedError`` (see ``AdaptiveBoundary.replan``) or
    ``InvalidArgumentError`` for inputs that make no plan.
    """
    if design.get("before_after"):
        raise ReplanRefusedError(
            "a before/after comparison cannot be replanned: its information fraction comes from the "
            "baseline's days as well as the events since the start, so a plan changed in events would not "
            "keep its error rate; restart it with the new plan instead")
    state = plan_state(design, replan_rows)
    boundary = resume_boundary(design, state, futility, testing_looks)
    paired = bool(design.get("pairing"))
    old_plan = {"planned_per_group": state.planned_now, "end": state.end}
    previous = _planning_inputs(design, replan_rows)
    if previous:
        old_plan["inputs"] = previous
    by_inputs = any(v is not None for v in (difference, sd, power, p1, p2))
    if (planned_per_group is None) == (not by_inputs):
        raise InvalidArgumentError("give either planned_per_group or planning inputs "
                                   "(difference, sd, power; p1, p2 for proportions), not both or neither")
    new_plan = {}
    if planned_per_group is not None:
        if isinstance(planned_per_group, bool) or not isinstance(planned_per_group, int) or planned_per_group < 2:
            raise InvalidArgumentError(f"planned_per_group must be a whole number of at least 2; got {planned_per_group!r}")
        end = planned_per_group / state.planned
        new_plan["planned_per_group"] = planned_per_group
    else:
        inputs = dict(previous or {})
        metric = design.get("metric", "mean")
        for key, value in (("difference", difference), ("sd", sd), ("power", power), ("p1", p1), ("p2", p2)):
            if value is not None:
                inputs[key] = float(value)
        inputs.setdefault("power", 0.8)
        inputs.setdefault("looks", state.looks)
        common = dict(alpha=design["alpha"], power=inputs["power"], alternative=design["alternative"],
                      spending=design["spending"], looks=int(inputs["looks"]))
        if metric == "proportion":
            if p1 is None and p2 is None and power is None:
                raise InvalidArgumentError("a proportion plan changes through p1, p2 or power")
            missing = [k for k in ("p1", "p2") if inputs.get(k) is None]
            if missing:
                raise InvalidArgumentError(f"{' and '.join(missing)} needed: the plan was given as planned_per_group")
            plan = plan_proportion(inputs["p1"], inputs["p2"], **common)
        else:
            missing = [k for k in ("difference", "sd") if inputs.get(k) is None]
            if missing:
                raise InvalidArgumentError(f"{' and '.join(missing)} needed: the plan was given as planned_per_group")
            plan = plan_mean(inputs["difference"], inputs["sd"], **common)
        planned = int(math.ceil(plan.max_per_group / 2.0)) if paired else int(plan.max_per_group)
        if state.kind == "information":
            end = plan_information(plan, design.get("null_difference", 0.0)) / state.maximum
        else:
            end = planned / state.planned
        new_plan.update(planned_per_group=planned, inputs={k: inputs[k] for k in sorted(inputs)},
                        difference=plan.difference, drift=plan.drift)
    new_plan["end"] = end
    if abs(end - state.end) < 1e-9:
        raise ReplanRefusedError(f"the new plan ({new_plan['planned_per_group']} per group) is the current one")
    z = 0.0
    if testing_looks:
        last = testing_looks[-1]
        z = z_of(last["statistic"], last["df"])
    reference = reference_fractions(state, boundary)
    change = boundary.replan(z if testing_looks else None, end, reference=reference)
    after = plan_state(design, list(replan_rows) + [{"record": change.to_dict(), "new_plan": new_plan}])
    power_after = None
    if after.drift is not None:
        power_after = boundary.conditional_power(z if testing_looks else 0.0, after.drift).in_direction
    return WorkedReplan(old_plan, new_plan, change, boundary, after, power_after)
