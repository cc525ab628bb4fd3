"""The Look row's values from a look's evidence and decision (pure)."""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from datetime import datetime

from ..stats.clustered import NOT_YET_MEASURABLE
from ..vocabulary import json_safe
from .cells import Counts
from .decision import Decision, Evidence
from .statistic import finite_or_none

__all__ = ["LookMoment", "look_row", "look_detail"]


def _float_column(x):
    """For Float columns: nan becomes NULL, infinities are kept (unlike a figure shown or sent)."""
    if x is None:
        return None
    x = float(x)
    return None if math.isnan(x) else x


@dataclass(frozen=True)
class LookMoment:
    """When a look stands: its number, its as-of and cutoff, and the source's arrival watermark."""

    look_number: int
    as_of: datetime
    cutoff: datetime
    arrival: object = None      # the source's arrival watermark (None without an arrival column)


def look_detail(evidence: Evidence, decision: Decision, counts: Counts) -> dict:
    """The look's ``detail`` (before its timings and state token are added)."""
    st = evidence.stat
    detail = {"shift": evidence.inputs.design.shift or 0.0, "planned_per_group": evidence.planned,
              "excluded_new": counts.excluded_new}
    if st.fixed is not None:
        detail["fixed"] = st.fixed
    if st.ratio is not None:
        detail["ratio"] = st.ratio
        detail["shift_den"] = evidence.inputs.design.shift_den or 0.0
    if st.cluster_design_effect is not None:
        detail["cluster_design_effect"] = st.cluster_design_effect
    if st.before_after is not None:
        detail["before_after"] = st.before_after
    if st.cluster_counts is not None:
        detail["cluster_counts"] = st.cluster_counts
    de = evidence.design_effect
    if de is not None and not de.measurable:
        # Too few days for the figure to mean anything: say so instead of a number.
        detail["design_effect"] = NOT_YET_MEASURABLE
    if decision.after_stop is not None:
        detail["after_stop"] = decision.after_stop
    if counts.late_events:
        detail["late_events"] = counts.late_events
    plan = evidence.inputs.plan
    if plan.end != 1.0 or plan.kind != "events":
        detail["plan"] = {"fraction": plan.kind, "end": plan.end,
                          "share": evidence.fraction / plan.end if math.isfinite(evidence.fraction) else None}
    look = decision.boundary
    if look is not None and getattr(look, "segment", 0) > 0:
        detail["bounds"] = look.to_dict()
    outlook = dict(evidence.projection or {})
    outlook.update(decision.outlook or {})
    if outlook and not decision.stopped:
        detail["outlook"] = outlook
    return detail


def _adaptive(look) -> bool:
    """Whether the look's boundary came from a plan that has been changed (an ``AdaptiveLook``)."""
    return hasattr(look, "segment")


def _nominal_p(look, alternative):
    if not _adaptive(look):
        return look.nominal_p
    return look.nominal_p_lower if alternative == "less" else look.nominal_p_upper


def _cumulative(look):
    return look.cumulative_level if _adaptive(look) else look.cumulative_alpha


def _tested_side(look, alternative):
    """The efficacy bound as a magnitude on the tested side: the original engine's z, and after
    a replan the bound for the z of all data (group 1 above group 2; below for ``less``)."""
    if not _adaptive(look):
        return look.z
    if look.segment == 0:
        return look.bound_lower if alternative == "less" else look.bound_upper
    return -look.lower_z if alternative == "less" else look.upper_z


def look_row(moment: LookMoment, evidence: Evidence, decision: Decision, counts: Counts) -> dict:
    """The values of the Look row (``duration_ms`` and ``detail`` are added by the caller)."""
    st, s1, s2, de = evidence.stat, evidence.s1, evidence.s2, evidence.design_effect
    boundary = decision.boundary
    alternative = evidence.inputs.design.alternative
    information = (1.0 / st.standard_error ** 2) if st.standard_error else None
    low, high = decision.interval
    # A ratio comparison's group figure is its ratio of sums (the numerator's mean says little).
    mean1, mean2 = (s1.mean, s2.mean) if st.ratio is None else (st.ratio["ratio1"], st.ratio["ratio2"])
    sd1, sd2 = (s1.sd, s2.sd) if st.ratio is None else (None, None)
    return dict(
        look_number=moment.look_number, as_of=moment.as_of, cutoff=moment.cutoff, recorded_at=moment.as_of,
        arrival_watermark=None if moment.arrival is None else json.dumps(moment.arrival),
        n1=s1.n, n2=s2.n, mean1=finite_or_none(mean1), mean2=finite_or_none(mean2),
        sd1=finite_or_none(sd1), sd2=finite_or_none(sd2), pairs=st.pairs,
        new_events=counts.new_events, late_events=counts.late_events, excluded=counts.excluded,
        estimate=_float_column(st.estimate), standard_error=_float_column(st.standard_error),
        statistic=_float_column(st.statistic), df=_float_column(st.df), p_value=_float_column(st.p_value),
        information=_float_column(information), fraction=_float_column(evidence.fraction),
        boundary_z=None if boundary is None else _float_column(_tested_side(boundary, alternative)),
        futility_z=None if boundary is None else _float_column(boundary.futility_z),
        nominal_p=None if boundary is None else _float_column(_nominal_p(boundary, alternative)),
        # After a replan the segment spends a conditional level, recorded in detail["bounds"].
        cumulative_alpha=None if boundary is None or getattr(boundary, "segment", 0) > 0 else _float_column(
            _cumulative(boundary)),
        ci_low=low, ci_high=high, clusters=st.clusters,
        design_effect=None if de is None or not de.measurable else float(de.design_effect),
        effective_n=None if de is None or not de.measurable else finite_or_none(de.effective_total),
        decision=decision.decision, boundary_look=decision.boundary_number, warnings=json_safe(list(evidence.warnings)),
    )
