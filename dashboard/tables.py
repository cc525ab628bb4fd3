"""The dashboard's HTML tables (the board, the review list) and the plan's lines.

No pandas here: the board is the first page a fresh server draws, and pandas alone takes
longer to import than the whole board takes to read and render.
"""

from __future__ import annotations

import html
from datetime import datetime

from monitor.store.readback import clustering_figures, describe_wait
from monitor.vocabulary import STATES, interval_width, method_words, spending_words

from .formats import (
    ago, amount, clock, group_names, headline_text, comparison_link, confidence_percent, evidence_text, figure, fraction_text, groups_text,
    next_look_text, plan_eta_text, relative_text,
)
from .style import badge

__all__ = ["BOARD_COLUMNS", "REVIEW_COLUMNS", "state_counts", "board_table", "review_table", "plan_lines"]

_BOARD_CLUSTER_TEXT = {"clusters": "{} clusters".format, "design_effect": "design effect {:.2f}".format,
                       "effective_n": "effective n {:,.0f}".format}

BOARD_COLUMNS = ("State", "Comparison", "Estimate [repeated CI]", "Events per group", "Plan reached",
                 "Last look", "Next look", "Plan complete in")


def state_counts(rows):
    """How many comparisons are in each state, as a strip of badges that wraps on a narrow screen."""
    counts = "".join(
        f'<span class="gw-count" data-state="{state}">{badge(state)}'
        f'<span class="gw-count-n">{sum(r["state"] == state for r in rows)}</span></span>'
        for state in STATES)
    return f'<div class="gw-counts">{counts}</div>'


def board_table(rows, ref):
    """The overview as an HTML table; relative times are read against ``ref`` (one for every row)."""
    head = "<tr>" + "".join(f"<th>{c}</th>" for c in BOARD_COLUMNS) + "</tr>"
    body = []
    for r in rows:
        body.append(_board_row(r, ref))
        if r.get("baseline"):
            body.append(f'<tr class="gw-warnrow"><td></td><td colspan="{len(BOARD_COLUMNS) - 1}">'
                        f'<span class="gw-sub">{html.escape(r["baseline"])}</span></td></tr>')
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
    # Clusters already lead the column when they are the count the evidence rests on.
    shown = dict(r, clusters=None) if (r.get("evidence") or {}).get("noun") == "clusters" else r
    cluster_line = "".join(f'<div class="gw-sub">{html.escape(c)}</div>'
                           for c in clustering_figures(shown, _BOARD_CLUSTER_TEXT))
    last = (f'{clock(r["last_look_at"], ref)}<div class="gw-sub">{ago(r["last_look_at"], ref)} · look {r["looks"]}</div>'
            if r["last_look_at"] else "—")
    if r["stopped"] or r["archived"] or not r["next_look_at"]:
        upcoming = html.escape(next_look_text(r, ref))
    else:
        due = (datetime.fromisoformat(r["next_look_at"]) - ref).total_seconds()
        upcoming = f'{clock(r["next_look_at"], ref)}<div class="gw-sub">{describe_wait(due)}</div>'
    level = "" if r["estimate"] is None else f'<div class="gw-sub">{confidence_percent(r)} repeated interval</div>'
    adjusted = r.get("adjusted") or {}
    if r["stopped"] and adjusted.get("estimate") is not None:
        # After a stop the headline is the adjusted estimate; the naive one is kept beside it.
        width = interval_width(adjusted.get("ci_low"), adjusted.get("ci_high"))
        level = (f'<div class="gw-sub">adjusted for the looks; at the stop '
                 f'{html.escape(amount(r["estimate"], r, width))}</div>')
    change = relative_text(r, adjusted.get("estimate") if r["stopped"] and adjusted.get("estimate") is not None
                           else None)
    relative = f'<div class="gw-sub">{html.escape(change)}</div>' if change else ""
    evidence = evidence_text(r)
    # The count the evidence rests on (pairs, clusters) first, events beside it.
    counted = f'<div class="gw-main-count">{html.escape(evidence)}</div>' if evidence else ""
    rate = ""
    if r.get("events_per_hour") and not r["stopped"]:
        rate = (f'<div class="gw-sub">{r["events_per_hour"][0]:,.0f} / {r["events_per_hour"][1]:,.0f} '
                "an hour</div>")
    return _row(BOARD_COLUMNS, [
        ("", badge(r["state"])),
        ("gw-name", f'<a href="{html.escape(comparison_link(r))}" target="_self">{name}</a>{version}'
                    f'<div class="gw-sub">{html.escape(groups_text(r))} · {html.escape(r.get("method_words") or "")}</div>'),
        ("num", f"{html.escape(headline_text(r))}{level}{relative}"),
        ("num", f'{counted}{r["n1"]:,} / {r["n2"]:,}{cluster_line}'),
        ("num", f"{fraction_text(r)}{bar}"),
        ("num", last),
        ("num", upcoming),
        ("num", f"{html.escape(plan_eta_text(r))}{rate}"),
    ])


