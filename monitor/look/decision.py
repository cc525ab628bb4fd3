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
* **t-based methods** (Welch, pooled, paired, clustered) use the nominal-level approach:
  the look crosses when its one-sided p-value in a tested direction is at or below the
  boundary's nominal level. z-based methods (z, proportions) compare the statistic with
  the boundary directly.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import datetime

from scipy import special

from ..design import Design
from ..errors import InvalidArgumentError
from ..stats.boundaries import (MIN_INCREMENT, FutilitySpec, LookBoundary, SequentialBoundary,
                                futility_decision, nominal_decision)
from ..stats.before_after import estimate_after_stop, information_fraction
from ..stats.inference import median_unbiased_estimate, repeated_confidence_interval, stagewise_p_value
from ..stats.summaries import MomentSummary
from ..vocabulary import DESIGN_EFFECT_WARNING, QUIET_STATES, STOPPED_STATES
from .cells import summary
from .statistic import Stat, day_design_effect, finite_or_none, futility_spec, statistic, t_critical

__all__ = ["LookInputs", "Evidence", "Decision", "weigh", "decide", "alert_kind"]

_Z_METHODS = ("z", "proportions")


@dataclass(frozen=True)
class LookInputs:
    """What the decision step reads: the frozen design and the running cells."""

    design: Design              # the frozen design, its shift fixed
    cells: dict                 # the merged running cells
    cutoff: datetime            # events up to here are in the cells
    excluded_total: int         # events excluded so far, all reasons
    last_fraction: float = 0.0  # information fraction at the last testing look (0 before any)


@dataclass(frozen=True)
class Evidence:
    """The figures of a look before any boundary is placed."""

    inputs: LookInputs
    s1: MomentSummary
    s2: MomentSummary
    stat: Stat
    planned: int                # planned events (pairs) per group
    fraction: float
    state: str                  # the decision when nothing is tested
    tests: bool                 # a statistic and new information: the look tests the boundary
    futility: FutilitySpec | None
    design_effect: object | None  # day-level DesignEffect, None when it cannot be measured
    warnings: tuple


@dataclass(frozen=True)
class Decision:
    """Where a look stands: its decision and, for a testing look, its boundary and interval."""

    decision: str
    boundary: LookBoundary | None = None
    boundary_number: int | None = None
    interval: tuple = (None, None)
    after_stop: dict | None = None

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
    planned = design.planned_per_group
    if design.before_after:
        fraction = before_after_fraction(design, cells, min(s1.n, s2.n))
    else:
        fraction = ((st.pairs or 0) if design.paired else min(s1.n, s2.n)) / planned

    state, tests, warnings = "collecting", False, []
    if st.problem:
        state = "data_problem"
        warnings.append(st.problem)
    elif st.awaiting_clusters:
        state = "awaiting_clusters"
        warnings.append(st.waiting)
    elif st.waiting:
        warnings.append(st.waiting)
    elif st.testable and fraction - inputs.last_fraction >= MIN_INCREMENT:
        tests = True
    elif st.testable:
        warnings.append("no new information since the last testing look; nothing spent at this look")

    de = day_design_effect(design, cells, s1, s2)
    if (de is not None and not design.clustered and not design.before_after
            and de.design_effect > DESIGN_EFFECT_WARNING):
        warnings.append(f"design effect {de.design_effect:.1f} at day level: events are not independent; "
                        f"set cluster_by = \"day\"")
    return Evidence(inputs, s1, s2, st, planned, fraction, state, tests, futility_spec(design), de,
                    tuple(warnings))


