"""Board: every live comparison at a glance, refreshed in place."""

import streamlit as st

from dashboard import common
from monitor.store import readback

common.style()
st.title("Board")
st.caption("Every live comparison in the history store. The table refreshes itself every "
           f"{common.REFRESH_SECONDS} seconds; filters stay as you set them.")

url = common.store_url()
filter_col, state_col = st.columns([2, 3])
needle = filter_col.text_input("Find a comparison", key="board_find", placeholder="part of a name")
chosen = state_col.multiselect(
    "States", list(readback.STATES), key="board_states", format_func=readback.state_label,
    placeholder="all states",
)


@st.fragment(run_every=common.REFRESH_SECONDS)
def board():
    rows = common.status_rows(url)
    shown = [r for r in rows
             if (not needle or needle.lower() in r["name"].lower()) and (not chosen or r["state"] in chosen)]
    counts = st.columns(len(readback.STATES))
    for col, state in zip(counts, readback.STATES):
        col.metric(readback.state_label(state), sum(r["state"] == state for r in rows))
    if not rows:
        st.info("No comparisons in the store yet: the first look of each configured comparison records it.")
        return
    if common.monitor_notice():
        st.warning(common.monitor_notice())
    st.html(common.board_table(shown))
    if common.clock_note():
        st.caption(common.clock_note())
    st.caption(f"{len(shown)} of {len(rows)} comparisons shown · read {common.when(common.now().isoformat())}")


board()
