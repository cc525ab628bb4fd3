"""Review: every archived version and every stopped comparison, filterable, with the same views as a live one."""

from datetime import datetime, time, timezone

import streamlit as st

from dashboard import data, style
from dashboard.panels import show_comparison
from dashboard.tables import review_table
from monitor.vocabulary import STATES, state_label

style.apply()
st.title("Review")
st.caption("Every version archived by a restart or a replan, whatever its state, and every comparison "
           "that has stopped: what was known, and when.")
url = data.store_url()

c1, c2, c3 = style.filter_row("review", [2, 3, 2])
needle = c1.text_input("Name contains", key="review_name")
states = c2.multiselect("States", list(STATES), key="review_states", format_func=state_label,
                        placeholder="all states")
span = c3.date_input("Running between", value=(), key="review_dates")
include_live = st.toggle("Include live comparisons that are still running", key="review_live")

since = until = None
if isinstance(span, (list, tuple)) and len(span) == 2:
    since = datetime.combine(span[0], time.min, tzinfo=timezone.utc)
    until = datetime.combine(span[1], time.max, tzinfo=timezone.utc)


@st.fragment(run_every=data.REFRESH_SECONDS)
def review():
    rows = data.filtered_rows(url, needle, tuple(states), since, until, None)
    rows = [r for r in rows if r["stopped"] or r["archived"] or include_live]
    if not rows:
        st.info("No comparison matches these filters.")
        return
    st.html(review_table(rows))
    keys = [(r["name"], r["version"]) for r in rows]
    picked = st.selectbox("Open", keys, format_func=lambda k: f"{k[0]} v{k[1]}", key="review_open")
    st.divider()
    show_comparison(url, picked[0], picked[1])


review()
