"""The comparison's charts (Altair): decision against boundary, estimate, groups, excluded rows.

Each function takes the status row and the looks as a DataFrame (``history_frame``) and
returns a chart, or None when there is nothing to draw. No Streamlit here.

Three rules hold on every chart:

* the decision chart draws each look on the scale its decision was taken on
  (``dashboard.scale``), so a point above the boundary line is a look that crossed;
* scales are robust: one extreme look (an early estimate on a handful of events) is clipped
  at the chart's edge and marked, never allowed to flatten every later look;
* times are drawn as dates and clock times in the comparison's own time zone.
"""

from __future__ import annotations

import math

import altair as alt
import pandas as pd

from . import scale
from .formats import fmt, group_names, groups_text, zone_name
from .style import BOUNDARY_COLOUR, FUTILITY_COLOUR, GROUP_COLOURS, NULL_COLOUR, OFF_SCALE_COLOUR, REASON_COLOURS

__all__ = [
    "history_frame",
    "futility_direction",
    "uses_t",
    "robust_span",
    "boundary_chart",
    "estimate_chart",
    "group_chart",
    "excluded_chart",
    "off_scale_note",
    "cut_intervals_note",
]

# The statistic's scale always shows ±4.5 at least: room for the usual 1.96 and a late boundary.
_MIN_REACH = 4.5
# A look further out than this many times the core span counts as extreme: clipped and marked.
_EXTREME = 3.0


def history_frame(looks, zone="UTC"):
    """The looks as a DataFrame, with what the charts draw added.

    ``as_of`` (aware UTC), ``local_time`` (the comparison's wall-clock time, carried as UTC so
    the browser's own zone never shifts it), ``decision_z`` (the statistic on the decision's
    scale), ``one_sided_p`` and ``nominal_level`` (for t looks).
    """
    frame = pd.DataFrame(looks)
    if frame.empty:
        return frame
    frame["as_of"] = pd.to_datetime(frame["as_of"], utc=True)
    frame["local_time"] = frame["as_of"].dt.tz_convert(zone).dt.tz_localize(None).dt.tz_localize("UTC")
    df = frame["df"] if "df" in frame else pd.Series([None] * len(frame))
    stats = frame["statistic"] if "statistic" in frame else pd.Series([None] * len(frame))
    frame["decision_z"] = [scale.z_equivalent(_number(s), _number(d)) for s, d in zip(stats, df)]
    frame["one_sided_p"] = [scale.one_sided_p(_number(s), _number(d)) for s, d in zip(stats, df)]
    boundary = frame["boundary_z"] if "boundary_z" in frame else pd.Series([None] * len(frame))
    frame["nominal_level"] = [scale.nominal_level(_number(b)) for b in boundary]
    for column in ("decision_z", "one_sided_p", "nominal_level"):
        frame[column] = pd.to_numeric(frame[column])
    return frame


def _number(value):
    """A finite float, or None (pandas hands missing values back as NaN)."""
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def uses_t(frame):
    """Whether any look was decided through a t statistic (it recorded degrees of freedom)."""
    return "df" in frame and frame["df"].notna().any()


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


def robust_span(core, others, *, extreme=_EXTREME):
    """``(low, high)`` covering ``core`` and every value of ``others`` not far outside it.

    ``core`` holds what must be seen (the null, the newest look); a value of ``others`` more
    than ``extreme`` core widths beyond the core is left out, to be clipped and marked.
    """
    core = [v for v in core if v is not None and math.isfinite(v)]
    low, high = min(core), max(core)
    width = (high - low) or max(abs(low), abs(high), 1.0)
    keep = [v for v in others if v is not None and math.isfinite(v)
            and low - extreme * width <= v <= high + extreme * width]
    return min([low, *keep]), max([high, *keep])


def _time_axis(zone):
    """Clock time over the date, in the comparison's zone (the values carry it as UTC)."""
    return alt.X(
        "local_time:T", title=f"look time ({zone})", scale=alt.Scale(type="utc"),
        axis=alt.Axis(labelExpr="[utcFormat(datum.value, '%H:%M'), utcFormat(datum.value, '%a %d %b')]",
                      labelAngle=0, labelOverlap=True, tickCount=6),
    )


def _text(value, digits=4):
    return "" if value is None or (isinstance(value, float) and not math.isfinite(value)) else fmt(value, digits)


