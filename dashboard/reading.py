"""The plain-language reading of a comparison: what the result says and what it does not.

Pure text from a status row and its looks (``readback.get_comparison`` and
``readback.look_history``); no Streamlit, so every sentence can be unit-tested.

A look is read on the scale its decision was taken on (``dashboard.scale``): a z look by its
z against the boundary, a t look by its one-sided p-value against the nominal level, which
is the same as its z-equivalent against the boundary. The words and the decision chart use
the same numbers, so the reading cannot call a look inside a boundary the chart shows it
beyond.
"""

from __future__ import annotations

from monitor.vocabulary import DESIGN_EFFECT_WARNING

from . import scale
from .formats import bounds_text, confidence_percent, fmt, fraction_text, group_names, interval_text, p_text

__all__ = ["CAUTION", "reading", "testing_look", "statistic_phrase", "boundary_phrase"]

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
    lines = _state_lines(row, looks, what)
    if (row.get("design_effect") is not None and row["design_effect"] > DESIGN_EFFECT_WARNING
            and row.get("clusters") is None):
        lines.append(
            f"The day-level design effect is {row['design_effect']:.2f}: events on the same day move "
            "together, so this interval is too narrow and the test too eager. Cluster the comparison."
        )
    lines.append(CAUTION)
    return lines


def testing_look(looks):
    """The newest look that tested (recorded a boundary), or None when none has yet."""
    for look in reversed(looks):
        if look.get("boundary_z") is not None and look.get("statistic") is not None:
            return look
    return None


def boundary_phrase(boundary_z, alternative):
    """``±3.301`` two-sided, ``3.301`` for "greater", ``−3.301`` for "less"."""
    if alternative == "greater":
        return fmt(boundary_z)
    if alternative == "less":
        return f"−{fmt(boundary_z)}"
    return f"±{fmt(boundary_z)}"


def statistic_phrase(look):
    """The look's statistic as its decision read it.

    ``"z = 1.84"`` for a z look; for a t look the t, its degrees of freedom, its one-sided
    p-value and the z-equivalent the boundary is compared with.
    """
    statistic, df = look.get("statistic"), look.get("df")
    if df is None:
        return f"z = {fmt(statistic)}"
    p = scale.one_sided_p(statistic, df)
    z = scale.z_equivalent(statistic, df)
    return (f"t = {fmt(statistic)} on {fmt(df, 3)} degrees of freedom (one-sided p-value {p_text(p)}, "
            f"the same tail as z = {fmt(z)})")


def _estimate_text(row, what, tested=None):
    if row.get("estimate") is None:
        return f"there is no estimate of {what} yet"
    if row.get("ci_low") is None and row.get("ci_high") is None:
        if tested is not None and (tested.get("ci_low") is not None or tested.get("ci_high") is not None):
            return (f"the estimated difference, {what}, is {fmt(row['estimate'])}; the newest "
                    f"{confidence_percent(row)} repeated confidence interval, from look {tested['look']}, is "
                    f"{bounds_text(tested.get('ci_low'), tested.get('ci_high'))}")
        return f"the estimated difference, {what}, is {interval_text(row)}"
    return f"the estimated difference, {what}, is {interval_text(row)} ({confidence_percent(row)} repeated confidence interval)"


def _untested_note(looks, tested):
    """Why the newest look is not the one read (it tested nothing new), or an empty string."""
    last = looks[-1]
    if tested is None or last["look"] == tested["look"]:
        return ""
    why = "; ".join(last["warnings"]) or "nothing new to test"
    return f" Look {last['look']} took no test ({why}), so look {tested['look']} is the one read here."


def _state_lines(row, looks, what):
    state = row["state"]
    last = looks[-1]
    tested = testing_look(looks)
    alternative = row.get("alternative") or "two-sided"
    if state == "data_problem":
        return [
            f"At look {last['look']} the data could not support a test "
            f"({'; '.join(last['warnings']) or 'see the warnings'}). "
            "No conclusion can be drawn until the data are fixed; the comparison keeps looking."
        ]
    if state == "awaiting_clusters":
        return [
            f"Only {row['clusters']} clusters so far, below the minimum the design asks for. So far "
            f"{_estimate_text(row, what)}, but no decision is taken until there are enough clusters, "
            "because with few clusters the standard error itself is unreliable."
        ]
    if state == "collecting":
        return _collecting_lines(row, looks, tested, what, alternative)
    if state == "difference_found":
        look = tested or last
        return [
            f"At look {look['look']} the test statistic, {statistic_phrase(look)}, crossed the efficacy "
            f"boundary of {boundary_phrase(look.get('boundary_z'), alternative)}: the groups differ. "
            f"At the stop {_estimate_text(row, what)}; the interval leaves out the null difference of "
            f"{fmt(row.get('null_difference') or 0.0)}.",
            "It does not say why they differ, nor whether a difference this size matters for the "
            "operation; the estimate at a stop tends to overstate the size, so read the adjusted "
            "estimate below.",
        ]
    if state == "no_material_difference":
        return [
            f"At look {last['look']} the statistic fell below the futility boundary: a difference of the "
            f"planned size is unlikely. The estimate, {what}, is {interval_text(row)}.",
            "It does not prove the groups are identical; smaller differences inside the interval remain possible.",
        ]
    if state == "plan_complete":
        return [
            f"The planned evidence was reached at look {last['look']} without crossing the boundary. The "
            f"estimate, {what}, is {interval_text(row)}: no difference of the planned size was detected.",
            "Differences inside the interval cannot be ruled out; a smaller difference may still be real.",
        ]
    return []


def _collecting_lines(row, looks, tested, what, alternative):
    progress = f"After {row['looks']} looks ({fraction_text(row)} of the planned evidence)"
    if tested is None:
        why = "; ".join(looks[-1]["warnings"]) or "not enough data yet"
        return [
            f"{progress} no test has been taken yet ({why}); {_estimate_text(row, what)}. "
            "The monitor judges once the data allow a test. Keep collecting."
        ]
    z = scale.z_equivalent(tested["statistic"], tested.get("df"))
    boundary = boundary_phrase(tested["boundary_z"], alternative)
    if scale.crossed(z, tested["boundary_z"], alternative):
        # The state says the look did not stop; say so rather than call it inside.
        position = (f"is at or beyond this look's boundary of {boundary}, yet the look recorded no "
                    "crossing; check the look's warnings in the history")
    else:
        position = (f"is inside this look's boundary of {boundary}, so the data do not yet show a "
                    "difference beyond what chance can produce at this stage")
    nominal = ""
    if tested.get("df") is not None:
        nominal = (f" (a t look crosses when its one-sided p-value is at or below "
                   f"{p_text(scale.nominal_level(tested['boundary_z']))})")
    return [
        f"{progress} {_estimate_text(row, what, tested)}. The test statistic, {statistic_phrase(tested)}, "
        f"{position}{nominal}.{_untested_note(looks, tested)}",
        "This is not evidence that the groups are the same: every difference inside the interval "
        "is still consistent with the data. Keep collecting.",
    ]
