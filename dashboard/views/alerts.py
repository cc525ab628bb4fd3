"""Alerts: what was raised, whether it reached its channels, and who acknowledged it."""

import hmac
import os
from datetime import datetime, timezone

import pandas as pd
import streamlit as st

from dashboard import data, style
from monitor.vocabulary import ALERT_STATES, state_label

style.apply()
st.title("Alerts")
url = data.store_url()
if "ack_done" in st.session_state:
    # Shown after the rerun that follows a write, so the table below already includes it.
    st.success(st.session_state.pop("ack_done"))

states = st.multiselect("Alert states", list(ALERT_STATES), key="alert_states",
                        placeholder="all states")
alerts = data.alerts(url, tuple(states))
if not alerts:
    st.info("No alerts match.")
else:
    table = pd.DataFrame([{
        "raised (UTC)": a["created_at"][:16].replace("T", " "),
        "comparison": a["comparison"],
        "kind": a["kind"].replace("_", " "),
        "decision": state_label(a["decision"]) if a["decision"] else "—",
        "state": a["state"],
        "channels": ", ".join(
            f"{d['channel']}: {d['state']} ({d['attempts']} {'try' if d['attempts'] == 1 else 'tries'})"
            for d in a["deliveries"]) or "—",
        "acknowledged": (f"{a['acknowledged_by']} at {a['acknowledged_at'][:16].replace('T', ' ')}"
                         if a["acknowledged_at"] else "—"),
        "message": a["message"] or "",
    } for a in alerts])
    st.dataframe(table, hide_index=True, width="stretch")

st.subheader("Acknowledge")
password = os.environ.get("GAPWATCH_DASHBOARD_PASSWORD")
if not password:
    st.info("This dashboard is read-only: set GAPWATCH_DASHBOARD_PASSWORD where it runs to allow "
            "acknowledging alerts.")
    st.stop()

open_alerts = [a for a in data.alerts(url, ()) if a["state"] != "acknowledged"]
if not open_alerts:
    st.success("Every alert has been acknowledged.")
    st.stop()

labels = {a["id"]: f"{a['comparison']} · {a['kind'].replace('_', ' ')} · {a['created_at'][:16].replace('T', ' ')} · {a['state']}"
          for a in open_alerts}
# Cleared on every submit so a typed password never lingers on the screen.
with st.form("acknowledge", clear_on_submit=True):
    alert_id = st.selectbox("Alert", list(labels), format_func=labels.get, key="ack_alert")
    who = st.text_input("Your name", key="ack_by")
    given = st.text_input("Dashboard password", type="password", key="ack_password")
    submitted = st.form_submit_button("Acknowledge alert")
if submitted:
    if not hmac.compare_digest(given.encode(), password.encode()):
        st.error("Wrong password: nothing was acknowledged.")
    elif not who.strip():
        st.error("Say who is acknowledging (your name).")
    else:
        # A person acknowledges at the real time, whatever clock the looks were taken on.
        done = data.acknowledge(alert_id, by=who, now=datetime.now(timezone.utc))
        st.session_state["ack_done"] = (f"Acknowledged: {done['comparison']} ({done['kind'].replace('_', ' ')}) "
                                        f"by {done['acknowledged_by']}.")
        st.rerun()
