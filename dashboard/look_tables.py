"""The look history and the per-day events as tables for ``st.dataframe``."""

from __future__ import annotations

import math

import pandas as pd
import streamlit as st

from monitor.vocabulary import state_label

from monitor.vocabulary import interval_width

from .formats import amount, bounds_text, figure, fraction_text, group_names, p_text

__all__ = ["look_table", "per_day_table"]


def look_table(frame, row=None):
    """The look history as shown: ``(DataFrame, column_config)`` for ``st.dataframe``.

    Figures are written as text with the dashboard's rules (a missing value is ``—``, never
    ``None``); look, events and counts stay numbers. Events are headed by the groups' names,
    the estimate and interval carry the comparison's unit (rates in percentage points), and a
    paired or clustered comparison shows its pairs or clusters beside the events. A comparison
    decided through t gets its z-equivalent beside t, the figure its boundary is compared with.
    """
    row = row or {}
    names = group_names(row)
    t_based = "df" in frame and frame["df"].notna().any()
    widths = [interval_width(_finite(lo), _finite(hi)) for lo, hi in zip(frame["ci_low"], frame["ci_high"])]
    table = pd.DataFrame({
        "look": frame["look"],
        "as of (UTC)": [t.strftime("%Y-%m-%d %H:%M") for t in frame["as_of"]],
        f"n {names[0]}": frame["n1"],
        f"n {names[1]}": frame["n2"],
    })
    evidence = (row.get("evidence") or {}).get("noun")
    if evidence in ("pairs", "clusters") and evidence in frame:
        table[evidence] = [f"{int(v):,}" if _finite(v) is not None else "—" for v in frame[evidence]]
    table["estimate"] = [amount(_finite(v), row, w) for v, w in zip(frame["estimate"], widths)]
    table["interval"] = [_interval(lo, hi, row) for lo, hi in zip(frame["ci_low"], frame["ci_high"])]
    table["statistic"] = [_figure(v) for v in frame["statistic"]]
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
              f"n {names[0]}": st.column_config.NumberColumn(f"n {names[0]}", format="localized"),
              f"n {names[1]}": st.column_config.NumberColumn(f"n {names[1]}", format="localized")}
    return table, config


def _finite(value):
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def _figure(value, digits=4):
    value = _finite(value)
    return "—" if value is None else figure(value, digits=digits)


def _interval(low, high, row=None):
    low, high = _finite(low), _finite(high)
    return "—" if low is None and high is None else bounds_text(low, high, row)


def per_day_table(days, row):
    """Events and mean per day and group, from the store's day cells (one row per day)."""
    # Cells carry the group values; the columns are headed by the names shown.
    shown = dict(zip([str(g) for g in row.get("groups") or []], group_names(row)))
    per_day = pd.DataFrame(days).pivot_table(index="key", columns="group", values=["n", "mean"])
    per_day.columns = [f"{stat} {shown.get(str(group), group)}" for stat, group in per_day.columns]
    order = [f"{stat} {g}" for stat in ("n", "mean") for g in group_names(row) if f"{stat} {g}" in per_day]
    return per_day[order].rename_axis("day")
