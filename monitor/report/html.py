"""A review as one self-contained HTML page: inline styles, inline SVG charts, no script.

Laid out for A4 and Letter portrait paper: the look table is split into two narrower tables
(evidence, then decision) so nothing is cut at the page edge, and rows never break across pages.
"""

from __future__ import annotations

import html
import math

from ..vocabulary import (design_words, end_text, figure, interval_width, quantity, relative_change,
                          state_label)
from .content import Review

__all__ = ["render_html"]

_STYLE = """
@page { size: A4 portrait; margin: 14mm 12mm 16mm 12mm; }
* { box-sizing: border-box; }
body { font-family: "DejaVu Sans", "Liberation Sans", Arial, sans-serif; font-size: 9.5pt;
       color: #1d2430; margin: 0; line-height: 1.35; }
main { max-width: 186mm; margin: 0 auto; }
h1 { font-size: 16pt; margin: 0 0 2mm 0; }
h2 { break-after: avoid; page-break-after: avoid; font-size: 11.5pt; margin: 6mm 0 2mm 0; border-bottom: 1.5pt solid #2f6f73; padding-bottom: 1mm; }
.state { display: inline-block; padding: 0.6mm 2.5mm; border-radius: 2mm; background: #e7f0ef;
         border: 0.8pt solid #2f6f73; font-weight: bold; }
.state.stopped { background: #fbeee0; border-color: #b3641a; }
.lead { font-size: 10.5pt; margin: 2mm 0; }
.caution { border-left: 2.5pt solid #b3641a; padding: 1.5mm 3mm; background: #fdf7f0; margin: 3mm 0; }
table { border-collapse: collapse; width: 100%; table-layout: fixed; margin: 1mm 0 3mm 0; }
th, td { border-bottom: 0.5pt solid #c9d1d9; padding: 0.8mm 1.2mm; text-align: right;
         overflow-wrap: anywhere; vertical-align: top; }
th { background: #eef2f5; font-weight: 600; font-size: 8.5pt; }
td.text, th.text { text-align: left; }
tr { break-inside: avoid; page-break-inside: avoid; }
dl.design { display: grid; grid-template-columns: 45mm 1fr; gap: 0.6mm 3mm; margin: 0; }
dl.design dt { font-weight: 600; }
dl.design dd { margin: 0; overflow-wrap: anywhere; }
figure { margin: 2mm 0 4mm 0; break-inside: avoid; page-break-inside: avoid; }
figcaption { font-size: 8.5pt; color: #4a5563; }
svg { width: 100%; height: auto; }
.muted { color: #5b6573; }
.warn { color: #8a3d00; }
footer { margin-top: 6mm; font-size: 8pt; color: #5b6573; }
"""


def _e(value) -> str:
    return html.escape(str(value), quote=True)


def _n(value, unit="") -> str:
    """A plain figure (a count, a level, a z) with an optional unit; ``—`` when missing."""
    text = figure(value)
    return f"{text} {unit}".rstrip() if unit and text != "—" else text


def _metric(r: Review) -> str:
    return r.design.metric


def _amount(r: Review, value, width=None) -> str:
    """A difference in the comparison's units (rates in percentage points), to the interval's width."""
    return quantity(value, metric=_metric(r), unit=r.unit, width=width)


def _interval(low, high, r: Review | None = None, *, with_unit=True) -> str:
    if low is None and high is None:
        return "none yet"
    metric = _metric(r) if r is not None else "mean"
    width = interval_width(low, high)
    text = f"{end_text(low, metric=metric, width=width)} to {end_text(high, metric=metric, width=width)}"
    suffix = "pp" if metric == "proportion" else (r.unit if r is not None else "")
    return f"{text} {suffix}" if suffix and with_unit else text


def _when(iso) -> str:
    if not iso:
        return "—"
    return _e(iso.replace("T", " ")[:16] + " UTC")


def _pct(value) -> str:
    return "—" if value is None else f"{100.0 * value:.1f} %"


