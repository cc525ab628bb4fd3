"""False alarms of ratio comparisons under daily looks, through the look's own decision step.

Each simulated comparison builds the running cells a ratio look keeps (six sums per
``("total", group, "")`` cell and, when clustered by day, per ``("cluster", group, day)``
cell, exactly as ``monitor.look.cells.roll_up`` files them) and passes them, one look a day,
to ``monitor.look.decision.weigh`` and ``decide``. Every stream reaches the same fractions
(the same rows a day), but each stream's looks have their own Welch degrees of freedom, so
each stream gets the design's own exact sequential t boundary (``new_boundary``). The
adjusted inference ``decide`` adds after a stop (stagewise p-value, median-unbiased
estimate) is left out: it is computed after the decision, cannot change it, and costs a
tenth of a second per stream.

Scenario: two packing lines, a row per batch with ``units`` (gamma, mean 800, coefficient of
variation 0.6) and ``defects`` (Poisson at 4 per 1,000 units), ``rows_per_day`` batches per line
a day, no true difference. With ``day_sd > 0`` each line's day rate is shaken by a log-normal
day shock and the comparison clusters by day (``cluster_by = "day"``).
"""

from __future__ import annotations

import math
from datetime import datetime, timedelta, timezone

from unittest import mock

import numpy as np

from dataclasses import replace

from monitor.config import ComparisonConfig
from monitor.design import Design
from monitor.look import decision as decision_step
from monitor.look.decision import LookInputs, decide, new_boundary, weigh

__all__ = ["ratio_false_alarms"]

_START = datetime(2026, 3, 2, tzinfo=timezone.utc)


def _comparison(days, rows_per_day, spending, clustered, min_clusters):
    return ComparisonConfig(
        name="defect-rate", source="ops", table="batches", group_column="line", groups=("north", "south"),
        value_column="defects", time_column="packed_at", metric="ratio", method="welch",
        spending=spending, planned_per_group=days * rows_per_day, numerator_column="defects",
        denominator_column="units", cluster_by="day" if clustered else None,
        min_clusters=min_clusters)


def ratio_false_alarms(streams, seed, *, days=20, rows_per_day=30, day_sd=0.0, spending="obrien-fleming",
                       alpha=0.05, min_clusters=10, rate=0.004):
    """Share of no-difference streams that reach ``difference_found`` over ``days`` daily looks.

    Returns ``(rate, monte_carlo_se, looks_tested)``.
    """
    with mock.patch.object(decision_step, "after_stop", lambda *args: {}):
        return _simulate(streams, seed, days, rows_per_day, day_sd, spending, alpha, min_clusters, rate)


def _simulate(streams, seed, days, rows_per_day, day_sd, spending, alpha, min_clusters, rate):
    clustered = day_sd > 0
    c = _comparison(days, rows_per_day, spending, clustered, min_clusters)
    design = replace(Design.from_config(c), alpha=alpha).with_shift(3.0).with_shift_den(800.0)
    first = min_clusters if clustered else 1
    looks = range(first, days + 1)  # the testing looks: from min_clusters days on when clustered
    rng = np.random.default_rng(seed)
    shape = 1 / 0.6 ** 2
    found = 0
    for _ in range(streams):
        cells: dict = {}
        boundary = new_boundary(design)
        last_fraction = 0.0
        for day in range(days):
            for gi in (0, 1):
                units = rng.gamma(shape, 800 / shape, size=rows_per_day) + 1.0
                shock = math.exp(rng.normal(0.0, day_sd)) if clustered else 1.0
                defects = rng.poisson(rate * shock * units).astype(float)
                y, x = defects - design.shift, units - design.shift_den
                sums = (rows_per_day, y.sum(), y @ y, x.sum(), x @ x, y @ x)
                keys = [("total", gi, "")] + ([("cluster", gi, f"day-{day}")] if clustered else [])
                for key in keys:
                    old = cells.get(key)
                    cells[key] = sums if old is None else tuple(a + b for a, b in zip(old, sums))
            cutoff = _START + timedelta(days=day + 1)
            evidence = weigh(LookInputs(design, dict(cells), cutoff, 0, last_fraction))
            decision = decide(evidence, boundary if evidence.tests else None)
            if evidence.tests:
                last_fraction = evidence.fraction
            if decision.decision == "difference_found":
                found += 1
                break
    p = found / streams
    return p, math.sqrt(alpha * (1 - alpha) / streams), len(looks)