def boundary_chart(row, frame):
    """Each look on its decision's scale against the efficacy (and futility) boundary, by information fraction."""
    data = frame.dropna(subset=["decision_z", "fraction"]) if "decision_z" in frame else frame.iloc[0:0]
    if data.empty:
        return None
    alternative = row.get("alternative") or "two-sided"
    t_based = uses_t(data)
    lines = _boundary_lines(row, data, alternative)
    legend = ["look", "efficacy boundary"]
    palette = [GROUP_COLOURS[0], BOUNDARY_COLOUR]
    if any(line["line"] == "futility boundary" for line in lines):
        legend.append("futility boundary")
        palette.append(FUTILITY_COLOUR)
    colour = alt.Color("line:N", title=None, scale=alt.Scale(domain=legend, range=palette),
                       legend=alt.Legend(orient="bottom"))

    low, high = _statistic_reach(data, alternative)
    y_scale = alt.Scale(domain=[low, high], nice=False)
    title = "z-equivalent of t" if t_based else "test statistic z"
    shown = data.assign(
        line="look",
        shown=data["decision_z"].clip(low, high),
        off_scale=(data["decision_z"] < low) | (data["decision_z"] > high),
        statistic_text=[_text(v) for v in data["statistic"]],
        df_text=[_text(v, 3) for v in data["df"]] if "df" in data else "",
        p_text=[_text(v, 3) for v in data["one_sided_p"]],
        z_text=[_text(v) for v in data["decision_z"]],
        boundary_text=[_text(v) for v in data["boundary_z"]],
    )
    x = alt.X("fraction:Q", title="information fraction (share of the planned evidence)",
              axis=alt.Axis(format="%"), scale=alt.Scale(domain=[0, max(1.0, float(data["fraction"].max()))]))
    tooltip = [alt.Tooltip("look:Q"), alt.Tooltip("fraction:Q", format=".1%", title="plan reached"),
               alt.Tooltip("z_text:N", title="z-equivalent" if t_based else "z"),
               alt.Tooltip("boundary_text:N", title="boundary")]
    if t_based:
        tooltip[2:2] = [alt.Tooltip("statistic_text:N", title="t"), alt.Tooltip("df_text:N", title="df"),
                        alt.Tooltip("p_text:N", title="one-sided p")]
    layers = [alt.Chart(pd.DataFrame({"z": [0.0]})).mark_rule(color=NULL_COLOUR, strokeWidth=1)
              .encode(y=alt.Y("z:Q", scale=y_scale))]
    if lines:
        layers.append(
            alt.Chart(pd.DataFrame(lines))
            .mark_line(strokeDash=[6, 4], clip=True, point=alt.OverlayMarkDef(shape="triangle-up", size=40))
            .encode(x=x, y=alt.Y("z:Q", scale=y_scale), detail="side:N", color=colour,
                    tooltip=[alt.Tooltip("line:N", title="line"), alt.Tooltip("look:Q"),
                             alt.Tooltip("fraction:Q", format=".1%", title="plan reached"),
                             alt.Tooltip("z:Q", format=".3f", title="boundary")])
        )
    layers.append(
        alt.Chart(shown)
        .mark_line(point=alt.OverlayMarkDef(size=60, filled=True), strokeWidth=2.5, clip=True)
        .encode(x=x, y=alt.Y("shown:Q", title=title, scale=y_scale), color=colour, tooltip=tooltip)
    )
    layers += _off_scale_marks(shown, x, y_scale, "shown", "z_text", tooltip, "decision_z")
    return alt.layer(*layers).properties(height=320)


def _boundary_lines(row, data, alternative):
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
            lines.append({"look": look["look"], "fraction": look["fraction"], "z": futility_direction(row) * f,
                          "line": "futility boundary", "side": "futility"})
    return lines


def _statistic_reach(data, alternative):
    """The y range of the decision chart: the newest look and boundary always in view, extremes clipped."""
    z = data["decision_z"].abs()
    boundaries = data["boundary_z"].dropna()
    last_boundary = float(boundaries.iloc[-1]) if not boundaries.empty else 0.0
    base = max(_MIN_REACH, 1.25 * last_boundary, 1.15 * float(z.iloc[-1]))
    ordinary = z[z <= _EXTREME * base]
    reach = max(base, 1.15 * float(ordinary.max())) if not ordinary.empty else base
    low = -reach if alternative != "greater" else -min(reach, 3.0)
    high = reach if alternative != "less" else min(reach, 3.0)
    return low, high


