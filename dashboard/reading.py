"""The plain-language reading of a comparison: what the result says and what it does not.

Pure text from a status row and its looks (``readback.get_comparison`` and
``readback.look_history``); no Streamlit, so every sentence can be unit-tested.
"""

from __future__ import annotations

from monitor.vocabulary import DESIGN_EFFECT_WARNING

from .formats import confidence_percent, fmt, fraction_text, group_names, interval_text

__all__ = ["CAUTION", "reading"]

CAUTION = (
    "A statistical signal supports, but never replaces, operational judgement and your local "
    "rules: check the data, what changed on the floor and the cost of acting before you act."
)


def reading(row, looks):
    """Paragraphs reading the current result, ending with the caution."""
    if not looks:
        return ["No look has been recorded yet, so there is nothing to read."]
    groups = group_names(row)
    what = f"{groups[0]} minus {groups[1]}"
    if row.get("metric") == "proportion":
        what += " (difference in rates)"
    lines = _state_lines(row, looks[-1], what)
    if (row.get("design_effect") is not None and row["design_effect"] > DESIGN_EFFECT_WARNING
            and row.get("clusters") is None):
        lines.append(
            f"The day-level design effect is {row['design_effect']:.2f}: events on the same day move "
            "together, so this interval is too narrow and the test too eager. Cluster the comparison."
        )
    lines.append(CAUTION)
    return lines


def _state_lines(row, last, what):
    state = row["state"]
    est = interval_text(row)
    level = confidence_percent(row)
    if state == "data_problem":
        return [
            f"At look {last['look']} the data could not support a test "
            f"({'; '.join(last['warnings']) or 'see the warnings'}). "
            "No conclusion can be drawn until the data are fixed; the comparison keeps looking."
        ]
    if state == "awaiting_clusters":
        return [
            f"Only {row['clusters']} clusters so far, below the minimum the design asks for. The current "
            f"estimate of {what} is {est}, but no decision is taken until there are enough clusters, "
            "because with few clusters the standard error itself is unreliable."
        ]
    if state == "collecting":
        return [
            f"After {row['looks']} looks ({fraction_text(row)} of the planned events) the estimated "
            f"difference, {what}, is {est} ({level} repeated confidence interval). The test statistic "
            f"{fmt(last['statistic'])} is inside this look's boundary of ±{fmt(last['boundary_z'])}, so "
            "the data do not yet show a difference beyond what chance can produce at this stage.",
            "This is not evidence that the groups are the same: every difference inside the interval "
            "is still consistent with the data. Keep collecting.",
        ]
    if state == "difference_found":
        return [
            f"At look {last['look']} the test statistic {fmt(last['statistic'])} crossed the efficacy "
            f"boundary {fmt(last['boundary_z'])}: the groups differ. The estimated difference, {what}, is "
            f"{est}; the {level} repeated confidence interval leaves out the null difference of "
            f"{fmt(row.get('null_difference') or 0.0)}.",
            "It does not say why they differ, nor whether a difference this size matters for the "
            "operation; the estimate at a stop tends to overstate the size, so read the adjusted "
            "estimate below.",
        ]
    if state == "no_material_difference":
        return [
            f"At look {last['look']} the statistic fell below the futility boundary: a difference of the "
            f"planned size is unlikely. The estimate, {what}, is {est}.",
            "It does not prove the groups are identical; smaller differences inside the interval remain possible.",
        ]
    if state == "plan_complete":
        return [
            f"The planned events were reached at look {last['look']} without crossing the boundary. The "
            f"estimate, {what}, is {est}: no difference of the planned size was detected.",
            "Differences inside the interval cannot be ruled out; a smaller difference may still be real.",
        ]
    return []
