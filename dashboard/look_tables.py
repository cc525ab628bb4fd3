"""The look history and the per-day events as tables for ``st.dataframe``."""

from __future__ import annotations

import math

import pandas as pd
import streamlit as st

from monitor.vocabulary import state_label

from .formats import bounds_text, fmt, fraction_text, group_names, p_text

__all__ = ["look_table", "per_day_table"]


def look_table(frame):
    """The look history as shown: ``(DataFrame, column_config)`` for ``st.dataframe``.

    Figures are written as text with the dashboard's rules (a missing value is ``—``, never
    ``None``); look, events and counts stay numbers. A comparison decided through t gets its
    z-equivalent beside t, the figure its boundary is compared with.
    """
    t_based = "df" in frame and frame["df"].notna().any()
    table = pd.DataFrame({
        "look": frame["look"],
        "as of (UTC)": [t.strftime("%Y-%m-%d %H:%M") for t in frame["as_of"]],
        "n1": frame["n1"],
        "n2": frame["n2"],
        "estimate": [_figure(v) for v in frame["estimate"]],
        "interval": [_interval(lo, hi) for lo, hi in zip(frame["ci_low"], frame["ci_high"])],
        "statistic": [_figure(v) for v in frame["statistic"]],
    })
    if t_based:
        table["df"] = [_figure(v, 3) for v in frame["df"]]
        table["z-equivalent"] = [_figure(v) for v in frame["decision_z"]]
    table["boundary"] = [_figure(v) for v in frame["boundary_z"]]
    table["p-value"] = [p_text(_finite(v)) for v in frame["p_value"]]
    table["plan"] = [fraction_text({"fraction": _finite(v)}) for v in frame["fraction"]]
    table["alpha spent"] = [p_text(_finite(v)) for v in frame["cumulative_alpha"]]
    table["excluded"] = frame["excluded_total"]
    table["late"] = frame["late_events"]
    table["decision"] = frame["decision"].map(state_label)
    config = {"look": st.column_config.NumberColumn("look", format="%d"),
              "n1": st.column_config.NumberColumn("n1", format="localized"),
              "n2": st.column_config.NumberColumn("n2", format="localized")}
    return table, config


def _finite(value):
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def _figure(value, digits=4):
    value = _finite(value)
    return "—" if value is None else fmt(value, digits)


def _interval(low, high):
    low, high = _finite(low), _finite(high)
    return "—" if low is None and high is None else bounds_text(low, high)


def per_day_table(days, row):
    """Events and mean per day and group, from the store's day cells (one row per day)."""
    groups = group_names(row)
    per_day = pd.DataFrame(days).pivot_table(index="key", columns="group", values=["n", "mean"])
    per_day.columns = [f"{stat} {group}" for stat, group in per_day.columns]
    order = [f"{stat} {g}" for stat in ("n", "mean") for g in groups if f"{stat} {g}" in per_day]
    return per_day[order].rename_axis("day")