def _off_scale_marks(shown, x, y_scale, field, text_field, tooltip, value_field):
    """A hollow triangle at the chart's edge, and the true value beside it, for each clipped look.

    The triangle points the way the true value lies: up when it is above the chart, down below.
    """
    off = shown[shown["off_scale"]]
    if off.empty:
        return []
    off = off.assign(shape=["triangle-up" if v > c else "triangle-down" for v, c in zip(off[value_field], off[field])],
                     label=[f"look {k}: {t} (off scale)" for k, t in zip(off["look"], off[text_field])])
    base = alt.Chart(off)
    marks = base.mark_point(size=140, filled=False, strokeWidth=2, color=OFF_SCALE_COLOUR).encode(
        x=x, y=alt.Y(f"{field}:Q", scale=y_scale), shape=alt.Shape("shape:N", scale=None, legend=None),
        tooltip=tooltip)
    labels = base.mark_text(align="left", dx=8, fontSize=11, color=OFF_SCALE_COLOUR).encode(
        x=x, y=alt.Y(f"{field}:Q", scale=y_scale), text="label:N")
    return [marks, labels]


def off_scale_note(frame, row):
    """Which looks the decision chart clips at its edge, in words (None when none is clipped)."""
    data = frame.dropna(subset=["decision_z", "fraction"]) if "decision_z" in frame else frame.iloc[0:0]
    if data.empty:
        return None
    low, high = _statistic_reach(data, row.get("alternative") or "two-sided")
    off = data[(data["decision_z"] < low) | (data["decision_z"] > high)]
    if off.empty:
        return None
    looks = ", ".join(f"look {k} ({fmt(z)})" for k, z in zip(off["look"], off["decision_z"]))
    return (f"Off the chart's scale, drawn at its edge as a hollow triangle: {looks}. An early look on few "
            "events can land far out; the scale follows the later looks so they stay readable.")


def estimate_chart(row, frame):
    """Estimate at each look, its repeated confidence interval where the look has one, the null marked."""
    data = frame.dropna(subset=["estimate"]) if "estimate" in frame else frame.iloc[0:0]
    if data.empty:
        return None
    zone = zone_name(row)
    null = row.get("null_difference") or 0.0
    low, high = _estimate_span(data, null)
    pad = 0.08 * ((high - low) or 1.0)
    domain = [low - pad, high + pad]
    y_scale = alt.Scale(domain=domain, nice=False)
    x = _time_axis(zone)
    has_interval = data["ci_low"].notna() | data["ci_high"].notna()
    # A look without an interval ends a stretch of the band; the next stretch starts afresh.
    stretch = (~has_interval).cumsum()
    banded = data[has_interval].assign(
        stretch=stretch[has_interval],
        # an open end (one-sided design) is a real interval: it reaches the chart's edge
        band_low=data.loc[has_interval, "ci_low"].fillna(domain[0]),
        band_high=data.loc[has_interval, "ci_high"].fillna(domain[1]),
        low_text=[_text(v) or "open" for v in data.loc[has_interval, "ci_low"]],
        high_text=[_text(v) or "open" for v in data.loc[has_interval, "ci_high"]],
    )
    y_title = f"difference ({groups_text(row)})"
    band_tooltip = [alt.Tooltip("look:Q"), alt.Tooltip("low_text:N", title="interval low"),
                    alt.Tooltip("high_text:N", title="interval high")]
    layers = []
    if not banded.empty:
        layers.append(alt.Chart(banded).mark_area(opacity=0.22, color=GROUP_COLOURS[0], clip=True).encode(
            x=x, y=alt.Y("band_low:Q", title=y_title, scale=y_scale), y2="band_high:Q", detail="stretch:N",
            tooltip=band_tooltip))
        # A look alone in its stretch has no neighbour to shade towards: its interval is drawn as a bar.
        alone = banded[banded.groupby("stretch")["look"].transform("size") == 1]
        layers.append(alt.Chart(alone).mark_rule(color=GROUP_COLOURS[0], opacity=0.55, strokeWidth=3, clip=True).encode(
            x=x, y=alt.Y("band_low:Q", scale=y_scale), y2="band_high:Q", tooltip=band_tooltip))
    shown = data.assign(
        shown=data["estimate"].clip(domain[0], domain[1]),
        off_scale=(data["estimate"] < domain[0]) | (data["estimate"] > domain[1]),
        estimate_text=[_text(v) for v in data["estimate"]],
        when_text=[t.strftime("%Y-%m-%d %H:%M") for t in data["local_time"]],
        interval_text=["yes" if h else "none at this look" for h in has_interval],
    )
    tooltip = [alt.Tooltip("look:Q"), alt.Tooltip("when_text:N", title=f"time ({zone})"),
               alt.Tooltip("estimate_text:N", title="estimate"), alt.Tooltip("interval_text:N", title="interval")]
    layers.append(alt.Chart(shown).mark_line(point=True, color=GROUP_COLOURS[0], strokeWidth=2.5, clip=True).encode(
        x=x, y=alt.Y("shown:Q", title=y_title, scale=y_scale), tooltip=tooltip))
    layers += _off_scale_marks(shown, x, y_scale, "shown", "estimate_text", tooltip, "estimate")
    layers.append(alt.Chart(pd.DataFrame({"null": [null], "label": [f"null difference {fmt(null)}"]})).mark_rule(
        color=NULL_COLOUR, strokeDash=[4, 3], strokeWidth=1.5).encode(y=alt.Y("null:Q", scale=y_scale),
                                                                        tooltip=["label:N"]))
    return alt.layer(*layers).properties(height=280)


