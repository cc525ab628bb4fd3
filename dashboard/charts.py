"""The comparison's charts (Altair): statistic against boundary, estimate, groups, excluded rows.

Each function takes the status row and the looks as a DataFrame (``history_frame``) and
returns a chart, or None when there is nothing to draw. No Streamlit here.
"""

from __future__ import annotations

import altair as alt
import pandas as pd

from .formats import fmt, group_names, groups_text
from .style import BOUNDARY_COLOUR, FUTILITY_COLOUR, GROUP_COLOURS, NULL_COLOUR, REASON_COLOURS

__all__ = [
    "history_frame",
    "futility_direction",
    "boundary_chart",
    "estimate_chart",
    "group_chart",
    "excluded_chart",
]


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
    groups = group_names(row)
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

