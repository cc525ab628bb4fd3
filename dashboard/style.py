"""The dashboard's own look: one palette for states and groups, the page CSS, the state badge."""

from __future__ import annotations

import html

import streamlit as st

from monitor.vocabulary import STATES

__all__ = [
    "STATE_COLOURS",
    "GROUP_COLOURS",
    "BOUNDARY_COLOUR",
    "FUTILITY_COLOUR",
    "NULL_COLOUR",
    "OFF_SCALE_COLOUR",
    "REASON_COLOURS",
    "CSS",
    "apply",
    "badge",
    "tiles",
    "pair",
    "filter_row",
]

# One colour per state and per group, the same on every page.
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
# A look drawn at the chart's edge because its value is far off the scale.
OFF_SCALE_COLOUR = "#B0304A"
REASON_COLOURS = ("#8A5A44", "#C9852F", "#7D6FA3", "#3E6A8A", "#B0304A", "#6B8F71", "#5A616C")

CSS = """
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
.gw-counts {display:flex;flex-wrap:wrap;gap:0.5em 1.4em;margin:0.2em 0 0.6em;}
.gw-count {display:inline-flex;align-items:center;gap:0.45em;}
.gw-count-n {font-size:1.6rem;font-weight:600;font-variant-numeric:tabular-nums;color:#1E2A30;}
.gw-reading {border-left:4px solid #1F6F78;background:#f4f8f8;padding:0.8em 1em;border-radius:4px;}
.gw-alert-head {font-size:0.9rem;color:#34414b;}
.gw-alert-head a {color:#1F6F78;font-weight:600;text-decoration:none;}
.gw-alert-state {font-weight:600;border-radius:0.6em;padding:0.05em 0.5em;background:#EEF2F1;}
.gw-alert-failed {color:#B0304A;}
.gw-alert-pending {color:#8a4b08;}
.gw-alert-acknowledged {color:#4F8A5B;}
.gw-alert-message {margin:0.35em 0;white-space:pre-wrap;overflow-wrap:anywhere;}
/* On a narrow screen each comparison becomes a card: its figures wrap under their column titles. */
@media (max-width: 1000px) {
  table.gw-board, table.gw-board tbody {display:block;}
  table.gw-board thead {display:none;}
  table.gw-board tr.gw-row {display:grid;grid-template-columns:repeat(auto-fill, minmax(10.5rem, 1fr));
    gap:0.3em 0.8em;padding:0.5em 0;border-top:1px solid #e3e8eb;}
  table.gw-board tr.gw-row td {border:none;padding:0.15em 0.3em;}
  table.gw-board tr.gw-row td[data-label]::before {content:attr(data-label);display:block;font-size:0.75em;
    color:#5f6b73;}
  table.gw-board td.gw-name, table.gw-board td.num {white-space:normal;}
  table.gw-board tr.gw-warnrow {display:block;}
  table.gw-board tr.gw-warnrow td:first-child {display:none;}
  table.gw-board tr.gw-warnrow td {display:block;border:none;padding:0 0.3em 0.5em;}
}
/* Side-by-side sections stack when the screen is too narrow for both (an 800 px window). */
[class*="st-key-gw-pair"] [data-testid="stHorizontalBlock"] {flex-wrap:wrap;}
[class*="st-key-gw-pair"] [data-testid="stColumn"] {min-width:min(100%, 24rem);}
[class*="st-key-gw-filters"] [data-testid="stHorizontalBlock"] {flex-wrap:wrap;}
[class*="st-key-gw-filters"] [data-testid="stColumn"] {min-width:min(100%, 14rem);}
</style>
"""


def apply():
    """Put the dashboard's CSS on the page (once per page run)."""
    st.html(CSS)


def badge(state):
    """State as a symbol AND words, coloured; readable without the colour."""
    symbol, words = STATES.get(state, ("?", str(state)))
    colour = STATE_COLOURS.get(state, "#555")
    return (
        f'<span class="gw-badge" style="border-color:{colour};color:{colour}">'
        f'<span class="gw-symbol">{html.escape(symbol)}</span> {html.escape(words)}</span>'
    )


def tiles(items):
    """Figures side by side that wrap onto a new line rather than cut a label on a narrow screen.

    ``items``: ``(label, value)`` or ``(label, value, help)`` tuples.
    """
    with st.container(horizontal=True, gap="medium"):
        for label, value, *help_text in items:
            st.metric(label, value, help=help_text[0] if help_text else None, width="content")


def pair(key):
    """Two side-by-side columns that stack when the screen is too narrow for both (an 800 px window)."""
    with st.container(key=f"gw-pair-{key}"):
        return st.columns(2, gap="large")


def filter_row(key, spec):
    """A row of filters (``st.columns(spec)``) that wraps onto two lines on a narrow screen."""
    with st.container(key=f"gw-filters-{key}"):
        return st.columns(spec)
