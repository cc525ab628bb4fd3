"""What every dashboard page shares: the store engine, cached reads, formatting, charts, readings.

Pages stay thin: they pick what to show and call these helpers. Every number
comes from ``monitor.store.readback``, the same functions the CLI prints.
"""

from __future__ import annotations

import csv
import html
import io
import os
from datetime import datetime, timezone
from urllib.parse import quote

import altair as alt
import pandas as pd
import streamlit as st

from monitor.config import store_url_from_config
from monitor.store import readback
from monitor.commands.history import csv_rows
from monitor.store.readback import format_number as fmt

# Our palette: one colour per state and per group, the same on every page.
STATE_COLOURS = {
    "collecting": "#3E6A8A",
    "awaiting_clusters": "#7D6FA3",
    "difference_found": "#B4532A",
    "no_material_difference": "#4F8A5B",
    "plan_complete": "#5A616C",
    "data_problem": "#B0304A",
}
GROUP_COLOURS = ("#1F6F78", "#C9852F")
BOUNDARY_COLOUR = "#7A3E65"
FUTILITY_COLOUR = "#4F8A5B"
NULL_COLOUR = "#8C8C8C"
REASON_COLOURS = ("#8A5A44", "#C9852F", "#7D6FA3", "#3E6A8A", "#B0304A", "#6B8F71", "#5A616C")

REFRESH_SECONDS = 10
CAUTION = (
    "A statistical signal supports, but never replaces, operational judgement and your local "
    "rules: check the data, what changed on the floor and the cost of acting before you act."
)


# ---------------------------------------------------------------------------
# store access


def config_path():
    return os.environ.get("GAPWATCH_CONFIG") or "gapwatch.toml"


@st.cache_resource(show_spinner=False)
def _engine(url):
    return readback.open_store(url)


@st.cache_data(ttl=60, show_spinner=False)
def _store_url(path):
    return store_url_from_config(path)


def store_url():
    return _store_url(config_path())


def engine():
    return _engine(store_url())


@st.cache_data(ttl=5, show_spinner=False)
def _reference(url):
    moment, note = readback.reference_time(_engine(url), datetime.now(timezone.utc))
    return moment.isoformat(), note


def clock_note():
    """Why times are read against the newest look instead of this machine's clock, or None."""
    return _reference(store_url())[1]


def now():
    """The "now" of relative times: this machine's clock, unless the store's looks say otherwise."""
    moment, note = _reference(store_url())
    return datetime.fromisoformat(moment) if note else datetime.now(timezone.utc)


@st.cache_data(ttl=5, show_spinner=False)
def status_rows(url, include_archived=False):
    return readback.comparison_status(_engine(url), include_archived=include_archived)


@st.cache_data(ttl=5, show_spinner=False)
def filtered_rows(url, name_contains, states, since, until, archived):
    return readback.list_comparisons(
        _engine(url), name_contains=name_contains or None, states=list(states) or None,
        since=since, until=until, archived=archived,
    )


@st.cache_data(ttl=5, show_spinner=False)
def comparison(url, name, version=None):
    return readback.get_comparison(_engine(url), name, version)


@st.cache_data(ttl=5, show_spinner=False)
def history(url, name, version=None):
    return readback.look_history(_engine(url), name, version)


@st.cache_data(ttl=5, show_spinner=False)
def versions(url, name):
    return readback.list_versions(_engine(url), name)


@st.cache_data(ttl=5, show_spinner=False)
def cells(url, name, version=None):
    return readback.cells_by_kind(_engine(url), name, version)


@st.cache_data(ttl=5, show_spinner=False)
def alerts(url, states=()):
    return readback.list_alerts(_engine(url), list(states) or None)


def forget_cached_reads():
    """After a write, so the next read shows it."""
    for fn in (status_rows, filtered_rows, comparison, history, versions, cells, alerts, _reference):
        fn.clear()


# ---------------------------------------------------------------------------
# formatting


