"""The dashboard's tables: the board (HTML, so it reads as plain text), the plan, the look history."""

from __future__ import annotations

import html
import math
from datetime import datetime

import pandas as pd
import streamlit as st

from monitor.store.readback import clustering_figures, describe_wait
from monitor.vocabulary import state_label

from .formats import (
    ago, bounds_text, clock, comparison_link, confidence_percent, fmt, fraction_text, group_names, groups_text,
    interval_text, next_look_text, p_text, plan_eta_text,
)
from .style import badge

__all__ = ["BOARD_COLUMNS", "REVIEW_COLUMNS", "board_table", "review_table", "plan_lines", "look_table", "per_day_table"]

_BOARD_CLUSTER_TEXT = {"clusters": "{} clusters".format, "design_effect": "design effect {:.2f}".format,
                       "effective_n": "effective n {:,.0f}".format}

BOARD_COLUMNS = ("State", "Comparison", "Estimate [repeated CI]", "Events per group", "Plan reached",
                 "Last look", "Next look", "Plan complete in")


def board_table(rows, ref):
    """The overview as an HTML table; relative times are read against ``ref`` (one for every row)."""
    head = "<tr>" + "".join(f"<th>{c}</th>" for c in BOARD_COLUMNS) + "</tr>"
    body = []
    for r in rows:
        body.append(_board_row(r, ref))
        for warning in r["warnings"]:
            body.append(f'<tr class="gw-warnrow"><td></td><td colspan="{len(BOARD_COLUMNS) - 1}">'
                        f'<span class="gw-warn">⚠ {html.escape(warning)}</span></td></tr>')
    return (f'<div class="gw-scroll"><table class="gw-board"><thead>{head}</thead>'
            f'<tbody>{"".join(body)}</tbody></table></div>')


def _board_row(r, ref):
    name = html.escape(r["name"])
    version = f' <span class="gw-sub">v{r["version"]}</span>' if r["version"] != 1 else ""
    fraction = r["fraction"] or 0.0
    bar = f'<div class="gw-bar"><div style="width:{min(fraction, 1.0) * 100:.0f}%"></div></div>'
    cluster_line = "".join(f'<div class="gw-sub">{html.escape(c)}</div>'
                           for c in clustering_figures(r, _BOARD_CLUSTER_TEXT))
    last = (f'{clock(r["last_look_at"], ref)}<div class="gw-sub">{ago(r["last_look_at"], ref)} · look {r["looks"]}</div>'
            if r["last_look_at"] else "—")
    if r["stopped"] or r["archived"] or not r["next_look_at"]:
        upcoming = html.escape(next_look_text(r, ref))
    else:
        due = (datetime.fromisoformat(r["next_look_at"]) - ref).total_seconds()
        upcoming = f'{clock(r["next_look_at"], ref)}<div class="gw-sub">{describe_wait(due)}</div>'
    level = "" if r["estimate"] is None else f'<div class="gw-sub">{confidence_percent(r)} repeated interval</div>'
    rate = ""
    if r.get("events_per_hour") and not r["stopped"]:
        rate = (f'<div class="gw-sub">{r["events_per_hour"][0]:,.0f} / {r["events_per_hour"][1]:,.0f} '
                "an hour</div>")
    return (
        '<tr class="gw-row">'
        f"<td>{badge(r['state'])}</td>"
        f'<td class="gw-name"><a href="{html.escape(comparison_link(r))}" target="_self">{name}</a>{version}'
        f'<div class="gw-sub">{html.escape(groups_text(r))} · {html.escape(str(r["method"] or ""))}</div></td>'
        f'<td class="num">{html.escape(interval_text(r))}{level}</td>'
        f'<td class="num">{r["n1"]:,} / {r["n2"]:,}{cluster_line}</td>'
        f'<td class="num">{fraction_text(r)}{bar}</td>'
        f'<td class="num">{last}</td>'
        f'<td class="num">{upcoming}</td>'
        f'<td class="num">{html.escape(plan_eta_text(r))}{rate}</td>'
        "</tr>"
    )


REVIEW_COLUMNS = ("State", "Comparison", "Version", "Looks", "Estimate [repeated CI]", "Events per group",
                  "Plan reached", "Stopped (UTC)")


def review_table(rows):
    """Stopped and archived versions as an HTML table; each name opens that version's page."""
    head = "<tr>" + "".join(f"<th>{c}</th>" for c in REVIEW_COLUMNS) + "</tr>"
    body = []
    for r in rows:
        kept = "archived" if r["archived"] else ("live" if not r["stopped"] else "stopped, live version")
        link = comparison_link(dict(r, archived=True))  # always pin the version reviewed
        body.append(
            '<tr class="gw-row">'
            f"<td>{badge(r['state'])}</td>"
            f'<td class="gw-name"><a href="{html.escape(link)}" target="_self">{html.escape(r["name"])}</a>'
            f'<div class="gw-sub">{html.escape(groups_text(r))}</div></td>'
            f'<td class="num">v{r["version"]}<div class="gw-sub">{kept}</div></td>'
            f'<td class="num">{r["looks"]}</td>'
            f'<td class="num">{html.escape(interval_text(r))}</td>'
            f'<td class="num">{r["n1"]:,} / {r["n2"]:,}</td>'
            f'<td class="num">{fraction_text(r)}</td>'
            f'<td class="num">{html.escape(_stamp(r["stopped_at"]))}</td>'
            "</tr>"
        )
    return (f'<div class="gw-scroll"><table class="gw-board gw-review"><thead>{head}</thead>'
            f'<tbody>{"".join(body)}</tbody></table></div>')