def _row(columns, cells):
    """One table row; each cell carries its column's title, shown above it when the table is
    laid out as cards on a narrow screen (see ``style.CSS``)."""
    tds = "".join(f'<td class="{css}" data-label="{html.escape(title)}">{content}</td>'
                  for title, (css, content) in zip(columns, cells))
    return f'<tr class="gw-row">{tds}</tr>'


REVIEW_COLUMNS = ("State", "Comparison", "Version", "Looks", "Estimate [repeated CI]", "Events per group",
                  "Plan reached", "Stopped (UTC)")


def review_table(rows):
    """Stopped and archived versions as an HTML table; each name opens that version's page."""
    head = "<tr>" + "".join(f"<th>{c}</th>" for c in REVIEW_COLUMNS) + "</tr>"
    body = []
    for r in rows:
        kept = "archived" if r["archived"] else ("live" if not r["stopped"] else "stopped, live version")
        link = comparison_link(dict(r, archived=True))  # always pin the version reviewed
        body.append(_row(REVIEW_COLUMNS, [
            ("", badge(r["state"])),
            ("gw-name", f'<a href="{html.escape(link)}" target="_self">{html.escape(r["name"])}</a>'
                        f'<div class="gw-sub">{html.escape(groups_text(r))}</div>'),
            ("num", f'v{r["version"]}<div class="gw-sub">{kept}</div>'),
            ("num", str(r["looks"])),
            ("num", html.escape(headline_text(r))),
            ("num", f'{r["n1"]:,} / {r["n2"]:,}'),
            ("num", fraction_text(r)),
            ("num", html.escape(_stamp(r["stopped_at"]))),
        ]))
    return (f'<div class="gw-scroll"><table class="gw-board gw-review"><thead>{head}</thead>'
            f'<tbody>{"".join(body)}</tbody></table></div>')


def _stamp(iso):
    return iso[:16].replace("T", " ") if iso else "—"


def plan_lines(row):
    """``(setting, value)`` pairs describing the frozen design, in the order a reviewer reads them.

    A setting the stored design does not carry is left out rather than shown as missing.
    """
    design = row.get("design") or {}
    plan = design.get("plan") or {}
    inputs = plan.get("inputs") or {}
    clustering = design.get("clustering") or {}
    method = (method_words(design.get("method"), clustered_by=clustering.get("cluster_by")
                           or clustering.get("cluster_column"))
              + (" on the rates" if design.get("metric") == "proportion" else " on the means")
              if design.get("method") else None)
    unit = "percentage points (rates)" if design.get("metric") == "proportion" else (row.get("unit") or None)
    lines = [
        # the names shown, when they are not the group values themselves
        ("groups", " − ".join(group_names(row))
         if row.get("labels") and list(row["labels"]) != [str(g) for g in row.get("groups") or []] else None),
        ("method", method),
        ("unit", unit),
        ("alternative", design.get("alternative")),
        ("alpha", figure(design["alpha"]) if design.get("alpha") is not None else None),
        ("spending", spending_words(design.get("spending")) if design.get("spending") else None),
        ("planned pairs" if design.get("method") == "paired" else "planned events per group",
         f"{row['planned_per_group']:,.0f}" if row.get("planned_per_group") else None),
        ("null difference", amount(design.get("null_difference") or 0.0, row)),
    ]
    if inputs.get("difference") is not None:
        lines.append(("difference worth detecting", amount(inputs["difference"], row)))
        if inputs.get("sd") is not None:
            lines.append(("assumed standard deviation", figure(inputs["sd"])))
    if inputs.get("p1") is not None and inputs.get("p2") is not None:
        lines.append(("rates worth telling apart", f"{figure(inputs['p1'])} vs {figure(inputs['p2'])}"))
    if inputs.get("power") is not None:
        lines.append(("power", figure(inputs["power"])))
    lines.append(("futility boundary", "yes (non-binding)" if design.get("futility") else "no"))
    if any(clustering.values()):
        lines.append(("clustered by", clustering.get("cluster_by") or clustering.get("cluster_column")))
        lines.append(("minimum clusters", design.get("min_clusters")))
    every = (row.get("settings") or {}).get("every")
    lines.append(("looks every", every))
    return [(setting, str(value)) for setting, value in lines if value is not None and value != ""]