def when(iso, *, relative_to=None):
    """``"12:40 UTC (8 min ago)"`` style text for an ISO time."""
    if not iso:
        return "—"
    moment = datetime.fromisoformat(iso)
    base = relative_to or now()
    rel = _relative((moment - base).total_seconds(), "now")
    stamp = moment.strftime("%Y-%m-%d %H:%M UTC")
    return f"{stamp} ({rel})"


def _relative(seconds_ahead, present):
    """``"in 12 min"`` ahead, ``"12 min ago"`` behind, ``present`` within a second."""
    if abs(seconds_ahead) < 1:
        return present
    if seconds_ahead < 0:
        return f"{readback.describe_seconds(-seconds_ahead)} ago"
    return f"in {readback.describe_seconds(seconds_ahead)}"


def next_look_text(row, ref=None):
    if row["stopped"]:
        return "stopped"
    if row["archived"]:
        return "archived"
    if not row["next_look_at"]:
        return "—"
    moment = datetime.fromisoformat(row["next_look_at"])
    delta = (moment - (ref or now())).total_seconds()
    if delta <= 0:
        return f"due ({moment.strftime('%H:%M UTC')})"
    return f"{moment.strftime('%H:%M UTC')} (in {readback.describe_seconds(delta)})"


def plan_eta_text(row):
    if row["stopped"]:
        return "stopped"
    if row["seconds_to_plan"] is None:
        return "unknown yet"
    if row["seconds_to_plan"] <= 0:
        return "reached"
    return f"about {readback.describe_seconds(row['seconds_to_plan'])}"


def bounds_text(low, high):
    """``[low, high]`` with an open end (one-sided designs) shown as infinity."""
    if low is None and high is None:
        return "none at this look"
    return f"[{'−∞' if low is None else fmt(low)}, {'∞' if high is None else fmt(high)}]"


def interval_text(row):
    if row.get("estimate") is None:
        return "—"
    if row.get("ci_low") is None and row.get("ci_high") is None:
        # a look that tested nothing (no new information) records no interval
        return f"{fmt(row['estimate'])} (no interval at this look)"
    return f"{fmt(row['estimate'])} {bounds_text(row['ci_low'], row['ci_high'])}"


def fraction_text(row):
    return "—" if row.get("fraction") is None else f"{100 * row['fraction']:.0f}%"


def groups_text(row):
    groups = row.get("groups") or ["group 1", "group 2"]
    return f"{groups[0]} − {groups[1]}" if len(groups) == 2 else " / ".join(groups)


def confidence_percent(row):
    alpha = row.get("alpha") or 0.05
    return f"{100 * (1 - alpha):g}%"


def badge(state):
    """State as a symbol AND words, coloured; readable without the colour."""
    symbol, words = readback.STATES.get(state, ("?", str(state)))
    colour = STATE_COLOURS.get(state, "#555")
    return (
        f'<span class="gw-badge" style="border-color:{colour};color:{colour}">'
        f'<span class="gw-symbol">{html.escape(symbol)}</span> {html.escape(words)}</span>'
    )


def comparison_link(row):
    query = f"name={quote(row['name'])}"
    if row.get("archived"):
        query += f"&version={row['version']}"
    return f"comparison?{query}"


