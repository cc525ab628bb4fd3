"""Every view of one comparison, section by section; shared by the Comparison and Review pages."""

from __future__ import annotations

import html

import pandas as pd
import streamlit as st

from monitor.store.export import csv_text
from monitor.store.readback import clustering_figures

from . import charts, data, tables
from .formats import bounds_text, confidence_percent, fmt, fraction_text, groups_text, next_look_text
from .formats import plan_eta_text, when
from .reading import reading
from .style import badge

__all__ = ["show_comparison"]

# The data-quality caption names the day level: that is where the look measures clustering.
_QUALITY_CLUSTER_TEXT = {"clusters": "{} clusters".format,
                         "design_effect": lambda value: f"day-level design effect {fmt(value, 3)}",
                         "effective_n": "effective n {:,.0f}".format}


def show_comparison(url, name, version=None):
    """Headline, the decision chart and its reading, after the stop, charts, plan, quality, history."""
    row = data.comparison(url, name, version)
    looks = data.history(url, name, row["version"])
    frame = charts.history_frame(looks)
    _headline(row)
    _decision(row, looks, frame)
    _after_stop(row)
    _over_time(row, frame)
    plan_col, quality_col = st.columns(2)
    with plan_col:
        st.markdown("##### The plan")
        st.table(pd.DataFrame(tables.plan_lines(row), columns=["setting", "value"]).set_index("setting"))
    with quality_col:
        _data_quality(url, row, looks)
    _look_history(row, looks, frame)


def _headline(row):
    title = f"{row['name']}" + (f" · version {row['version']}" if row["version"] != 1 else "")
    st.subheader(title)
    st.html(f'<div>{badge(row["state"])}'
            + (' <span class="gw-sub">archived</span>' if row["archived"] else "")
            + f' <span class="gw-sub">{html.escape(row.get("description") or "")}</span></div>')
    interval = bounds_text(row["ci_low"], row["ci_high"])
    cols = st.columns(4)
    cols[0].metric(f"Estimate ({groups_text(row)})", fmt(row["estimate"]),
                   help=f"{confidence_percent(row)} repeated confidence interval: {interval}")
    cols[1].metric("Events per group", f"{row['n1']:,} / {row['n2']:,}")
    cols[2].metric("Plan reached", fraction_text(row), help=f"of {row['planned_per_group'] or '?'} planned per group")
    cols[3].metric("Looks", row["looks"])
    ref = data.now()
    timing = f"last look {when(row['last_look_at'], ref)}"
    if row["stopped"]:
        timing += f" · stopped {when(row['stopped_at'], ref)}"
    elif not row["archived"]:
        timing += f" · next look {next_look_text(row, ref)} · plan complete in {plan_eta_text(row)}"
    st.caption(f"{confidence_percent(row)} repeated confidence interval: {interval} · {timing}")
    for warning in row["warnings"]:
        st.warning(warning, icon="⚠️")


def _decision(row, looks, frame):
    chart = charts.boundary_chart(row, frame)
    st.markdown("##### Test statistic against the boundary")
    if chart is not None:
        st.altair_chart(chart, width="stretch")
    else:
        st.info("No test statistic recorded yet.")
    st.markdown("##### What this means")
    st.html('<div class="gw-reading">' + "".join(f"<p>{html.escape(p)}</p>" for p in reading(row, looks)) + "</div>")


def _after_stop(row):
    adjusted = row.get("adjusted")
    if not (row["stopped"] and adjusted):
        return
    st.markdown("##### After the stop")
    a = st.columns(3)
    a[0].metric("Adjusted estimate", fmt(adjusted["estimate"]),
                help="median-unbiased: corrects the overstatement of an estimate taken at a stop")
    a[1].metric("Adjusted p-value", fmt(adjusted["p_value"], 3), help="stagewise ordering of the outcomes")
    lo, hi = adjusted["ci_low"], adjusted["ci_high"]
    a[2].metric("Adjusted interval", f"[{fmt(lo)}, {fmt(hi)}]" if lo is not None or hi is not None else "—")
    if adjusted.get("note"):
        st.caption(adjusted["note"])


def _over_time(row, frame):
    left, right = st.columns(2)
    with left:
        st.markdown("##### Estimate over time")
        chart = charts.estimate_chart(row, frame)
        if chart is not None:
            st.altair_chart(chart, width="stretch")
        st.caption(f"Shaded: the {confidence_percent(row)} repeated confidence interval at each look. "
                   "Dashed grey: the null difference.")
    with right:
        st.markdown("##### Each group over time")
        chart = charts.group_chart(row, frame)
        if chart is not None:
            st.altair_chart(chart, width="stretch")
        else:
            st.info("No group means recorded yet.")


def _data_quality(url, row, looks):
    st.markdown("##### Data quality")
    excluded_total = looks[-1]["excluded_total"] if looks else 0  # running totals
    late_total = sum(h["late_events"] for h in looks)
    q = st.columns(3)
    q[0].metric("Rows excluded", f"{excluded_total:,}")
    q[1].metric("Late events", f"{late_total:,}")
    q[2].metric("Effective n", f"{row['effective_n']:,.0f}" if row["effective_n"] is not None else "—",
                help="events divided by the design effect")
    beside = [f"n = {row['n1']:,} / {row['n2']:,}"]
    beside += clustering_figures(row, _QUALITY_CLUSTER_TEXT)
    st.caption(" · ".join(beside))
    chart = charts.excluded_chart(looks)
    if chart is not None:
        st.altair_chart(chart, width="stretch")
    else:
        st.caption("No rows excluded so far.")
    days = data.cells(url, row["name"], row["version"]).get("day", [])
    if days:
        count = len({c["key"] for c in days})
        with st.expander(f"Events per day ({count} {'day' if count == 1 else 'days'})"):
            st.dataframe(tables.per_day_table(days, row), width="stretch")


def _look_history(row, looks, frame):
    st.markdown("##### Look history")
    if not looks:
        st.info("No looks recorded yet.")
        return
    table, config = tables.look_table(frame)
    st.dataframe(table, hide_index=True, width="stretch", column_config=config)
    st.download_button("Download looks as CSV", csv_text(looks), file_name=f"{row['name']}-v{row['version']}-looks.csv",
                       mime="text/csv", key=f"csv-{row['name']}-{row['version']}")
