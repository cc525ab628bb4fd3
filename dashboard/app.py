"""Entry point of the gapwatch dashboard: page navigation only; the pages do the work.

Every page has its own address (``/board``, ``/comparison?name=…``, ``/alerts``, ``/review``).
The root address is a hidden page that hands over to the board, so ``/`` and ``/board`` both
open it and the board's tab is marked wherever one arrives from.
"""

from __future__ import annotations

import importlib
import sys
import threading
from pathlib import Path

# Streamlit puts only this folder on sys.path; the pages import the monitor and dashboard packages.
_ROOT = str(Path(__file__).resolve().parent.parent)
if _ROOT not in sys.path:
    sys.path.insert(0, _ROOT)

import streamlit as st  # noqa: E402

# An emoji Streamlit knows: the browser draws it as the favicon itself. A character it does not
# know as an emoji (the clock "◷" used before) is taken for an image file, loading Pillow and
# numpy on the first run for a favicon address that answers with the page; a Material icon
# would be fetched from a font service on the internet.
st.set_page_config(page_title="gapwatch", page_icon="⏱", layout="wide")

board = st.Page("views/board.py", title="Board", icon=":material/dashboard:", url_path="board")


def _to_board():
    st.switch_page(board)


pages = st.navigation([
    st.Page(_to_board, title="gapwatch", url_path="start", default=True, visibility="hidden"),
    board,
    st.Page("views/comparison.py", title="Comparison", icon=":material/query_stats:", url_path="comparison"),
    st.Page("views/alerts.py", title="Alerts", icon=":material/notifications:", url_path="alerts"),
    st.Page("views/review.py", title="Review", icon=":material/history:", url_path="review"),
], position="top")
pages.run()


@st.cache_resource(show_spinner=False)
def _warm_up_chart_stack():
    """Once per server, after the first page is drawn: import what the comparison pages need.

    pandas, Altair and scipy take seconds to import on a busy machine; loading them while the
    reader looks at the first page keeps the first comparison page as quick as the board.
    """
    def load():
        for module in ("pandas", "altair", "scipy.special", "dashboard.charts", "dashboard.look_tables"):
            importlib.import_module(module)

    threading.Thread(target=load, name="gapwatch-warm-up", daemon=True).start()
    return True


_warm_up_chart_stack()
