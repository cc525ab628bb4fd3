"""Every view of one comparison, section by section; shared by the Comparison and Review pages."""

from __future__ import annotations

import html

import pandas as pd
import streamlit as st

from monitor.errors import InvalidArgumentError
from monitor.store.export import csv_text
from monitor.store.readback import clustering_figures

from . import charts, data, look_tables, tables
from monitor.vocabulary import design_words, interval_width

from .formats import (amount, bounds_text, confidence_percent, evidence_text, figure, fraction_text, group_names,
                      groups_text, next_look_text, plan_eta_text, relative_text, when, zone_name)
from .reading import reading, testing_look
from .style import badge, pair, tiles

__all__ = ["show_comparison"]

# The data-quality caption names the day level: that is where the look measures clustering.
_QUALITY_CLUSTER_TEXT = {"clusters": "{} clusters".format,
                         "design_effect": lambda value: f"day-level design effect {figure(value, digits=3)}",
                         "effective_n": "effective n {:,.0f}".format}


def show_comparison(url, name, version=None):
    """Headline, the decision chart and its reading, after the stop, charts, plan, quality, history."""
    row = data.comparison(url, name, version)
    looks = data.history(url, name, row["version"])
    frame = charts.history_frame(looks, zone_name(row))
    _headline(row, looks)
    _decision(row, looks, frame)
    _after_stop(row)
    _over_time(row, frame)
    plan_col, quality_col = pair("plan")
    with plan_col:
        st.markdown("##### The plan")
        st.table(pd.DataFrame(tables.plan_lines(row), columns=["setting", "value"]).set_index("setting"))
        changes = _change_lines(row.get("plan_changes") or [])
        if changes:
            st.markdown("###### Changes of plan")
            st.markdown("\n".join(f"- {html.escape(line, quote=False)}" for line in changes))
    with quality_col:
        _data_quality(url, row, looks)
    _look_history(row, looks, frame)
    _review_download(url, row)


def _headline(row, looks):
    title = f"{row['name']}" + (f" · version {row['version']}" if row["version"] != 1 else "")
    st.subheader(title)
    st.html(f'<div>{badge(row["state"])}'
            + (' <span class="gw-sub">archived</span>' if row["archived"] else "")
            + f' <span class="gw-sub">{html.escape(row.get("description") or "")}</span></div>')
    interval = _newest_interval(row, looks)
    tiles([_estimate_tile(row, interval), *_count_tiles(row),
           ("Plan reached", fraction_text(row), _plan_note(row)),
           ("Looks", row["looks"])])
    st.caption(f"{groups_text(row)} · {design_words(row.get('design') or {}, group_names(row))}")
    ref = data.now()
    timing = f"last look {when(row['last_look_at'], ref)}"
    if row["stopped"]:
        timing += f" · stopped {when(row['stopped_at'], ref)}"
    elif not row["archived"]:
        eta = plan_eta_text(row)
        timing += f" · next look {next_look_text(row, ref)} · " + (
            "plan completion not yet known" if eta == "unknown yet" else f"plan complete in {eta}")
    relative = relative_text(row)
    st.caption(f"{confidence_percent(row)} repeated confidence interval: {interval}"
               + (f" · {relative}" if relative and not row["stopped"] else "") + f" · {timing}")
    if row.get("baseline"):
        # A before/after comparison: the estimate is the change; say what the gap was before it.
        st.info(row["baseline"][:1].upper() + row["baseline"][1:] + ".")
    if row.get("outlook_words"):
        words = row["outlook_words"]
        st.info(words[0].upper() + words[1:] + ".")
    for warning in row["warnings"]:
        st.warning(warning, icon="⚠️")


def _estimate_tile(row, interval):
    """The headline figure: after a stop the adjusted estimate (the naive one beside it), else the
    estimate, in the comparison's units with the relative change where it exists."""
    adjusted = row.get("adjusted") or {}
    if row["stopped"] and adjusted.get("estimate") is not None:
        width = interval_width(adjusted.get("ci_low"), adjusted.get("ci_high"))
        note = (f"median-unbiased, allowing for the looks; adjusted interval "
                f"{bounds_text(adjusted.get('ci_low'), adjusted.get('ci_high'), row)}; the estimate at the "
                f"stop was {amount(adjusted.get('naive_estimate') or row['estimate'], row)}")
        relative = relative_text(row, adjusted["estimate"])
        if relative:
            note += f" · {relative}"
        return (f"Adjusted estimate ({groups_text(row)})", amount(adjusted["estimate"], row, width), note)
    width = interval_width(row.get("ci_low"), row.get("ci_high"))
    note = f"{confidence_percent(row)} repeated confidence interval: {interval}"
    relative = relative_text(row)
    if relative:
        note = f"{relative} · {note}"
    return (f"Estimate ({groups_text(row)})", amount(row["estimate"], row, width), note)


