"""Alerts: what was raised, whether it reached its channels, and who acknowledged it.

Each open alert has its own Acknowledge button; the form opens under that alert and stays
bound to it (a refused password keeps the same alert, never another one). The list refreshes
itself, except while a form is open, so nothing moves under a person typing.
"""

import hmac
import os
from datetime import datetime, timezone

import streamlit as st

from dashboard import data, style
from dashboard.alert_list import alert_card
from monitor.vocabulary import ALERT_STATES

# The newest alerts shown at once; the state filter narrows the rest.
SHOWN = 100

style.apply()
st.title("Alerts")
url = data.store_url()
password = os.environ.get("GAPWATCH_DASHBOARD_PASSWORD")
st.session_state.setdefault("ack_alert", None)
# This run is the whole page already: nothing for the list to ask for (see alert_list).
st.session_state.pop("ack_whole_page", None)
if st.session_state["ack_alert"] is not None and not any(
        a["id"] == st.session_state["ack_alert"] and a["state"] != "acknowledged" for a in data.alerts(url, ())):
    st.session_state["ack_alert"] = None  # acknowledged meanwhile (elsewhere): nothing left to confirm

if "ack_done" in st.session_state:
    # Shown after the rerun that follows a write, so the list below already includes it.
    st.success(st.session_state.pop("ack_done"))
if not password:
    st.info("This dashboard is read-only: set GAPWATCH_DASHBOARD_PASSWORD where it runs to allow "
            "acknowledging alerts.")
states = st.multiselect("Alert states", list(ALERT_STATES), key="alert_states", placeholder="all states")


def _choose(alert_id):
    st.session_state["ack_alert"] = alert_id
    st.session_state.pop("ack_error", None)
    # The whole page runs next (not only the list), so refreshing pauses or resumes with the form.
    st.session_state["ack_whole_page"] = True


def _acknowledge():
    """Runs before the rerun: checks, writes, and leaves the outcome for the page to say.

    The chosen alert and the name stay after a refusal, so a retry acknowledges the same
    alert; the password is cleared every time, so it never lingers on the screen.
    """
    alert_id = st.session_state.get("ack_alert")
    given = st.session_state.get("ack_password") or ""
    who = (st.session_state.get("ack_by") or "").strip()
    st.session_state["ack_password"] = ""
    if not hmac.compare_digest(given.encode(), password.encode()):
        st.session_state["ack_error"] = "Wrong password: nothing was acknowledged."
    elif not who:
        st.session_state["ack_error"] = "Say who is acknowledging (your name): nothing was acknowledged."
    else:
        # A person acknowledges at the real time, whatever clock the looks were taken on.
        done = data.acknowledge(alert_id, by=who, now=datetime.now(timezone.utc))
        st.session_state["ack_alert"] = None
        st.session_state["ack_whole_page"] = True
        st.session_state["ack_done"] = (f"Acknowledged: {done['comparison']} ({done['kind'].replace('_', ' ')}) "
                                        f"by {done['acknowledged_by']}.")


def _acknowledge_form(alert):
    with st.form(f"acknowledge-{alert['id']}"):
        st.text_input("Your name", key="ack_by")
        st.text_input("Dashboard password", type="password", key="ack_password")
        left, right = st.columns([1, 1])
        left.form_submit_button("Acknowledge alert", on_click=_acknowledge, key="ack_submit")
        right.form_submit_button("Cancel", on_click=_choose, args=(None,), key="ack_cancel")
    if "ack_error" in st.session_state:
        st.error(st.session_state.pop("ack_error"))


def alert_list():
    if st.session_state.pop("ack_whole_page", False):
        st.rerun()  # a button in this list asked for the whole page (it says what was done, pauses or resumes)
    alerts = data.alerts(url, tuple(states))
    if not alerts:
        st.info("No alerts match.")
        return
    shown = alerts[:SHOWN]
    paused = st.session_state["ack_alert"] is not None
    st.caption(f"{len(shown)} of {len(alerts)} alerts, newest first · "
               + ("refreshing paused while an acknowledgement is open" if paused
                  else f"refreshed every {data.REFRESH_SECONDS} seconds"))
    for alert in shown:
        with st.container(border=True):
            st.html(alert_card(alert))
            if not password or alert["state"] == "acknowledged":
                continue
            if alert["id"] == st.session_state["ack_alert"]:
                _acknowledge_form(alert)
            else:
                st.button("Acknowledge…", key=f"ack-{alert['id']}", on_click=_choose, args=(alert["id"],))


st.fragment(alert_list, run_every=None if st.session_state["ack_alert"] else data.REFRESH_SECONDS)()
