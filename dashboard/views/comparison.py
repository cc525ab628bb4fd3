"""Comparison: every view of one comparison; ?name=...&version=... opens it directly.

The views refresh themselves (a fragment) while the choice of comparison and version stays put.
"""

import streamlit as st

from dashboard import data, style
from dashboard.panels import show_comparison

style.apply()
st.title("Comparison")
url = data.store_url()
rows = data.status_rows(url, include_archived=True)
names = sorted({r["name"] for r in rows})
if not names:
    st.info("No comparisons in the store yet.")
    st.stop()

wanted = st.query_params.get("name")
index = names.index(wanted) if wanted in names else 0
name = st.selectbox("Comparison", names, index=index, key="comparison_name")
versions = [v["version"] for v in data.versions(url, name)]
version = None
if len(versions) > 1:
    asked = st.query_params.get("version")
    live = max(r["version"] for r in rows if r["name"] == name and not r["archived"]) if any(
        r["name"] == name and not r["archived"] for r in rows) else versions[-1]
    default = int(asked) if asked and asked.isdigit() and int(asked) in versions else live
    version = st.radio("Version", versions, index=versions.index(default), horizontal=True,
                       format_func=lambda v: f"v{v}" + (" (live)" if v == live else " (archived)"),
                       key=f"version_{name}")
st.query_params["name"] = name
if version is not None:
    st.query_params["version"] = str(version)
elif "version" in st.query_params:
    del st.query_params["version"]

st.fragment(show_comparison, run_every=data.REFRESH_SECONDS)(url, name, version)