def _count_tiles(row):
    """Events per group, and beside them the count the evidence rests on (pairs, clusters)."""
    names = group_names(row)
    events = ("Events per group", f"{row['n1']:,} / {row['n2']:,}", f"{names[0]} / {names[1]}")
    counted = evidence_text(row)
    if counted is None:
        return [events]
    noun = row["evidence"]["noun"]
    count = row["evidence"].get("count")
    why = {"pairs": "a paired comparison's evidence: one difference per pair",
           "clusters": "a clustered comparison's evidence: its standard error rests on the clusters",
           "days": "a before/after comparison's evidence: its variance rests on the days"}.get(noun)
    return [(noun.capitalize(), "—" if count is None else f"{count:,}", why), events]


def _plan_note(row):
    if not row.get("planned_per_group"):
        return None
    noun = "pairs" if (row.get("evidence") or {}).get("noun") == "pairs" else "events per group"
    return f"of {row['planned_per_group']:,.0f} planned {noun}"


def _review_download(url, row):
    """The printable review of this version, to file (HTML; PDF too when a browser can print it)."""
    st.markdown("##### The review to file")
    st.caption("One self-contained page: the question, the design as frozen, every look, the charts, data "
               "quality, changes of plan, alerts and acknowledgements, the result and the caution. It prints "
               "on A4 or Letter portrait.")
    stem = f"{row['name']}-v{row['version']}-review"
    try:
        page = data.review_html(url, row["name"], row["version"])
    except InvalidArgumentError as exc:  # a stored design this version of gapwatch cannot read
        st.caption(f"The review cannot be built from this version's record: {exc}")
        return
    left, right = st.columns(2)
    left.download_button("Download the review (HTML)", page,
                         file_name=f"{stem}.html", mime="text/html", key=f"review-html-{row['name']}-{row['version']}",
                         on_click="ignore")
    pdf = data.review_pdf_maker(url, row["name"], row["version"])
    if pdf is not None:
        right.download_button("Download the review (PDF)", pdf, file_name=f"{stem}.pdf", mime="application/pdf",
                              key=f"review-pdf-{row['name']}-{row['version']}", on_click="ignore")


def _change_lines(changes):
    """Replans and restarts of this version, one line each: who, when, old and new plan, why."""
    lines = []
    for c in changes:
        made = f"{c['made_at'][:16].replace('T', ' ')} UTC by {c['made_by']}"
        why = f" — {c['reason']}" if c.get("reason") else ""
        if c["kind"] == "replan":
            old = (c.get("old_plan") or {}).get("planned_per_group")
            new = (c.get("new_plan") or {}).get("planned_per_group")
            lines.append(f"Replan {c['number']} after look {c['after_look']}, {made}: {old:,} → {new:,} "
                         f"events per group{why}; alpha left for the rest {figure(c['conditional_error'], digits=3)}, "
                         f"spent on the data after the change")
        else:
            how = "all data again (from the start)" if c.get("from_start") else "new data only"
            lines.append(f"Restarted after look {c['after_look']}, {made}: the next version reads {how}{why}")
    return lines


def _figure(value, digits=4):
    return "—" if value is None else figure(value, digits=digits)


def _newest_interval(row, looks):
    """This look's interval; when it tested nothing new, the newest look's that did, named."""
    if row["ci_low"] is not None or row["ci_high"] is not None:
        return bounds_text(row["ci_low"], row["ci_high"], row)
    tested = testing_look(looks)
    if tested is None or (tested["ci_low"] is None and tested["ci_high"] is None):
        return "none yet"
    return (f"{bounds_text(tested['ci_low'], tested['ci_high'], row)} from look {tested['look']} "
            "(the looks since found nothing new to test)")


def _decision(row, looks, frame):
    chart = charts.boundary_chart(row, frame)
    st.markdown("##### The evidence against the boundary")
    if chart is not None:
        st.altair_chart(chart, width="stretch")
        st.caption(_decision_caption(frame))
        note = charts.off_scale_note(frame, row)
        if note:
            st.caption(note)
    else:
        st.info("No test statistic recorded yet.")
    st.markdown("##### What this means")
    st.html('<div class="gw-reading">' + "".join(f"<p>{html.escape(p, quote=False)}</p>" for p in reading(row, looks)) + "</div>")