STYLE = """
<style>
.gw-badge {display:inline-block;border:1.5px solid;border-radius:0.8em;padding:0.05em 0.6em;
  font-weight:600;font-size:0.9em;white-space:nowrap;background:#fff;}
.gw-symbol {font-size:1.05em;}
.gw-scroll {overflow-x:auto;}
table.gw-board {border-collapse:collapse;width:100%;font-size:0.9rem;}
table.gw-board th {text-align:left;font-weight:600;color:#34414b;border-bottom:2px solid #cfd8dc;
  padding:0.45em 0.5em;vertical-align:bottom;}
table.gw-board td {border-bottom:1px solid #e3e8eb;padding:0.5em 0.5em;vertical-align:top;}
table.gw-board tr.gw-row:has(+ tr.gw-warnrow) td {border-bottom:none;}
table.gw-board tr.gw-warnrow td {padding-top:0;}
table.gw-board td.gw-name {white-space:nowrap;}
table.gw-board td.num {font-variant-numeric:tabular-nums;white-space:nowrap;}
table.gw-board a {color:#1F6F78;font-weight:600;text-decoration:none;}
.gw-warn {color:#8a4b08;font-size:0.85em;}
.gw-sub {color:#5f6b73;font-size:0.85em;}
.gw-bar {background:#e3e8eb;border-radius:3px;height:6px;width:7em;margin-top:4px;}
.gw-bar > div {background:#1F6F78;height:6px;border-radius:3px;}
.gw-reading {border-left:4px solid #1F6F78;background:#f4f8f8;padding:0.8em 1em;border-radius:4px;}
</style>
"""


def style():
    st.html(STYLE)


def _clock(iso, ref):
    """``22:49 UTC`` on the reference day, ``2026-03-02 22:49 UTC`` on another."""
    moment = datetime.fromisoformat(iso)
    if moment.date() == ref.date():
        return moment.strftime("%H:%M UTC")
    return moment.strftime("%Y-%m-%d %H:%M UTC")


def _ago(iso, ref):
    return _relative((datetime.fromisoformat(iso) - ref).total_seconds(), "just now")


_BOARD_CLUSTER_TEXT = {"clusters": "{} clusters".format, "design_effect": "design effect {:.2f}".format,
                       "effective_n": "effective n {:,.0f}".format}

BOARD_COLUMNS = ("State", "Comparison", "Estimate [repeated CI]", "Events per group", "Plan reached",
                 "Last look", "Next look", "Plan complete in")