def _question(r: Review) -> str:
    a, b = (r.labels + ("group 1", "group 2"))[:2]
    what = "rate" if r.design.metric == "proportion" else "mean"
    alt = r.design.alternative
    delta = float(r.design.null_difference or 0.0)
    base = _amount(r, delta) if delta else "zero"
    if r.design.before_after:
        start = _when(r.design.window.start)
        change = {"two-sided": f"change the gap in {what} between {a} and {b} (by other than {base})",
                  "greater": f"raise the {what} of {a} against {b} by more than {base}",
                  "less": f"lower the {what} of {a} against {b} by more than {base}"}[alt]
        return (f"Did the change that went live at {start} {_e(change)}, allowing for the gap there "
                f"was before it?")
    if alt == "two-sided":
        claim = f"Does the {what} of {a} differ from that of {b} (difference other than {base})?"
    elif alt == "greater":
        claim = f"Is the {what} of {a} above that of {b} by more than {base}?"
    else:
        claim = f"Is the {what} of {a} below that of {b} by more than {base}?"
    return _e(claim)


def _settings_text(part) -> str:
    """A design part's settings as "name value, …" (its stored keys), or "none" without one."""
    if part is None:
        return "none"
    return ", ".join(f"{k} {v}" for k, v in part.to_stored().items() if v) or "none"


def _filter_text(f) -> str:
    column, op, value = f
    return f"{column} {op} {list(value) if isinstance(value, tuple) else value}"


def _window_rows(r: Review) -> list:
    window = r.design.window
    if window is None:
        return []
    rows = [("start", window.start.replace("T", " ")[:16] + " UTC")]
    if window.before_after:
        rows.append(("baseline", f"{window.baseline_from.replace('T', ' ')[:16]} to "
                                 f"{window.baseline_to.replace('T', ' ')[:16]} UTC "
                                 f"({_n(window.baseline_days)} days, frozen when first read)"))
        rows.append(("estimate", "difference in differences: (group 1 − group 2 since the start) − "
                                 "(group 1 − group 2 in the baseline), CR2 standard error over calendar "
                                 "days, t on Bell–McCaffrey degrees of freedom"))
    return rows


def _design_rows(r: Review) -> str:
    d, m = r.design, r.design.measure
    rows = [
        ("groups", " vs ".join(f"{label} ({code})" if label != code else code
                               for label, code in zip(r.labels, r.groups))),
        ("measured", f"{m.value_column} in table {m.table}, time {m.time_column}"),
        ("unit", "percentage points (differences of rates)" if d.metric == "proportion" else (r.unit or "—")),
        ("method", f"{d.method} ({d.metric}): {design_words(d.to_stored(), r.labels)}"),
        ("alternative", d.alternative),
        ("error rate (alpha)", _n(d.alpha)),
        ("alpha spending", d.spending),
        ("planned per group", _n(d.planned_per_group)),
        ("null difference", _amount(r, d.null_difference)),
        ("clustering", _settings_text(d.clustering)),
        ("pairing", _settings_text(d.pairing)),
        ("time zone", m.timezone),
        *_window_rows(r),
    ]
    if m.filters:
        rows.append(("filters", "; ".join(_filter_text(f) for f in m.filters)))
    if m.valid_range:
        rows.append(("valid range", " to ".join(_n(v) for v in m.valid_range)))
    return "".join(f"<dt>{_e(k)}</dt><dd>{_e(v)}</dd>" for k, v in rows)


def _result(r: Review) -> str:
    unit = r.unit
    last = r.looks[-1] if r.looks else None
    if last is None:
        return "<p class='lead'>No look has been recorded yet.</p>"
    parts = []
    a, b = (r.labels + ("group 1", "group 2"))[:2]
    if r.stopped and r.adjusted and r.adjusted.get("estimate") is not None:
        adj = r.adjusted
        width = interval_width(adj.get("ci_low"), adj.get("ci_high"))
        relative = relative_change(adj["estimate"], r.extra.get("mean2"))
        parts.append(
            f"<p class='lead'><b>Adjusted estimate {_e(_amount(r, adj['estimate'], width))}</b> ({_e(a)} − {_e(b)}"
            f"{_e(', ' + relative + ' of ' + b) if relative else ''}), "
            f"interval {_e(_interval(adj.get('ci_low'), adj.get('ci_high'), r))}, "
            f"p-value {_e(_n(adj.get('p_value')))} (allowing for the repeated looks; stopped at look "
            f"{_e(adj.get('stop_look') or last.look)}). The last look's own estimate was "
            f"{_e(_amount(r, adj.get('naive_estimate'), width))}.</p>")
    else:
        width = interval_width(last.ci_low, last.ci_high)
        relative = relative_change(last.estimate, r.extra.get("mean2"))
        parts.append(
            f"<p class='lead'>Latest estimate {_e(_amount(r, last.estimate, width))} ({_e(a)} − {_e(b)}"
            f"{_e(', ' + relative + ' of ' + b) if relative else ''}), "
            f"repeated interval {_e(_interval(last.ci_low, last.ci_high, r))}.</p>")
    evidence = r.extra.get("evidence") or None
    if evidence and evidence.get("count") is not None:
        parts.append(f"<p>The evidence rests on {_e(evidence['count'])} {_e(evidence['noun'])} "
                     f"({_e(last.n1)} and {_e(last.n2)} events).</p>")
    parts.append(_before_after(r))
    parts.append(
        f"<p>{_e(len(r.looks))} looks; information {_e(_pct(last.fraction))} of the plan; "
        f"alpha spent {_e(_n(last.cumulative_alpha))} of {_e(_n(r.design.alpha))}.</p>")
    for w in r.warnings:
        parts.append(f"<p class='warn'>Warning: {_e(w)}</p>")
    return "".join(parts)