def _decision_caption(frame):
    if charts.uses_t(frame):
        return ("Each look is drawn on the scale its decision is taken on: a t statistic is shown as the "
                "normal value with the same one-sided p-value (its z-equivalent), so a point beyond the "
                "dashed boundary is a look that crossed it.")
    return "Each look's z statistic against the boundary it had to cross at that look."


def _after_stop(row):
    adjusted = row.get("adjusted")
    if not (row["stopped"] and adjusted):
        return
    st.markdown("##### After the stop")
    width = interval_width(adjusted.get("ci_low"), adjusted.get("ci_high"))
    tiles([
        ("Adjusted estimate", amount(adjusted["estimate"], row, width),
         "median-unbiased: corrects the overstatement of an estimate taken at a stop"),
        ("Adjusted p-value", _figure(adjusted["p_value"], 3), "stagewise ordering of the outcomes"),
        ("Adjusted interval", bounds_text(adjusted["ci_low"], adjusted["ci_high"], row)
         if adjusted["ci_low"] is not None or adjusted["ci_high"] is not None else "—"),
        ("Estimate at the stop", amount(adjusted.get("naive_estimate"), row, width),
         "as the last look computed it; it tends to overstate the difference"),
    ])
    if adjusted.get("note"):
        st.caption(adjusted["note"])


def _over_time(row, frame):
    left, right = pair("over-time")
    with left:
        st.markdown("##### Estimate over time")
        chart = charts.estimate_chart(row, frame)
        if chart is not None:
            st.altair_chart(chart, width="stretch")
        st.caption(f"Shaded: the {confidence_percent(row)} repeated confidence interval at each look that "
                   "has one (a look that tested nothing new has none). Dashed grey: the null difference.")
        note = charts.cut_intervals_note(row, frame)
        if note:
            st.caption(note)
    with right:
        st.markdown("##### Each group over time")
        chart = charts.group_chart(row, frame)
        if chart is not None:
            st.altair_chart(chart, width="stretch")
        else:
            st.info("No group means recorded yet.")


def volume_text(row) -> str:
    """The volume check of the newest look, in a line: state, and each group against its usual day."""
    volume = row.get("volume")
    if not volume:
        return "Volume: not checked yet."
    if volume["state"] == "not_yet_measurable":
        return f"Volume: not yet measurable ({volume.get('why') or 'too little history'})."
    parts = []
    for g in volume.get("groups") or []:
        if g.get("share_of_usual") is not None:
            parts.append(f"{g['group']} {100 * g['share_of_usual']:.0f} % of a usual {volume['weekday']}"
                         + (f" since {g['since']}" if g.get("warn") else ""))
    share = volume.get("share") or {}
    if share.get("share") is not None:
        parts.append(f"share {100 * share['share']:.0f} % (expected {100 * share['expected']:.0f} %)")
    word = "WARNING" if volume["state"] == "warning" else "ok"
    return " · ".join([f"Volume: {word}"] + parts)


def _data_quality(url, row, looks):
    st.markdown("##### Data quality")
    excluded_total = looks[-1]["excluded_total"] if looks else 0  # running totals
    late_total = sum(h["late_events"] for h in looks)
    tiles([
        ("Rows excluded", f"{excluded_total:,}"),
        ("Late events", f"{late_total:,}"),
        ("Effective n", f"{row['effective_n']:,.0f}" if row["effective_n"] is not None else "—",
         "events divided by the design effect"),
    ])
    beside = [f"n = {row['n1']:,} / {row['n2']:,}"]
    beside += clustering_figures(row, _QUALITY_CLUSTER_TEXT)
    st.caption(" · ".join(beside))
    st.caption(volume_text(row))
    chart = charts.excluded_chart(looks)
    if chart is not None:
        st.altair_chart(chart, width="stretch")
    else:
        st.caption("No rows excluded so far.")
    days = data.cells(url, row["name"], row["version"]).get("day", [])
    if days:
        count = len({c["key"] for c in days})
        with st.expander(f"Events per day ({count} {'day' if count == 1 else 'days'})"):
            st.dataframe(look_tables.per_day_table(days, row), width="stretch")


def _look_history(row, looks, frame):
    st.markdown("##### Look history")
    if not looks:
        st.info("No looks recorded yet.")
        return
    table, config = look_tables.look_table(frame, row)
    st.dataframe(table, hide_index=True, width="stretch", column_config=config)
    st.download_button("Download looks as CSV", csv_text(looks), file_name=f"{row['name']}-v{row['version']}-looks.csv",
                       mime="text/csv", key=f"csv-{row['name']}-{row['version']}")
