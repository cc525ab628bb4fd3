"""The decision step of a look (pure: no SQL, no clock).

``weigh`` turns the running cells, the frozen design and the last testing look into the
evidence: the fixed-sample statistic, the information fraction, the design effect, the
warnings, and whether this look tests against the boundary. ``decide`` places a testing
look against the sequential boundary (resumed at the recorded testing looks by the
caller) and gives the decision, the repeated confidence interval and, at a stop, the
adjusted inference.

* **Information fraction.** Events so far over planned events per group, the smaller of
  the two groups (pairs over planned pairs for paired comparisons). Clustered comparisons
  use the same event fraction: an information fraction from ``1/variance`` would wobble
  with the variance estimate (and could fall), while events only grow; plan the events
  with the design effect in mind.
* **Which looks test.** A look tests against the boundary only when the fraction has
  grown since the last testing look and a statistic exists; other looks (no new
  information, too few clusters, a data problem) are recorded but spend nothing.
* **t-based methods** (Welch, pooled, paired, clustered) use exact sequential t
  boundaries at the degrees of freedom each look has (``stats.sequential_t``), read as a
  calibrated nominal level: the look crosses when its one-sided p-value in a tested
  direction is at or below it. z-based methods (z, proportions) compare the statistic
  with the boundary directly; rates use the score statistic and score repeated intervals.
* **Minimums.** A paired comparison decides from ``min_pairs`` complete pairs; a
  clustered one from ``min_clusters`` clusters, and when its clusters each belong to one
  group (crews, batches) from that many per group (at least three each), with no
  statistic recorded while it waits.
* **Design effect.** Reported from ``MIN_CLUSTERS_FOR_DESIGN_EFFECT`` days with events;
  before that the look says it is not yet measurable.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import datetime

from scipy import special

from ..design import Design
from ..errors import InvalidArgumentError
from ..stats.adaptive import AdaptiveBoundary, AdaptiveLook
from ..stats.boundaries import (MIN_INCREMENT, FutilitySpec, LookBoundary, SequentialBoundary,
                                futility_decision, nominal_decision)
from ..stats.before_after import information_fraction as before_after_information
from ..stats.inference import adjusted_inference, repeated_confidence_interval
from ..stats.proportions import score_interval, score_statistic
from ..stats.sequential_t import SequentialTBoundary
from ..stats.summaries import MomentSummary
from ..vocabulary import DESIGN_EFFECT_WARNING, QUIET_STATES, STOPPED_STATES, design_effect_warning
from .cells import summary
from .plan import (PlanState, conditional_powers, original_fraction, plan_state, projection, recent_rates,
                   z_of)
from .statistic import Stat, day_design_effect, finite_or_none, futility_spec, statistic, t_critical

__all__ = ["LookInputs", "Evidence", "Decision", "weigh", "decide", "alert_kind", "t_based", "new_boundary",
           "resumed_boundary", "after_stop"]

_Z_METHODS = ("z", "proportions")


@dataclass(frozen=True)
class LookInputs:
    """What the decision step reads: the frozen design and the running cells."""

    design: Design              # the frozen design, its shift fixed
    cells: dict                 # the merged running cells
    cutoff: datetime            # events up to here are in the cells
    excluded_total: int         # events excluded so far, all reasons
    last_fraction: float = 0.0  # information fraction at the last testing look (0 before any)
    plan: PlanState | None = None   # the plan after the recorded replans (None: the design's own)

    def __post_init__(self):
        if self.plan is None:
            object.__setattr__(self, "plan", plan_state(self.design.to_stored()))


@dataclass(frozen=True)
class Evidence:
    """The figures of a look before any boundary is placed."""

    inputs: LookInputs
    s1: MomentSummary
    s2: MomentSummary
    stat: Stat
    planned: int                # planned events (pairs) per group of the current plan
    fraction: float             # on the original plan's scale (nan when no information can be measured)
    state: str                  # the decision when nothing is tested
    tests: bool                 # a statistic and new information: the look tests the boundary
    futility: FutilitySpec | None
    design_effect: object | None  # day-level DesignEffect, None when it cannot be measured
    warnings: tuple
    projection: dict | None = None  # when the current plan completes at the recent event rates


@dataclass(frozen=True)
class Decision:
    """Where a look stands: its decision and, for a testing look, its boundary and interval."""

    decision: str
    boundary: LookBoundary | AdaptiveLook | None = None   # AdaptiveLook after a change of plan
    boundary_number: int | None = None
    interval: tuple = (None, None)
    after_stop: dict | None = None
    outlook: dict | None = None   # conditional powers at a testing look that did not stop

    @property
    def stopped(self) -> bool:
        return self.decision in STOPPED_STATES


def weigh(inputs: LookInputs) -> Evidence:
    """Statistic, fraction, design effect and warnings of the running cells."""
    design, cells = inputs.design, inputs.cells
    shift = design.shift or 0.0
    s1 = summary(cells, "total", 0, "", shift)
    s2 = summary(cells, "total", 1, "", shift)
    st = statistic(design, cells, s1, s2, inputs.cutoff, inputs.excluded_total)
    plan = inputs.plan
    planned = plan.planned_now
    events = (st.pairs or 0) if design.paired else min(s1.n, s2.n)
    if design.before_after:
        # Never replanned (replan refuses a before/after comparison), so the plan is the design's.
        fraction = before_after_fraction(design, cells, events)
    else:
        fraction = original_fraction(plan, events=events, standard_error=st.standard_error)
    # Fractions of the current segment move by (step / segment length): ask for a step that
    # is still at least MIN_INCREMENT there.
    step = MIN_INCREMENT * max(1.0, plan.end)

    state, tests, warnings = "collecting", False, []
    if st.problem:
        state = "data_problem"
        warnings.append(st.problem)
    elif st.awaiting_clusters:
        state = "awaiting_clusters"
        warnings.append(st.waiting)
    elif st.waiting:
        warnings.append(st.waiting)
    elif st.testable and math.isfinite(fraction) and fraction - inputs.last_fraction >= step:
        tests = True
    elif st.testable:
        warnings.append("no new information since the last testing look; nothing spent at this look")

    de = day_design_effect(design, cells, s1, s2)
    if (de is not None and de.measurable and not design.clustered and not design.before_after
            and de.design_effect > DESIGN_EFFECT_WARNING):
        warnings.append(design_effect_warning(de.design_effect))
    return Evidence(inputs, s1, s2, st, planned, fraction, state, tests, futility_spec(design), de,
                    tuple(warnings), _projection(inputs, s1, s2, st, fraction))


def _projection(inputs: LookInputs, s1, s2, st: Stat, fraction):
    """Days to the current plan's end at each group's events per day over the last week."""
    if s1.n == 0 or s2.n == 0 or inputs.cutoff is None:
        return None
    days = {0: {}, 1: {}}
    for (kind, gi, key), value in inputs.cells.items():
        if kind == "day" and gi in days:
            days[gi][key] = value[0]
    cutoff = inputs.cutoff.astimezone(inputs.design.measure.zone)
    share = fraction / inputs.plan.end if math.isfinite(fraction) else math.nan
    return projection(inputs.plan, events=(s1.n, s2.n), pairs=st.pairs if inputs.design.paired else None,
                      share=share, rates=recent_rates(days, cutoff), cutoff_local=cutoff)


def t_based(design: Design) -> bool:
    """Whether a design's statistic is a t (paired, pooled, Welch, any clustered one, a ratio, a
    before/after DiD on its Bell–McCaffrey df).

    A ratio of sums is always tested with Welch's degrees of freedom (cluster-based when clustered).
    """
    return (design.ratio is not None or design.method not in _Z_METHODS or design.clustered
            or design.before_after)


def new_boundary(design: Design, futility=None):
    """An empty sequential boundary of the design: exact sequential t for t statistics."""
    cls = SequentialTBoundary if t_based(design) else SequentialBoundary
    return cls(design.alpha, design.spending, design.alternative, futility=futility)


def resumed_boundary(design: Design, recorded, futility=None):
    """The design's boundary standing at recorded testing looks (rows with fraction, boundary_z,
    futility_z and, for t statistics, df)."""
    futility_z = ([(-math.inf if r.futility_z is None else r.futility_z) for r in recorded]
                  if futility is not None else None)
    fractions = [r.fraction for r in recorded]
    zs = [r.boundary_z for r in recorded]
    if t_based(design):
        return SequentialTBoundary.resume(design.alpha, design.spending, design.alternative,
                                          fractions, [r.df for r in recorded], zs, futility_z=futility_z,
                                          futility=futility)
    return SequentialBoundary.resume(design.alpha, design.spending, design.alternative,
                                     fractions, zs, futility_z=futility_z, futility=futility)


def decide(evidence: Evidence, boundary=None) -> Decision:
    """The look's decision.

    A testing look needs ``boundary`` standing at the recorded testing looks (with the
    design's futility rule; see :func:`resumed_boundary`): while the plan is the original
    one, a :class:`SequentialBoundary` for z statistics and a :class:`SequentialTBoundary`
    for t statistics; after a change of plan an :class:`AdaptiveBoundary` with the
    recorded replans. This look is added to it, so afterwards it stands here.
    """
    if not evidence.tests:
        return Decision(evidence.state)
    if boundary is None:
        raise InvalidArgumentError("a testing look needs the boundary resumed at the recorded testing looks")
    st, design, fraction = evidence.stat, evidence.inputs.design, evidence.fraction
    alternative = design.alternative
    if isinstance(boundary, AdaptiveBoundary):
        return _decide_replanned(evidence, boundary)
    t_stat = t_based(design)
    if t_stat != isinstance(boundary, SequentialTBoundary):
        raise InvalidArgumentError("t statistics need a SequentialTBoundary, z statistics a SequentialBoundary")
    look = boundary.add_look(fraction, st.df) if t_stat else boundary.add_look(fraction)
    if not t_stat:
        z = st.statistic
        crossed = (z >= look.z if alternative == "greater" else z <= -look.z if alternative == "less"
                   else abs(z) >= look.z)
    else:
        # The exact sequential t boundary as a calibrated nominal level (see stats.sequential_t).
        crossed = nominal_decision(st.p_upper, st.p_lower, look, alternative)
    if crossed:
        decision = "difference_found"
    elif evidence.futility is not None and futility_decision(st.p_upper, st.p_lower, look,
                                                             boundary.futility_direction):
        decision = "no_material_difference"
    elif look.final:
        decision = "plan_complete"
    else:
        decision = "collecting"
    interval = (None, None)
    # Repeated confidence interval: the boundary on the statistic's own scale; for rates the
    # score test inverted at the boundary (it keeps its coverage at low rates and unequal sizes).
    if math.isfinite(look.z):
        if st.counts is not None:
            x1, n1, x2, n2 = st.counts
            low, high = score_interval(x1, n1, x2, n2, look.z, alternative)
        else:
            critical = look.z if st.df is None else t_critical(look.nominal_p, st.df)
            low, high = repeated_confidence_interval(st.estimate, st.standard_error, critical, alternative)
        interval = (finite_or_none(low), finite_or_none(high))
    after = outlook = None
    if decision in STOPPED_STATES:
        after = after_stop(boundary, st, design)
    else:
        outlook = conditional_powers(evidence.inputs.plan, _as_adaptive(boundary, design, evidence.futility),
                                     z_of(st.statistic, st.df), fraction)
    return Decision(decision, look, len(boundary.looks), interval, after, outlook)


def _as_adaptive(boundary, design: Design, futility) -> AdaptiveBoundary:
    """The original plan's boundary, standing at its looks, as an :class:`AdaptiveBoundary` (on
    the z scale the looks are recorded on), for conditional power and the outlook."""
    looks = [{"fraction": b.fraction, "z": b.z,
              "futility_z": -math.inf if b.futility_z is None else b.futility_z} for b in boundary.looks]
    return AdaptiveBoundary.resume(design.alpha, design.spending, design.alternative, looks, futility=futility)


def _decide_replanned(evidence: Evidence, boundary: AdaptiveBoundary) -> Decision:
    """The look's decision after a change of plan (boundaries by the conditional error principle).

    z statistics are compared on their own scale; t statistics enter through their one-sided
    p-values (the z with the same tail), as the replanned remainder is on the z scale.
    """
    st, design, fraction = evidence.stat, evidence.inputs.design, evidence.fraction
    alternative = design.alternative
    look = boundary.add_look(fraction)
    if not t_based(design):
        side = look.decision(st.statistic)
    else:
        side = look.decision_from_p(st.p_upper, st.p_lower)
    original = look.segment == 0
    if side != 0:
        decision = "difference_found"
    elif (original and evidence.futility is not None
          and futility_decision(st.p_upper, st.p_lower, look, boundary.original.futility_direction)):
        decision = "no_material_difference"
    elif look.final:
        decision = "plan_complete"
    else:
        decision = "collecting"
    interval = (None, None)
    # Repeated confidence interval: the boundary on the statistic's own scale (original looks).
    magnitude = look.bound_lower if alternative == "less" else look.bound_upper
    if original and math.isfinite(magnitude):
        critical = magnitude if st.df is None else t_critical(float(special.ndtr(-magnitude)), st.df)
        low, high = repeated_confidence_interval(st.estimate, st.standard_error, critical, alternative)
        interval = (finite_or_none(low), finite_or_none(high))
    after = outlook = None
    if decision in STOPPED_STATES:
        after = (after_stop(boundary.original, st, design) if original else
                 {"note": "adjusted inference after a change of plan is not computed"})
    else:
        outlook = conditional_powers(evidence.inputs.plan, boundary, z_of(st.statistic, st.df), fraction)
    return Decision(decision, look, len(boundary.looks), interval, after, outlook)


def before_after_fraction(design, cells, after_events) -> float:
    """Information fraction of a before/after comparison (counts only, never a variance).

    ``(1/A_max + 1/B) / (1/A + 1/B)`` with ``A`` = events since the start (the smaller
    group) over events per day, ``A_max`` the planned events over events per day and
    ``B`` the baseline's days. Events per day are the plan's, else the baseline's own
    (its smaller group's events over its days).
    """
    window = design.window
    planned = design.planned_per_group
    days = float(window.baseline_days)
    per_day = window.events_per_day
    if not per_day:
        totals = [cells.get(("baseline_total", gi, ""), (0, 0.0, 0.0))[0] for gi in (0, 1)]
        per_day = min(totals) / days if min(totals) > 0 else planned
    return float(before_after_information(after_events / per_day, planned / per_day, days))


def after_stop(boundary, st: Stat, design: Design) -> dict:
    """Stagewise p-value, median-unbiased estimate and adjusted interval at the stop look.

    On the difference's own scale, from the stop look's estimate, its standard error and
    the design's null difference (``stats.inference.adjusted_inference``); t statistics
    use the sequential t law at the looks' df, rates pivot on the score statistic with the
    unpooled standard error setting the scale.
    """
    fractions = [b.fraction for b in boundary.looks]
    upper = [b.z for b in boundary.looks]
    t_stat = isinstance(boundary, SequentialTBoundary)
    z = st.statistic
    if t_stat:
        # The observed t as the z with the same tail (the scale the boundaries are recorded on).
        z = float(-special.ndtri(st.p_upper)) if 0 < st.p_upper < 1 else math.copysign(40.0, st.statistic)
    out = {"stop_look": len(fractions), "z_observed": z, "statistic_observed": st.statistic,
           "naive_estimate": st.estimate}
    if t_stat:
        out["df"] = st.df
    se, statistic_at = st.standard_error, None
    if st.counts is not None:
        x1, n1, x2, n2 = st.counts
        p1, p2 = x1 / n1, x2 / n2
        unpooled = math.sqrt(p1 * (1 - p1) / n1 + p2 * (1 - p2) / n2)
        se = unpooled if unpooled > 0 else se

        def statistic_at(delta):
            return score_statistic(x1, n1, x2, n2, min(max(delta, -1 + 1e-9), 1 - 1e-9))[0]
    try:
        if not se:
            raise InvalidArgumentError("the standard error at the stop look is zero")
        result = adjusted_inference(fractions, upper, len(fractions), st.estimate, se,
                                    null_difference=design.null_difference, alternative=design.alternative,
                                    alpha=design.alpha, dfs=list(boundary.dfs) if t_stat else None,
                                    statistic_at=statistic_at)
        out["p_value"] = result.p_value
        out["median_unbiased_estimate"] = result.estimate
        out["adjusted_ci"] = list(result.ci)
    except (InvalidArgumentError, ValueError, RuntimeError) as exc:  # numerical trouble: keep the look
        out["note"] = f"adjusted inference unavailable: {exc}"
    return out


def alert_kind(previous_state: str, new_state: str) -> str | None:
    """The alert a look raises: its new state when that changed, except between quiet states."""
    if new_state == previous_state or (new_state in QUIET_STATES and previous_state in QUIET_STATES):
        return None
    return new_state
