"""The Look row's values from a look's evidence and decision (pure)."""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from datetime import datetime

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
    if st.cluster_design_effect is not None:
        detail["cluster_design_effect"] = st.cluster_design_effect
    if st.before_after is not None:
        detail["before_after"] = st.before_after
    if decision.after_stop is not None:
        detail["after_stop"] = decision.after_stop
    if counts.late_events:
        detail["late_events"] = counts.late_events
    return detail


def look_row(moment: LookMoment, evidence: Evidence, decision: Decision, counts: Counts) -> dict:
    """The values of the Look row (``duration_ms`` and ``detail`` are added by the caller)."""
    st, s1, s2, de = evidence.stat, evidence.s1, evidence.s2, evidence.design_effect
    boundary = decision.boundary
    information = (1.0 / st.standard_error ** 2) if st.standard_error else None
    low, high = decision.interval
    return dict(
        look_number=moment.look_number, as_of=moment.as_of, cutoff=moment.cutoff, recorded_at=moment.as_of,
        arrival_watermark=None if moment.arrival is None else json.dumps(moment.arrival),
        n1=s1.n, n2=s2.n, mean1=finite_or_none(s1.mean), mean2=finite_or_none(s2.mean),
        sd1=finite_or_none(s1.sd), sd2=finite_or_none(s2.sd), pairs=st.pairs,
        new_events=counts.new_events, late_events=counts.late_events, excluded=counts.excluded,
        estimate=_float_column(st.estimate), standard_error=_float_column(st.standard_error),
        statistic=_float_column(st.statistic), df=_float_column(st.df), p_value=_float_column(st.p_value),
        information=_float_column(information), fraction=evidence.fraction,
        boundary_z=None if boundary is None else _float_column(boundary.z),
        futility_z=None if boundary is None else _float_column(boundary.futility_z),
        nominal_p=None if boundary is None else _float_column(boundary.nominal_p),
        cumulative_alpha=None if boundary is None else _float_column(boundary.cumulative_alpha),
        ci_low=low, ci_high=high, clusters=st.clusters,
        design_effect=None if de is None else float(de.design_effect),
        effective_n=None if de is None else finite_or_none(de.effective_total),
        decision=decision.decision, boundary_look=decision.boundary_number, warnings=json_safe(list(evidence.warnings)),
    )
