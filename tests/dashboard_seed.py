"""Extra comparisons for the dashboard tests, written straight to the store's models.

``add_paired_days`` adds the case that misled readers: a paired comparison of two packing
lines matched by day, with 1–5 degrees of freedom. Its t statistics (412, 3.9, 4.0, 3.5,
4.1) are computed from the daily differences below and mostly lie *above* the z-scale
boundaries (4.8, 3.9, 3.4, 3.0, 2.8), yet no look crossed: the decision compares the
one-sided p-value with the nominal level, i.e. the z-equivalent (3.2, 1.9, 2.2, 2.3, 2.6)
with the boundary. Between testing looks, night looks find nothing new and record no
boundary and no interval. The comparison's zone is Europe/London and its looks span five
days. Version 1 was archived while still collecting (a replan), so Review must list it.
"""

from __future__ import annotations

import math
import uuid
from datetime import datetime, timedelta, timezone

import numpy as np
import sqlalchemy as sa
from scipy import special, stats
from sqlalchemy.orm import Session

from monitor.store.models import Comparison, Look

__all__ = ["PAIRED", "DAILY_DIFFERENCES", "add_paired_days"]

PAIRED = "line-daily-output"
# Cases per hour, line 5 minus line 2, one value per matched day (invented figures).
DAILY_DIFFERENCES = (6.17, 6.20, 2.4, 9.9, 1.6, 10.2)
PLANNED_PAIRS = 12
NO_NEWS = "no new information since the last testing look; nothing spent at this look"


def _design():
    return {
        "method": "paired", "metric": "mean", "groups": ["line-5", "line-2"], "alternative": "two-sided",
        "alpha": 0.05, "spending": "obrien-fleming", "null_difference": 0.0,
        "plan": {"planned_per_group": PLANNED_PAIRS, "inputs": {"difference": 5.0, "sd": 4.0, "power": 0.8}},
        "sigmas": None, "pairing": {"pair_by": "day", "pair_column": None, "shift_starts": None},
        "clustering": None, "futility": False, "valid_range": [0, 900], "filters": [],
        "table": "line_output", "schema": None, "group_column": "line", "value_column": "cases",
        "time_column": "hour_ending", "time_format": "auto", "timezone": "Europe/London",
        "min_clusters": None, "shift": 400.0,
    }


def _testing_look(pairs):
    d = np.array(DAILY_DIFFERENCES[:pairs])
    mean, se = float(d.mean()), float(d.std(ddof=1) / math.sqrt(pairs))
    t, df = mean / se, pairs - 1
    fraction = pairs / PLANNED_PAIRS
    # O'Brien–Fleming-type boundary, closed-form approximation (as tests/store_seed.py).
    boundary = float(stats.norm.ppf(0.975) / math.sqrt(fraction))
    nominal = float(special.ndtr(-boundary))
    critical = float(-special.stdtrit(df, nominal))
    return dict(
        estimate=mean, standard_error=se, statistic=t, df=float(df),
        p_value=float(2 * special.stdtr(df, -abs(t))), fraction=fraction, boundary_z=boundary,
        nominal_p=nominal, cumulative_alpha=float(2 - 2 * stats.norm.cdf(stats.norm.ppf(0.975) / math.sqrt(fraction))),
        ci_low=mean - critical * se, ci_high=mean + critical * se, pairs=pairs, warnings=[],
    )


def _rows(start):
    """Three looks a day: one testing the new day's pair, two 4 and 8 hours later finding nothing new."""
    rows = []
    for day, pairs in enumerate(range(2, len(DAILY_DIFFERENCES) + 1)):
        evening = start + timedelta(days=day)
        tested = _testing_look(pairs)
        for hours, values in ((0, tested), (4, None), (8, None)):
            as_of = evening + timedelta(hours=hours)
            row = dict(as_of=as_of, cutoff=as_of - timedelta(minutes=10), recorded_at=as_of,
                       n1=pairs * 8, n2=pairs * 8, mean1=412.0, mean2=406.0, sd1=9.0, sd2=8.5,
                       new_events=16 if values else 0, late_events=0, excluded={},
                       detail={"shift": 400.0, "excluded_new": {}}, decision="collecting",
                       duration_ms=2.0, design_effect=0.4, effective_n=None, clusters=None)
            if values is not None:
                row.update(values)
            else:  # what the look records when nothing new arrived: the statistic, no boundary
                row.update({k: tested[k] for k in ("estimate", "standard_error", "statistic", "df", "p_value",
                                                   "fraction", "cumulative_alpha", "pairs")},
                           warnings=[NO_NEWS])
            rows.append(row)
    return rows


def add_paired_days(url, *, now):
    """Add the paired comparison (live v2, and v1 archived while collecting); returns the live looks' count."""
    # The newest look ends a little before ``now``, so the board reads it as recent.
    first = now - timedelta(days=len(DAILY_DIFFERENCES) - 2, hours=8, minutes=5)
    engine = sa.create_engine(url)
    try:
        with Session(engine) as session, session.begin():
            rows = _rows(first)
            for version, looks, archived in ((1, rows[:2], True), (2, rows, False)):
                comp = Comparison(
                    name=PAIRED, version=version, design=_design(), design_hash=uuid.uuid4().hex,
                    settings={"source": "plant", "table": "line_output", "every": "4h", "notify": [],
                              "timezone": "Europe/London",
                              "description": "Cases packed per hour, line 5 minus line 2, matched day by day"},
                    state="collecting", looks_taken=len(looks),
                    watermark={"cutoff": looks[-1]["cutoff"].isoformat(), "arrival": None},
                    created_at=first - timedelta(hours=1), last_look_at=looks[-1]["as_of"], stopped_at=None,
                    archived=archived,
                )
                session.add(comp)
                session.flush()
                session.add_all(Look(comparison_id=comp.id, look_number=k, **row)
                                for k, row in enumerate(looks, start=1))
    finally:
        engine.dispose()
    return len(rows)


if __name__ == "__main__":  # a quick look at the figures
    for row in _rows(datetime(2026, 3, 2, 18, tzinfo=timezone.utc))[::3]:
        print(row["pairs"], round(row["statistic"], 2), round(row["boundary_z"], 2))
