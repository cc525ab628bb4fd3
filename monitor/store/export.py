"""Looks as flat rows for a file: the CSV the ``history`` command prints and the dashboard offers.

Part of the read side, so the command line and the dashboard write the same file from the same
``readback.look_history`` rows without either importing the other.
"""

from __future__ import annotations

import csv
import io

__all__ = ["CSV_COLUMNS", "csv_rows", "csv_text"]

# The flat columns of the CSV export (excluded rows are spread into one column per reason).
CSV_COLUMNS = [
    "look", "as_of", "cutoff", "n1", "n2", "mean1", "mean2", "estimate", "standard_error",
    "statistic", "df", "p_value", "fraction", "boundary_z", "futility_z", "nominal_p",
    "cumulative_alpha", "ci_low", "ci_high", "decision", "late_events", "excluded_total",
    "clusters", "design_effect", "effective_n",
]


def csv_rows(history):
    """``(header, rows)`` for looks from ``readback.look_history``: one row per look."""
    reasons = sorted({reason for look in history for reason in look["excluded"]})
    header = CSV_COLUMNS + [f"excluded_{reason}" for reason in reasons] + ["warnings"]
    rows = []
    for look in history:
        row = [look[c] for c in CSV_COLUMNS]
        row += [look["excluded"].get(reason, 0) for reason in reasons]
        row.append("; ".join(look["warnings"]))
        rows.append(row)
    return header, rows


def csv_text(history) -> str:
    """The whole CSV file for ``history`` as text (header first, ``\\n`` line ends)."""
    header, rows = csv_rows(history)
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(header)
    writer.writerows(rows)
    return buffer.getvalue()