def _stamp(iso):
    return iso[:16].replace("T", " ") if iso else "—"


def plan_lines(row):
    """``(setting, value)`` pairs describing the frozen design, in the order a reviewer reads them."""
    design = row.get("design") or {}
    plan = design.get("plan") or {}
    inputs = plan.get("inputs") or {}
    lines = [
        ("method", f"{design.get('method')} on the {design.get('metric')}"),
        ("alternative", str(design.get("alternative"))),
        ("alpha", fmt(design.get("alpha"))),
        ("spending", str(design.get("spending"))),
        ("planned events per group", f"{row['planned_per_group']:,.0f}" if row.get("planned_per_group") else "—"),
        ("null difference", fmt(design.get("null_difference") or 0.0)),
    ]
    if inputs.get("difference") is not None:
        lines.append(("difference worth detecting", fmt(inputs["difference"])))
        if inputs.get("sd") is not None:
            lines.append(("assumed standard deviation", fmt(inputs["sd"])))
    if inputs.get("p1") is not None:
        lines.append(("rates worth telling apart", f"{fmt(inputs['p1'])} vs {fmt(inputs.get('p2'))}"))
    if inputs.get("power") is not None:
        lines.append(("power", fmt(inputs["power"])))
    lines.append(("futility boundary", "yes (non-binding)" if design.get("futility") else "no"))
    clustering = design.get("clustering") or {}
    if any(clustering.values()):
        lines.append(("clustered by", clustering.get("cluster_by") or clustering.get("cluster_column")))
        lines.append(("minimum clusters", str(design.get("min_clusters"))))
    every = (row.get("settings") or {}).get("every")
    if every is not None:
        lines.append(("looks every", str(every)))
    return lines


def look_table(frame):
    """The look history as shown: ``(DataFrame, column_config)`` for ``st.dataframe``.

    Figures are written as text with the dashboard's rules (a missing value is ``—``, never
    ``None``); look, events and counts stay numbers. A comparison decided through t gets its
    z-equivalent beside t, the figure its boundary is compared with.
    """
    t_based = "df" in frame and frame["df"].notna().any()
    table = pd.DataFrame({
        "look": frame["look"],
        "as of (UTC)": [t.strftime("%Y-%m-%d %H:%M") for t in frame["as_of"]],
        "n1": frame["n1"],
        "n2": frame["n2"],
        "estimate": [_figure(v) for v in frame["estimate"]],
        "interval": [_interval(lo, hi) for lo, hi in zip(frame["ci_low"], frame["ci_high"])],
        "statistic": [_figure(v) for v in frame["statistic"]],
    })
    if t_based:
        table["df"] = [_figure(v, 3) for v in frame["df"]]
        table["z-equivalent"] = [_figure(v) for v in frame["decision_z"]]
    table["boundary"] = [_figure(v) for v in frame["boundary_z"]]
    table["p-value"] = [p_text(_finite(v)) for v in frame["p_value"]]
    table["plan"] = [fraction_text({"fraction": _finite(v)}) for v in frame["fraction"]]
    table["alpha spent"] = [p_text(_finite(v)) for v in frame["cumulative_alpha"]]
    table["excluded"] = frame["excluded_total"]
    table["late"] = frame["late_events"]
    table["decision"] = frame["decision"].map(state_label)
    config = {"look": st.column_config.NumberColumn("look", format="%d"),
              "n1": st.column_config.NumberColumn("n1", format="localized"),
              "n2": st.column_config.NumberColumn("n2", format="localized")}
    return table, config


def _finite(value):
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def _figure(value, digits=4):
    value = _finite(value)
    return "—" if value is None else fmt(value, digits)


def _interval(low, high):
    low, high = _finite(low), _finite(high)
    return "—" if low is None and high is None else bounds_text(low, high)


def per_day_table(days, row):
    """Events and mean per day and group, from the store's day cells (one row per day)."""
    groups = group_names(row)
    per_day = pd.DataFrame(days).pivot_table(index="key", columns="group", values=["n", "mean"])
    per_day.columns = [f"{stat} {group}" for stat, group in per_day.columns]
    order = [f"{stat} {g}" for stat in ("n", "mean") for g in groups if f"{stat} {g}" in per_day]
    return per_day[order].rename_axis("day")
