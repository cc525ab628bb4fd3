"""Board: every live comparison at a glance, refreshed in place."""

import streamlit as st

from dashboard import data, style, tables
from dashboard.formats import when
from monitor.vocabulary import STATES, state_label

style.apply()
st.title("Board")
st.caption("Every live comparison in the history store. The table refreshes itself every "
           f"{data.REFRESH_SECONDS} seconds; filters stay as you set them.")

url = data.store_url()
# The filters sit above the table but are drawn after it: a browser fetches the code of a text
# box and of a multi-select when it first meets them, and the table need not wait behind that.
# A keyed widget's value is in the session when a run starts, so the table reads it from there.
filters = st.container()
needle = st.session_state.get("board_find", "")
chosen = st.session_state.get("board_states", [])


@st.fragment(run_every=data.REFRESH_SECONDS)
def board():
    rows = data.status_rows(url)
    shown = [r for r in rows
             if (not needle or needle.lower() in r["name"].lower()) and (not chosen or r["state"] in chosen)]
    st.html(tables.state_counts(rows))
    if not rows:
        st.info("No comparisons in the store yet: the first look of each configured comparison records it.")
        return
    if data.monitor_notice():
        st.warning(data.monitor_notice())
    ref = data.now()
    st.html(tables.board_table(shown, ref))
    if data.clock_note():
        st.caption(data.clock_note())
    st.caption(f"{len(shown)} of {len(rows)} comparisons shown · read {when(ref.isoformat(), ref)}")


board()

with filters:
    filter_col, state_col = style.filter_row("board", [2, 3])
    filter_col.text_input("Find a comparison", key="board_find", placeholder="part of a name")
    state_col.multiselect("States", list(STATES), key="board_states", format_func=state_label,
                          placeholder="all states")