def _estimate_span(data, null):
    """The estimate chart's y range: the null and the newest look's interval, and every look near them."""
    last = data.iloc[-1]
    core = [null, last["estimate"], _number(last.get("ci_low")), _number(last.get("ci_high"))]
    others = [*data["estimate"], *data["ci_low"].dropna(), *data["ci_high"].dropna()]
    return robust_span(core, [float(v) for v in others])


def cut_intervals_note(row, frame):
    """Which looks' intervals (or estimates) reach beyond the estimate chart, in words; None if none."""
    data = frame.dropna(subset=["estimate"]) if "estimate" in frame else frame.iloc[0:0]
    if data.empty:
        return None
    low, high = _estimate_span(data, row.get("null_difference") or 0.0)
    pad = 0.08 * ((high - low) or 1.0)
    low, high = low - pad, high + pad
    cut = data[(data["estimate"] < low) | (data["estimate"] > high)
               | (data["ci_low"].notna() & (data["ci_low"] < low))
               | (data["ci_high"].notna() & (data["ci_high"] > high))]
    if cut.empty:
        return None
    looks = _look_ranges(list(cut["look"]))
    return (f"{looks}: the interval (or estimate) reaches beyond the chart and is cut at its edge; "
            "the look history below has the figures.")


def _look_ranges(numbers):
    """``"Looks 1–3, 7"`` for [1, 2, 3, 7]; ``"Look 2"`` for [2]."""
    numbers = sorted(int(n) for n in numbers)
    parts, start = [], numbers[0]
    for previous, current in zip(numbers, numbers[1:] + [None]):
        if current != previous + 1:
            parts.append(str(start) if start == previous else f"{start}–{previous}")
            start = current
    return ("Look " if len(numbers) == 1 else "Looks ") + ", ".join(parts)


def group_chart(row, frame):
    """Each group's running mean (or rate) at each look; a far early value is clipped and marked."""
    if frame.empty or "mean1" not in frame or frame[["mean1", "mean2"]].isna().all().all():
        return None
    groups = group_names(row)
    long = pd.concat([
        frame[["local_time", "look", "mean1", "n1"]].rename(columns={"mean1": "value", "n1": "n"}).assign(group=groups[0]),
        frame[["local_time", "look", "mean2", "n2"]].rename(columns={"mean2": "value", "n2": "n"}).assign(group=groups[1]),
    ]).dropna(subset=["value"])
    newest = long[long["look"] == long["look"].max()]["value"]
    low, high = robust_span(list(newest), list(long["value"]))
    pad = 0.1 * ((high - low) or abs(high) or 1.0)
    domain = [low - pad, high + pad]
    long = long.assign(
        shown=long["value"].clip(*domain),
        off_scale=(long["value"] < domain[0]) | (long["value"] > domain[1]),
        value_text=[_text(v) for v in long["value"]],
    )
    proportion = row.get("metric") == "proportion"
    title = "rate" if proportion else "mean"
    x = _time_axis(zone_name(row))
    y_scale = alt.Scale(domain=domain, nice=False)
    colour = alt.Color("group:N", title=None, scale=alt.Scale(domain=list(groups[:2]), range=list(GROUP_COLOURS)))
    tooltip = ["group:N", alt.Tooltip("look:Q"), alt.Tooltip("value_text:N", title=title),
               alt.Tooltip("n:Q", format=",", title="events")]
    lines = alt.Chart(long).mark_line(point=True, strokeWidth=2.5, clip=True).encode(
        x=x, y=alt.Y("shown:Q", title=f"running {title}", scale=y_scale,
                     axis=alt.Axis(format="%" if proportion else ",~r")),
        color=colour, tooltip=tooltip)
    layers = [lines, *_off_scale_marks(long, x, y_scale, "shown", "value_text", tooltip, "value")]
    return alt.layer(*layers).properties(height=260).configure_legend(orient="bottom")


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