def _gap_row(label, gap, r: Review) -> str:
    gap = gap or {}
    low, high = (list(gap.get("ci") or []) + [None, None])[:2]
    n = list(gap.get("n") or []) + [None, None]
    width = None if low is None or high is None else high - low
    return (f"<tr><td class='text'>{_e(label)}</td><td>{_e(_amount(r, gap.get('estimate'), width))}</td>"
            f"<td class='text'>{_e(_interval(low, high, r) if gap else '—')}</td>"
            f"<td>{_e(_n(gap.get('clusters')))}</td><td>{_e(_n(n[0]))} / {_e(_n(n[1]))}</td></tr>")


def _before_after(r: Review) -> str:
    """The baseline sentence and the baseline figures of a before/after comparison ("" otherwise)."""
    if not r.design.before_after:
        return ""
    if not r.baseline or not r.before_after:
        return ("<p>The baseline has not been read yet: it is read once, at the first look after it "
                "ends, and frozen.</p>")
    figures = r.before_after
    sentence = r.baseline[:1].upper() + r.baseline[1:]
    rows = [_gap_row("before the change (baseline)", figures.get("baseline_gap"), r)]
    if figures.get("after_gap"):
        rows.append(_gap_row("since the start", figures["after_gap"], r))
    relative = figures.get("relative") or {}
    tail = ""
    if relative.get("percent") is not None:
        low, high = (list(relative.get("ci") or []) + [None, None])[:2]
        tail = (f"<p>The change is {_e(_n(relative['percent']))} % of group 1's expected value without "
                f"it (interval {_e(_interval(low, high, with_unit=False))} %, delta method).</p>")
    return (f"<p class='lead'>{_e(sentence)}.</p>"
            "<p>The estimate above is the change itself: the gap since the start less the gap "
            f"there was before it ({_e(_n(100 * (1 - r.design.alpha)))} % intervals of each gap alone, "
            "not allowing for the looks).</p>"
            "<table><tr><th class='text' style='width:34%'>group 1 − group 2</th><th>gap</th>"
            "<th class='text'>interval</th><th>days</th><th>events per group</th></tr>"
            + "".join(rows) + "</table>" + tail)


def _look_tables(r: Review) -> str:
    unit_name = "pp" if _metric(r) == "proportion" else r.unit
    unit = f" ({_e(unit_name)})" if unit_name else ""
    paired = any(lk.pairs for lk in r.looks)
    clustered = any(lk.clusters for lk in r.looks)
    count_head = "pairs" if paired else ("clusters" if clustered else "events")
    evidence = [f"<tr><th>look</th><th class='text'>as of (UTC)</th><th>{count_head}</th>"
                f"<th>estimate{unit}</th><th class='text'>repeated interval{unit}</th><th>excluded</th></tr>"]
    decision = ["<tr><th>look</th><th>information</th><th>evidence (z scale)</th><th>boundary (z)</th>"
                "<th>p-value</th><th>nominal level</th><th>alpha spent</th><th class='text'>decision</th></tr>"]
    for lk in r.looks:
        if paired:
            count = _n(lk.pairs)
        elif clustered:
            count = _n(lk.clusters)
        else:
            count = f"{_n(lk.n1)} / {_n(lk.n2)}"
        evidence.append(
            f"<tr><td>{lk.look}</td><td class='text'>{_when(lk.as_of)}</td><td>{_e(count)}</td>"
            f"<td>{_e(end_text(lk.estimate, metric=_metric(r), width=interval_width(lk.ci_low, lk.ci_high)) if lk.estimate is not None else '—')}</td>"
            f"<td class='text'>{_e(_interval(lk.ci_low, lk.ci_high, r, with_unit=False))}</td>"
            f"<td>{_e(lk.excluded_new)}</td></tr>")
        decision.append(
            f"<tr><td>{lk.look}</td><td>{_e(_pct(lk.fraction))}</td><td>{_e(_n(lk.z_equivalent))}</td>"
            f"<td>{_e('±' + _n(lk.boundary_z) if lk.boundary_z is not None and r.design.alternative == 'two-sided' else _n(lk.boundary_z))}</td>"
            f"<td>{_e(_n(lk.p_value))}</td><td>{_e(_n(lk.nominal_p))}</td>"
            f"<td>{_e(_n(lk.cumulative_alpha))}</td><td class='text'>{_e(state_label(lk.decision))}</td></tr>")
    return (f"<table class='looks'>{''.join(evidence)}</table>"
            f"<table class='looks'>{''.join(decision)}</table>")