def board_table(rows):
    """The overview as an HTML table (plain DOM text, so it reads well and can be checked)."""
    head = "<tr>" + "".join(f"<th>{c}</th>" for c in BOARD_COLUMNS) + "</tr>"
    body = []
    ref = now()  # once per table: the same reference for every row
    for r in rows:
        name = html.escape(r["name"])
        version = f' <span class="gw-sub">v{r["version"]}</span>' if r["version"] != 1 else ""
        fraction = r["fraction"] or 0.0
        bar = f'<div class="gw-bar"><div style="width:{min(fraction, 1.0) * 100:.0f}%"></div></div>'
        cluster_line = "".join(f'<div class="gw-sub">{html.escape(c)}</div>'
                               for c in readback.clustering_figures(r, _BOARD_CLUSTER_TEXT))
        last = (f'{_clock(r["last_look_at"], ref)}<div class="gw-sub">{_ago(r["last_look_at"], ref)} · look {r["looks"]}</div>'
                if r["last_look_at"] else "—")
        if r["stopped"] or r["archived"] or not r["next_look_at"]:
            upcoming = html.escape(next_look_text(r, ref))
        else:
            due = (datetime.fromisoformat(r["next_look_at"]) - ref).total_seconds()
            upcoming = (f'{_clock(r["next_look_at"], ref)}<div class="gw-sub">'
                        f'{readback.describe_wait(due)}</div>')
        level = ("" if r["estimate"] is None
                 else f'<div class="gw-sub">{confidence_percent(r)} repeated interval</div>')
        rate = ""
        if r.get("events_per_hour") and not r["stopped"]:
            rate = (f'<div class="gw-sub">{r["events_per_hour"][0]:,.0f} / {r["events_per_hour"][1]:,.0f} '
                    "an hour</div>")
        body.append(
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
        if r.get("baseline"):
            body.append(f'<tr class="gw-warnrow"><td></td><td colspan="{len(BOARD_COLUMNS) - 1}">'
                        f'<span class="gw-sub">{html.escape(r["baseline"])}</span></td></tr>')
        for warning in r["warnings"]:
            body.append(f'<tr class="gw-warnrow"><td></td><td colspan="{len(BOARD_COLUMNS) - 1}">'
                        f'<span class="gw-warn">⚠ {html.escape(warning)}</span></td></tr>')
    return (f'<div class="gw-scroll"><table class="gw-board"><thead>{head}</thead>'
            f'<tbody>{"".join(body)}</tbody></table></div>')


# ---------------------------------------------------------------------------
# readings


def reading(row, looks):
    """A plain-language reading of the current result: what it says and what it does not."""
    state = row["state"]
    groups = row.get("groups") or ["group 1", "group 2"]
    level = confidence_percent(row)
    what = f"{groups[0]} minus {groups[1]}"
    if row.get("metric") == "proportion":
        what += " (difference in rates)"
    if not looks:
        return ["No look has been recorded yet, so there is nothing to read."]
    last = looks[-1]
    lines = []
    est = interval_text(row)
    if state == "data_problem":
        lines.append(
            f"At look {last['look']} the data could not support a test ({'; '.join(last['warnings']) or 'see the warnings'}). "
            "No conclusion can be drawn until the data are fixed; the comparison keeps looking."
        )
    elif state == "awaiting_clusters":
        lines.append(
            f"Only {row['clusters']} clusters so far, below the minimum the design asks for. The current "
            f"estimate of {what} is {est}, but no decision is taken until there are enough clusters, "
            "because with few clusters the standard error itself is unreliable."
        )
    elif state == "collecting":
        lines.append(
            f"After {row['looks']} looks ({fraction_text(row)} of the planned events) the estimated "
            f"difference, {what}, is {est} ({level} repeated confidence interval). The test statistic "
            f"{fmt(last['statistic'])} is inside this look's boundary of ±{fmt(last['boundary_z'])}, so "
            "the data do not yet show a difference beyond what chance can produce at this stage."
        )
        lines.append(
            "This is not evidence that the groups are the same: every difference inside the interval "
            "is still consistent with the data. Keep collecting."
        )
    elif state == "difference_found":
        lines.append(
            f"At look {last['look']} the test statistic {fmt(last['statistic'])} crossed the efficacy "
            f"boundary {fmt(last['boundary_z'])}: the groups differ. The estimated difference, {what}, is "
            f"{est}; the {level} repeated confidence interval leaves out the null difference of "
            f"{fmt(row.get('null_difference') or 0.0)}."
        )
        lines.append(
            "It does not say why they differ, nor whether a difference this size matters for the "
            "operation; the estimate at a stop tends to overstate the size, so read the adjusted "
            "estimate below."
        )
    elif state == "no_material_difference":
        lines.append(
            f"At look {last['look']} the statistic fell below the futility boundary: a difference of the "
            f"planned size is unlikely. The estimate, {what}, is {est}."
        )
        lines.append(
            "It does not prove the groups are identical; smaller differences inside the interval remain possible."
        )
    elif state == "plan_complete":
        lines.append(
            f"The planned events were reached at look {last['look']} without crossing the boundary. The "
            f"estimate, {what}, is {est}: no difference of the planned size was detected."
        )
        lines.append(
            "Differences inside the interval cannot be ruled out; a smaller difference may still be real."
        )
    if row.get("design_effect") is not None and row["design_effect"] > 1.5 and row.get("clusters") is None:
        lines.append(
            f"The day-level design effect is {row['design_effect']:.2f}: events on the same day move "
            "together, so this interval is too narrow and the test too eager. Cluster the comparison."
        )
    lines.append(CAUTION)
    return lines


# ---------------------------------------------------------------------------
# charts


def history_frame(looks):
    frame = pd.DataFrame(looks)
    if not frame.empty:
        frame["as_of"] = pd.to_datetime(frame["as_of"], utc=True)
    return frame


def futility_direction(row):
    """``d`` of the futility rule ``d·Z < f``: the planned direction of the difference."""
    alternative = row.get("alternative") or "two-sided"
    if alternative in ("greater", "less"):
        return 1 if alternative == "greater" else -1
    inputs = ((row.get("design") or {}).get("plan") or {}).get("inputs") or {}
    planned = inputs.get("difference")
    if planned is None and inputs.get("p1") is not None and inputs.get("p2") is not None:
        planned = inputs["p1"] - inputs["p2"]
    return -1 if planned is not None and planned < 0 else 1


def boundary_chart(row, frame):
    """Test statistic at each look against the efficacy (and futility) boundary, by information fraction."""
    data = frame.dropna(subset=["statistic", "fraction"])
    if data.empty:
        return None
    alternative = row.get("alternative") or "two-sided"
    lines = []
    for _, look in data.iterrows():
        b = look["boundary_z"]
        if pd.notna(b):
            if alternative in ("two-sided", "greater"):
                lines.append({"look": look["look"], "fraction": look["fraction"], "z": b,
                              "line": "efficacy boundary", "side": "upper"})
            if alternative in ("two-sided", "less"):
                lines.append({"look": look["look"], "fraction": look["fraction"], "z": -b,
                              "line": "efficacy boundary", "side": "lower"})
        f = look.get("futility_z")
        if f is not None and pd.notna(f):
            sign = futility_direction(row)
            lines.append({"look": look["look"], "fraction": look["fraction"], "z": sign * f,
                          "line": "futility boundary", "side": "futility"})
    legend = ["test statistic", "efficacy boundary"]
    palette = [GROUP_COLOURS[0], BOUNDARY_COLOUR]
    if any(line["line"] == "futility boundary" for line in lines):
        legend.append("futility boundary")
        palette.append(FUTILITY_COLOUR)
    colour = alt.Color("line:N", title=None, scale=alt.Scale(domain=legend, range=palette),
                       legend=alt.Legend(orient="bottom"))
    # Early boundaries are very wide; keep the scale where the statistic and the later looks read well.
    last_boundary = data["boundary_z"].dropna()
    reach = max(4.5, 1.4 * float(data["statistic"].abs().max()),
                1.25 * float(last_boundary.iloc[-1]) if not last_boundary.empty else 0.0)
    low = -reach if alternative != "greater" else -min(reach, 3.0)
    high = reach if alternative != "less" else min(reach, 3.0)
    y_scale = alt.Scale(domain=[low, high])
    x = alt.X("fraction:Q", title="information fraction (share of planned events)",
              axis=alt.Axis(format="%"), scale=alt.Scale(domain=[0, max(1.0, float(data["fraction"].max()))]))
    layers = [alt.Chart(pd.DataFrame({"z": [0.0]})).mark_rule(color=NULL_COLOUR, strokeWidth=1)
              .encode(y=alt.Y("z:Q", scale=y_scale))]
    if lines:
        layers.append(
            alt.Chart(pd.DataFrame(lines))
            .mark_line(strokeDash=[6, 4], clip=True, point=alt.OverlayMarkDef(shape="triangle-up", size=40))
            .encode(x=x, y=alt.Y("z:Q", scale=y_scale), detail="side:N", color=colour,
                    tooltip=[alt.Tooltip("line:N"), alt.Tooltip("look:Q"),
                             alt.Tooltip("fraction:Q", format=".1%"), alt.Tooltip("z:Q", format=".3f")])
        )
    layers.append(
        alt.Chart(data.assign(line="test statistic"))
        .mark_line(point=alt.OverlayMarkDef(size=60, filled=True), strokeWidth=2.5, clip=True)
        .encode(x=x, y=alt.Y("statistic:Q", title="test statistic (z or t)", scale=y_scale), color=colour,
                tooltip=[alt.Tooltip("look:Q"), alt.Tooltip("fraction:Q", format=".1%"),
                         alt.Tooltip("statistic:Q", format=".3f"), alt.Tooltip("boundary_z:Q", format=".3f"),
                         alt.Tooltip("p_value:Q", format=".4f")])
    )
    return alt.layer(*layers).properties(height=320)


def estimate_chart(row, frame):
    """Estimate at each look with the repeated confidence band and the null difference marked."""
    data = frame.dropna(subset=["estimate"])
    if data.empty:
        return None
    null = row.get("null_difference") or 0.0
    x = alt.X("as_of:T", title="look time (UTC)", axis=alt.Axis(format="%H:%M", labelAngle=0))
    # The first looks' intervals are very wide; scale to the later ones so the estimate stays readable.
    later = data[data["fraction"].fillna(0) >= 0.3 * float(data["fraction"].fillna(0).max())]
    later = later if not later.empty else data
    bounds = [null, *later["estimate"].dropna(), *later["ci_low"].dropna(), *later["ci_high"].dropna()]
    pad = 0.08 * ((max(bounds) - min(bounds)) or 1.0)
    domain = [min(bounds) - pad, max(bounds) + pad]
    y_scale = alt.Scale(domain=domain)
    # An open end (one-sided design) fills to the edge of the chart.
    banded = data.assign(ci_low=data["ci_low"].fillna(domain[0]),
                         ci_high=data["ci_high"].fillna(domain[1]))
    band = alt.Chart(banded).mark_area(
        opacity=0.22, color=GROUP_COLOURS[0], clip=True).encode(
        x=x, y=alt.Y("ci_low:Q", title=f"difference ({groups_text(row)})", scale=y_scale), y2="ci_high:Q",
        tooltip=[alt.Tooltip("look:Q"), alt.Tooltip("ci_low:Q", format=".4g"), alt.Tooltip("ci_high:Q", format=".4g")])
    line = alt.Chart(data).mark_line(point=True, color=GROUP_COLOURS[0], strokeWidth=2.5, clip=True).encode(
        x=x, y=alt.Y("estimate:Q", scale=y_scale),
        tooltip=[alt.Tooltip("look:Q"), alt.Tooltip("as_of:T", format="%Y-%m-%d %H:%M"),
                 alt.Tooltip("estimate:Q", format=".4g")])
    rule = alt.Chart(pd.DataFrame({"null": [null], "label": [f"null difference {fmt(null)}"]})).mark_rule(
        color=NULL_COLOUR, strokeDash=[4, 3], strokeWidth=1.5).encode(y=alt.Y("null:Q", scale=y_scale),
                                                                        tooltip=["label:N"])
    return alt.layer(band, line, rule).properties(height=280)


def group_chart(row, frame):
    """Each group's running mean (or rate) at each look."""
    if frame.empty or "mean1" not in frame or frame[["mean1", "mean2"]].isna().all().all():
        return None
    groups = row.get("groups") or ["group 1", "group 2"]
    long = pd.concat([
        frame[["as_of", "look", "mean1", "n1"]].rename(columns={"mean1": "value", "n1": "n"}).assign(group=groups[0]),
        frame[["as_of", "look", "mean2", "n2"]].rename(columns={"mean2": "value", "n2": "n"}).assign(group=groups[1]),
    ]).dropna(subset=["value"])
    title = "rate" if row.get("metric") == "proportion" else "mean"
    return alt.Chart(long).mark_line(point=True, strokeWidth=2.5).encode(
        x=alt.X("as_of:T", title="look time (UTC)", axis=alt.Axis(format="%H:%M", labelAngle=0)),
        y=alt.Y("value:Q", title=f"running {title}", scale=alt.Scale(zero=False),
                axis=alt.Axis(format="%" if row.get("metric") == "proportion" else "~g")),
        color=alt.Color("group:N", title=None, scale=alt.Scale(domain=list(groups[:2]), range=list(GROUP_COLOURS))),
        tooltip=["group:N", alt.Tooltip("look:Q"), alt.Tooltip("value:Q", format=".4g"), alt.Tooltip("n:Q")],
    ).properties(height=260).configure_legend(orient="bottom")


def excluded_chart(looks):
    rows = [{"look": h["look"], "reason": reason.replace("_", " "), "count": count}
            for h in looks for reason, count in h["excluded_new"].items() if count]
    if not rows:
        return None
    return alt.Chart(pd.DataFrame(rows)).mark_bar(size=18).encode(
        x=alt.X("look:O", title="look", axis=alt.Axis(labelAngle=0)),
        y=alt.Y("sum(count):Q", title="rows excluded", axis=alt.Axis(tickMinStep=1)),
        color=alt.Color("reason:N", title="reason", scale=alt.Scale(range=list(REASON_COLOURS)),
                        legend=alt.Legend(orient="bottom")),
        tooltip=["look:O", "reason:N", "count:Q"],
    ).properties(height=220)


# ---------------------------------------------------------------------------
# the comparison views (shared by the comparison and review pages)


def _plan_lines(row):
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


# The data-quality caption names the day level: that is where the look measures clustering.
_QUALITY_CLUSTER_TEXT = {"clusters": "{} clusters".format,
                         "design_effect": lambda value: f"day-level design effect {fmt(value, 3)}",
                         "effective_n": "effective n {:,.0f}".format}


def show_comparison(url, name, version=None):
    """Every view of one comparison: headline, charts, reading, plan, data quality, history."""
    row = comparison(url, name, version)
    looks = history(url, name, row["version"])
    frame = history_frame(looks)

    title = f"{row['name']}" + (f" · version {row['version']}" if row["version"] != 1 else "")
    st.subheader(title)
    st.html(f'<div>{badge(row["state"])}'
            + (' <span class="gw-sub">archived</span>' if row["archived"] else "")
            + f' <span class="gw-sub">{html.escape(row.get("description") or "")}</span></div>')

    cols = st.columns(4)
    cols[0].metric(f"Estimate ({groups_text(row)})", fmt(row["estimate"]),
                   help=f"{confidence_percent(row)} repeated confidence interval: {bounds_text(row['ci_low'], row['ci_high'])}")
    cols[1].metric("Events per group", f"{row['n1']:,} / {row['n2']:,}")
    cols[2].metric("Plan reached", fraction_text(row), help=f"of {row['planned_per_group'] or '?'} planned per group")
    cols[3].metric("Looks", row["looks"])
    timing = f"last look {when(row['last_look_at'])}"
    if row["stopped"]:
        timing += f" · stopped {when(row['stopped_at'])}"
    elif not row["archived"]:
        timing += f" · next look {next_look_text(row)} · plan complete in {plan_eta_text(row)}"
    st.caption(f"{confidence_percent(row)} repeated confidence interval: "
               f"{bounds_text(row['ci_low'], row['ci_high'])} · {timing}")
    if row.get("baseline"):
        # A before/after comparison: the estimate is the change; say what the gap was before it.
        st.info(row["baseline"][:1].upper() + row["baseline"][1:] + ".")
    for warning in row["warnings"]:
        st.warning(warning, icon="⚠️")

    chart = boundary_chart(row, frame)
    st.markdown("##### Test statistic against the boundary")
    if chart is not None:
        st.altair_chart(chart, width="stretch")
    else:
        st.info("No test statistic recorded yet.")
    st.markdown("##### What this means")
    st.html('<div class="gw-reading">' + "".join(f"<p>{html.escape(p)}</p>" for p in reading(row, looks)) + "</div>")

    adjusted = row.get("adjusted")
    if row["stopped"] and adjusted:
        st.markdown("##### After the stop")
        a = st.columns(3)
        a[0].metric("Adjusted estimate", fmt(adjusted["estimate"]),
                    help="median-unbiased: corrects the overstatement of an estimate taken at a stop")
        a[1].metric("Adjusted p-value", fmt(adjusted["p_value"], 3), help="stagewise ordering of the outcomes")
        lo, hi = adjusted["ci_low"], adjusted["ci_high"]
        a[2].metric("Adjusted interval", f"[{fmt(lo)}, {fmt(hi)}]" if lo is not None or hi is not None else "—")
        if adjusted.get("note"):
            st.caption(adjusted["note"])

    left, right = st.columns(2)
    with left:
        st.markdown("##### Estimate over time")
        chart = estimate_chart(row, frame)
        if chart is not None:
            st.altair_chart(chart, width="stretch")
        st.caption(f"Shaded: the {confidence_percent(row)} repeated confidence interval at each look. "
                   "Dashed grey: the null difference.")
    with right:
        st.markdown("##### Each group over time")
        chart = group_chart(row, frame)
        if chart is not None:
            st.altair_chart(chart, width="stretch")
        else:
            st.info("No group means recorded yet.")

    plan_col, quality_col = st.columns(2)
    with plan_col:
        st.markdown("##### The plan")
        st.table(pd.DataFrame(_plan_lines(row), columns=["setting", "value"]).set_index("setting"))
    with quality_col:
        st.markdown("##### Data quality")
        excluded_total = looks[-1]["excluded_total"] if looks else 0  # running totals
        late_total = sum(h["late_events"] for h in looks)
        q = st.columns(3)
        q[0].metric("Rows excluded", f"{excluded_total:,}")
        q[1].metric("Late events", f"{late_total:,}")
        q[2].metric("Effective n", f"{row['effective_n']:,.0f}" if row["effective_n"] is not None else "—",
                    help="events divided by the design effect")
        beside = [f"n = {row['n1']:,} / {row['n2']:,}"]
        beside += readback.clustering_figures(row, _QUALITY_CLUSTER_TEXT)
        st.caption(" · ".join(beside))
        chart = excluded_chart(looks)
        if chart is not None:
            st.altair_chart(chart, width="stretch")
        else:
            st.caption("No rows excluded so far.")
        days = cells(url, row["name"], row["version"]).get("day", [])
        if days:
            count = len({c["key"] for c in days})
            with st.expander(f"Events per day ({count} {'day' if count == 1 else 'days'})"):
                groups = row.get("groups") or ["group 1", "group 2"]
                per_day = pd.DataFrame(days).pivot_table(index="key", columns="group", values=["n", "mean"])
                per_day.columns = [f"{stat} {group}" for stat, group in per_day.columns]
                order = [f"{stat} {g}" for stat in ("n", "mean") for g in groups if f"{stat} {g}" in per_day]
                st.dataframe(per_day[order].rename_axis("day"), width="stretch")

    st.markdown("##### Look history")
    if looks:
        table = frame[["look", "as_of", "n1", "n2", "estimate", "ci_low", "ci_high", "statistic",
                       "boundary_z", "p_value", "fraction", "cumulative_alpha", "excluded_total",
                       "late_events", "decision"]].copy()
        table["decision"] = table["decision"].map(readback.state_label)
        st.dataframe(
            table, hide_index=True, width="stretch",
            column_config={
                "as_of": st.column_config.DatetimeColumn("as of (UTC)", format="YYYY-MM-DD HH:mm"),
                "estimate": st.column_config.NumberColumn("estimate", format="%.4g"),
                "ci_low": st.column_config.NumberColumn("interval low", format="%.4g"),
                "ci_high": st.column_config.NumberColumn("interval high", format="%.4g"),
                "late_events": st.column_config.NumberColumn("late"),
                "fraction": st.column_config.NumberColumn("plan", format="percent"),
                "boundary_z": st.column_config.NumberColumn("boundary", format="%.3f"),
                "statistic": st.column_config.NumberColumn("statistic", format="%.3f"),
                "p_value": st.column_config.NumberColumn("p-value", format="%.4f"),
                "cumulative_alpha": st.column_config.NumberColumn("alpha spent", format="%.5f"),
                "excluded_total": st.column_config.NumberColumn("excluded"),
            },
        )
        header, rows = csv_rows(looks)
        buffer = io.StringIO()
        writer = csv.writer(buffer, lineterminator="\n")
        writer.writerow(header)
        writer.writerows(rows)
        text = buffer.getvalue()
        st.download_button("Download looks as CSV", text, file_name=f"{row['name']}-v{row['version']}-looks.csv",
                           mime="text/csv", key=f"csv-{row['name']}-{row['version']}")
    else:
        st.info("No looks recorded yet.")