def decide(evidence: Evidence, boundary: SequentialBoundary | None = None) -> Decision:
    """The look's decision.

    A testing look needs ``boundary`` standing at the recorded testing looks (with the
    design's futility rule); this look is added to it, so afterwards it stands here.
    """
    if not evidence.tests:
        return Decision(evidence.state)
    if boundary is None:
        raise InvalidArgumentError("a testing look needs the boundary resumed at the recorded testing looks")
    st, design, fraction = evidence.stat, evidence.inputs.design, evidence.fraction
    alternative = design.alternative
    look = boundary.add_look(fraction)
    if design.method in _Z_METHODS and not design.clustered and not design.before_after:
        z = st.statistic
        crossed = (z >= look.z if alternative == "greater" else z <= -look.z if alternative == "less"
                   else abs(z) >= look.z)
    else:
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
    # Repeated confidence interval: the boundary on the statistic's own scale.
    if math.isfinite(look.z):
        critical = look.z if st.df is None else t_critical(look.nominal_p, st.df)
        low, high = repeated_confidence_interval(st.estimate, st.standard_error, critical, alternative)
        interval = (finite_or_none(low), finite_or_none(high))
    after = _after_stop(boundary, st, fraction, design) if decision in STOPPED_STATES else None
    return Decision(decision, look, len(boundary.looks), interval, after)


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
    return float(information_fraction(after_events / per_day, planned / per_day, days))


def _after_stop(boundary, st: Stat, fraction, design: Design) -> dict:
    """Stagewise-ordering p-value and median-unbiased estimate at the stop look."""
    fractions = [b.fraction for b in boundary.looks]
    upper = [b.z for b in boundary.looks]
    if design.before_after and st.standard_error and st.df:
        return _after_stop_on_t_scale(fractions, upper, st, design)
    # t statistics enter the z-scale calculation through their one-sided p-value.
    if st.df is None:
        z = st.statistic
    else:
        z = float(-special.ndtri(st.p_upper)) if 0 < st.p_upper < 1 else math.copysign(40.0, st.statistic)
    out = {"stop_look": len(fractions), "z_observed": z}
    try:
        out["p_value"] = stagewise_p_value(fractions, upper, len(fractions), z, design.alternative)
        if st.standard_error:
            info_max = 1.0 / (st.standard_error ** 2 * fraction)
            est = median_unbiased_estimate(fractions, upper, len(fractions), z, info_max,
                                           design.alternative, alpha=design.alpha)
            out["median_unbiased_estimate"] = est.estimate
            out["adjusted_ci"] = list(est.ci)
            # The look's own estimate: for t statistics the z-scale figure differs slightly.
            out["naive_estimate"] = st.estimate
    except (InvalidArgumentError, ValueError, RuntimeError) as exc:  # numerical trouble: keep the look
        out["note"] = f"adjusted inference unavailable: {exc}"
    return out


def _after_stop_on_t_scale(fractions, upper, st: Stat, design) -> dict:
    """Adjusted inference of a before/after stop: the median-unbiased estimate on the t scale.

    Taking the z-scale drift straight to the difference scale shrinks a t-based estimate
    by about z/t; see :func:`monitor.stats.before_after.estimate_after_stop`.
    """
    z = float(-special.ndtri(st.p_upper)) if 0 < st.p_upper < 1 else math.copysign(40.0, st.statistic)
    out = {"stop_look": len(fractions), "z_observed": z}
    try:
        est = estimate_after_stop(fractions, upper, len(fractions), st.estimate, st.standard_error, st.df,
                                  null_difference=design.null_difference, alternative=design.alternative,
                                  alpha=design.alpha)
        out.update(p_value=est.p_value, median_unbiased_estimate=est.estimate, adjusted_ci=list(est.ci),
                   naive_estimate=st.estimate)
    except (InvalidArgumentError, ValueError, RuntimeError) as exc:  # numerical trouble: keep the look
        out["note"] = f"adjusted inference unavailable: {exc}"
    return out


def alert_kind(previous_state: str, new_state: str) -> str | None:
    """The alert a look raises: its new state when that changed, except between quiet states."""
    if new_state == previous_state or (new_state in QUIET_STATES and previous_state in QUIET_STATES):
        return None
    return new_state