def _chart(r: Review) -> str:
    """Evidence on the z scale against the boundary, by information; drawn as inline SVG."""
    points = [(lk.fraction, lk.z_equivalent, lk.boundary_z) for lk in r.looks
              if lk.fraction is not None and lk.z_equivalent is not None]
    if not points:
        return "<p class='muted'>No look has a statistic to draw yet.</p>"
    width, height, left, right, top, bottom = 700, 260, 48, 12, 12, 34
    xs = [p[0] for p in points]
    x_max = max(1.0, max(xs))
    finite_bounds = [p[2] for p in points if p[2] is not None and math.isfinite(p[2])]
    values = sorted(abs(p[1]) for p in points)
    # An extreme early look must not flatten the rest: scale to the bounds and the bulk of the
    # evidence, clip anything beyond and mark it.
    bulk = values[int(0.9 * (len(values) - 1))] if values else 1.0
    y_lim = max([3.0, bulk * 1.15] + [b * 1.15 for b in finite_bounds[-3:]])
    two_sided = r.design.alternative == "two-sided"
    y_min = -y_lim if two_sided or any(p[1] < 0 for p in points) else min(0.0, -0.5)

    def sx(x):
        return left + (width - left - right) * x / x_max

    def sy(y):
        y = max(min(y, y_lim), y_min)
        return top + (height - top - bottom) * (y_lim - y) / (y_lim - y_min)

    out = [f"<svg viewBox='0 0 {width} {height}' xmlns='http://www.w3.org/2000/svg' role='img' "
           "aria-label='evidence against the boundary'>",
           f"<rect x='{left}' y='{top}' width='{width - left - right}' height='{height - top - bottom}' "
           "fill='#fbfcfd' stroke='#c9d1d9'/>"]
    for tick in range(int(math.ceil(y_min)), int(math.floor(y_lim)) + 1):
        if tick % max(1, int(y_lim // 4)) == 0:
            out.append(f"<line x1='{left}' x2='{width - right}' y1='{sy(tick):.1f}' y2='{sy(tick):.1f}' "
                       "stroke='#e3e8ed'/>")
            out.append(f"<text x='{left - 6}' y='{sy(tick) + 3:.1f}' font-size='10' text-anchor='end'>{tick}</text>")
    for frac in (0.25, 0.5, 0.75, 1.0):
        if frac <= x_max:
            anchor = "end" if sx(frac) > width - right - 20 else "middle"
            out.append(f"<text x='{sx(frac):.1f}' y='{height - bottom + 14}' font-size='10' "
                       f"text-anchor='{anchor}'>{int(frac * 100)} %</text>")
    out.append(f"<text x='{(left + width) / 2:.0f}' y='{height - 4}' font-size='10' text-anchor='middle'>"
               "information (share of the plan)</text>")
    bound_pts = [(sx(p[0]), sy(p[2])) for p in points if p[2] is not None and math.isfinite(p[2])]
    if bound_pts:
        path = " ".join(f"{x:.1f},{y:.1f}" for x, y in bound_pts)
        out.append(f"<polyline points='{path}' fill='none' stroke='#b3641a' stroke-width='2' stroke-dasharray='6 3'/>")
        if two_sided:
            mirror = " ".join(f"{sx(p[0]):.1f},{sy(-p[2]):.1f}" for p in points
                              if p[2] is not None and math.isfinite(p[2]))
            out.append(f"<polyline points='{mirror}' fill='none' stroke='#b3641a' stroke-width='2' stroke-dasharray='6 3'/>")
    path = " ".join(f"{sx(p[0]):.1f},{sy(p[1]):.1f}" for p in points)
    out.append(f"<polyline points='{path}' fill='none' stroke='#2f6f73' stroke-width='2'/>")
    for x, y, _ in points:
        clipped = abs(y) > y_lim
        out.append(f"<circle cx='{sx(x):.1f}' cy='{sy(y):.1f}' r='3' fill='{'#ffffff' if clipped else '#2f6f73'}' "
                   "stroke='#2f6f73'/>")
        if clipped:
            out.append(f"<text x='{sx(x) + 5:.1f}' y='{sy(y) + (10 if y < 0 else -4):.1f}' font-size='9'>"
                       f"{_e(_n(y))} (off scale)</text>")
    out.append(f"<line x1='{left}' x2='{width - right}' y1='{sy(0):.1f}' y2='{sy(0):.1f}' stroke='#7a8591'/>")
    out.append("</svg>")
    return ("<figure>" + "".join(out) + "<figcaption>Solid: each look's evidence on the z scale (for "
            "t-based and clustered methods the normal quantile of its one-sided p-value, the scale "
            "the decision is taken on). Dashed: the boundary at that look. Crossing it stops the "
            "comparison with a difference found.</figcaption></figure>")


def _quality(r: Review) -> str:
    if not r.excluded:
        return "<p>No row was excluded.</p>"
    rows = "".join(f"<tr><td class='text'>{_e(reason.replace('_', ' '))}</td><td>{_e(count)}</td></tr>"
                   for reason, count in sorted(r.excluded.items()))
    return ("<p>Rows the monitor left out, by reason (running totals); they are counted, never used.</p>"
            f"<table style='width:60%'><tr><th class='text'>reason</th><th>rows</th></tr>{rows}</table>")


def _alerts(r: Review) -> str:
    if not r.alerts:
        return "<p>No alert was raised.</p>"
    rows = []
    for a in r.alerts:
        ack = (f"acknowledged by {a['acknowledged_by']} at {_when(a['acknowledged_at'])}"
               if a.get("acknowledged_by") else a.get("state", ""))
        rows.append(f"<tr><td class='text'>{_when(a['created_at'])}</td><td class='text'>{_e(a['kind'])}</td>"
                    f"<td class='text'>{_e(a.get('message') or '')}</td><td class='text'>{_e(ack)}</td></tr>")
    return ("<table><tr><th class='text' style='width:20%'>raised (UTC)</th><th class='text' style='width:14%'>kind</th>"
            "<th class='text'>message</th><th class='text' style='width:24%'>state</th></tr>"
            + "".join(rows) + "</table>")


def _versions(r: Review) -> str:
    if len(r.versions) <= 1:
        return ""
    rows = "".join(f"<tr><td>{v['version']}</td><td class='text'>{_e(state_label(v['state']))}</td>"
                   f"<td>{_e(v['looks'])}</td><td class='text'>{_when(v['created_at'])}</td></tr>"
                   for v in r.versions)
    return ("<h2>Versions of this comparison</h2><table><tr><th>version</th><th class='text'>state</th>"
            f"<th>looks</th><th class='text'>started (UTC)</th></tr>{rows}</table>")


def render_html(review: Review) -> str:
    """The review as one HTML document (UTF-8 text)."""
    r = review
    stopped = " stopped" if r.stopped else ""
    description = f"<p>{_e(r.description)}</p>" if r.description else ""
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<title>gapwatch review: {_e(r.name)} v{r.version}</title>
<style>{_STYLE}</style></head>
<body><main>
<h1>Review of {_e(r.name)} <span class="muted">version {r.version}</span></h1>
<p><span class="state{stopped}">{_e(state_label(r.state))}</span>
 &nbsp;started {_when(r.created_at)}{(' · stopped ' + _when(r.stopped_at)) if r.stopped_at else ''}</p>
{description}
<h2>The question</h2>
<p class="lead">{_question(r)}</p>
<h2>Result</h2>
{_result(r)}
<div class="caution">{_e(r.caution)}</div>
<h2>Evidence against the boundary</h2>
{_chart(r)}
<h2>Every look</h2>
{_look_tables(r)}
<h2>Design as frozen at the first look</h2>
<dl class="design">{_design_rows(r)}</dl>
<h2>Data quality</h2>
{_quality(r)}
<h2>Alerts and acknowledgements</h2>
{_alerts(r)}
{_versions(r)}
<footer>Generated {_e(r.generated_at)} by gapwatch from its history store. Times are UTC.</footer>
</main></body></html>
"""
