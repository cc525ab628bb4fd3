"""Review: stopped and archived comparisons, filterable, with the same views as a live one."""

from datetime import datetime, time, timezone

import pandas as pd
import streamlit as st

from dashboard import data, style
from dashboard.formats import fraction_text, interval_text
from dashboard.panels import show_comparison
from monitor.vocabulary import STATES, STOPPED_STATES, state_label

style.apply()
st.title("Review")
st.caption("Comparisons that have stopped or were archived by a restart: what was known, and when.")
url = data.store_url()

c1, c2, c3 = st.columns([2, 3, 2])
needle = c1.text_input("Name contains", key="review_name")
stopped_states = [s for s in STATES if s in STOPPED_STATES]
states = c2.multiselect("States", list(STATES), default=stopped_states, key="review_states",
                        format_func=state_label)
span = c3.date_input("Running between", value=(), key="review_dates")
include_live = st.toggle("Include live comparisons that are still collecting", key="review_live")

since = until = None
if isinstance(span, (list, tuple)) and len(span) == 2:
    since = datetime.combine(span[0], time.min, tzinfo=timezone.utc)
    until = datetime.combine(span[1], time.max, tzinfo=timezone.utc)

rows = data.filtered_rows(url, needle, tuple(states), since, until, None)
rows = [r for r in rows if r["stopped"] or r["archived"] or include_live]
if not rows:
    st.info("No comparison matches these filters.")
    st.stop()

st.dataframe(pd.DataFrame([{
    "comparison": r["name"], "version": r["version"], "state": r["state_label"],
    "archived": "yes" if r["archived"] else "no", "looks": r["looks"],
    "estimate [repeated CI]": interval_text(r), "events per group": f"{r['n1']:,} / {r['n2']:,}",
    "plan": fraction_text(r), "stopped (UTC)": (r["stopped_at"] or "—")[:16].replace("T", " "),
} for r in rows]), hide_index=True, width="stretch")

keys = [(r["name"], r["version"]) for r in rows]
picked = st.selectbox("Open", keys, format_func=lambda k: f"{k[0]} v{k[1]}", key="review_open")
st.divider()
show_comparison(url, picked[0], picked[1])
