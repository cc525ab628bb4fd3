"""False alarms of ratio comparisons under daily looks, through the look's own decision step.

Each simulated comparison builds the running cells a ratio look keeps (six sums per
``("total", group, "")`` cell and, when clustered by day, per ``("cluster", group, day)``
cell, exactly as ``monitor.look.cells.roll_up`` files them) and passes them, one look a day,
to ``monitor.look.decision.weigh`` and ``decide``. Every stream reaches the same fractions
(the same rows a day), but each stream's looks have their own degrees of freedom, so each
stream needs the design's exact sequential t boundary at its own df history. Solving it
afresh costs about 0.4 s a stream; instead streams share the boundaries (``_SharedBoundaries``).
The boundary engine's model depends on the looks' fractions and on its model df (the running
maximum of the looks' df, rounded down: ``monitor.stats.sequential_t``) and on nothing else, so
two streams whose model df agree at every look have the very same boundary. Below 100 df the
model df is shared exactly as it is; from 100 df on, looks whose 1/df agree to 0.001 (a band)
share the boundary solved for the first stream that reached it. Within a band the boundary's
calibrated nominal level moves by well under 0.1 % of itself (df histories 20 % apart move it
by 0.1 %; the t quantile itself by at most 0.001·(z³ + z)/4, about 0.005 at z = 2.5), far below
what the false-alarm rate can show. ``decide`` itself adds every look to the stream's boundary
and takes the decision from the look it returns, as on a live comparison. Two figures ``decide``
works out once the decision is taken are left out, as they cannot change it: the adjusted
inference after a stop (stagewise p-value, median-unbiased estimate; a tenth of a second per
stream) and the outlook of a look that continues (conditional power; two thirds of the time
that is left).

Scenario: two packing lines, a row per batch with ``units`` (gamma, mean 800, coefficient of
variation 0.6) and ``defects`` (Poisson at 4 per 1,000 units), ``rows_per_day`` batches per line
a day, no true difference. With ``day_sd > 0`` each line's day rate is shaken by a log-normal
day shock and the comparison clusters by day (``cluster_by = "day"``).
"""

from __future__ import annotations

import copy
import math
from dataclasses import replace
from datetime import datetime, timedelta, timezone
from unittest import mock

import numpy as np

from monitor.config import ComparisonConfig
from monitor.design import Design
from monitor.look import decision as decision_step
from monitor.look.decision import LookInputs, decide, new_boundary, weigh
from monitor.stats.sequential_t import SequentialTBoundary

__all__ = ["ratio_false_alarms", "SharedBoundaryStats"]

_START = datetime(2026, 3, 2, tzinfo=timezone.utc)
# Looks share a boundary when their model df agree in 1/df to this band (every whole df up to
# 33 is a band of its own).
_BAND = 0.001


def _df_key(model_df):
    return round(1.0 / model_df / _BAND)


class SharedBoundaryStats:
    """How many exact boundaries a run solved, against the looks that used one.

    With ``check_own`` every stream also solves its own boundary at its own df (as a live
    comparison does) and ``largest_gap`` is the largest relative difference between the shared
    and the stream's own calibrated nominal level at any look.
    """

    def __init__(self, check_own=False):
        self.solved = 0
        self.looks = 0
        self.check_own = check_own
        self.largest_gap = 0.0


class _SharedBoundaries:
    """Exact sequential t boundaries of one design, shared between streams (see the module notes).

    ``standing[key]`` is the design's boundary after the looks ``key`` names (per look: the
    fraction and the model df, or its band), solved once by the real ``SequentialTBoundary``.
    """

    def __init__(self, design, stats):
        self.design = design
        self.standing = {(): new_boundary(design)}
        self.stats = stats

    def after(self, before, key, fraction, df):
        """The boundary standing at ``key``: the one at ``before`` plus a look at (fraction, df),
        solved the first time a stream reaches ``key``."""
        found = self.standing.get(key)
        if found is None:
            found = copy.deepcopy(self.standing[before])
            found.add_look(fraction, df)
            self.standing[key] = found
            self.stats.solved += 1
        self.stats.looks += 1
        return found


class _StreamBoundary(SequentialTBoundary):
    """One stream's view of the shared boundaries: what ``decide`` adds its looks to.

    It is a ``SequentialTBoundary`` for ``decide`` (which checks the kind), standing where the
    shared boundary of this stream's look history stands.
    """

    def __init__(self, shared: _SharedBoundaries):
        # No SequentialTBoundary.__init__: the state lives in the shared boundaries.
        self._shared = shared
        self._key = ()
        self._model_df = None
        self._own = new_boundary(shared.design) if shared.stats.check_own else None

    @property
    def _standing(self) -> SequentialTBoundary:
        return self._shared.standing[self._key]

    looks = property(lambda self: self._standing.looks)
    fractions = property(lambda self: self._standing.fractions)
    complete = property(lambda self: self._standing.complete)
    futility_direction = property(lambda self: self._standing.futility_direction)
    alpha_used = property(lambda self: self._standing.alpha_used)
    t_boundaries = property(lambda self: self._standing.t_boundaries)
    dfs = property(lambda self: self._standing.dfs)

    def add_look(self, fraction, df):
        # The engine's model df: the running maximum of the looks' df, rounded down.
        whole = float(math.floor(min(float(df), 1e6)))
        model = whole if self._model_df is None else max(whole, self._model_df)
        key = self._key + ((round(float(fraction), 12), _df_key(model)),)
        look = self._shared.after(self._key, key, fraction, df).looks[-1]
        self._key, self._model_df = key, model
        if self._own is not None:
            own = self._own.add_look(fraction, df).nominal_p
            if own > 0:
                stats = self._shared.stats
                stats.largest_gap = max(stats.largest_gap, abs(look.nominal_p - own) / own)
        return look


def _comparison(days, rows_per_day, spending, clustered, min_clusters):
    return ComparisonConfig(
        name="defect-rate", source="ops", table="batches", group_column="line", groups=("north", "south"),
        value_column="defects", time_column="packed_at", metric="ratio", method="welch",
        spending=spending, planned_per_group=days * rows_per_day, numerator_column="defects",
        denominator_column="units", cluster_by="day" if clustered else None,
        min_clusters=min_clusters)


def ratio_false_alarms(streams, seed, *, days=20, rows_per_day=30, day_sd=0.0, spending="obrien-fleming",
                       alpha=0.05, min_clusters=10, rate=0.004, stats=None):
    """Share of no-difference streams that reach ``difference_found`` over ``days`` daily looks.

    Returns ``(rate, monte_carlo_se, looks_tested)``; ``stats`` (a :class:`SharedBoundaryStats`)
    counts the boundaries solved.
    """
    stats = SharedBoundaryStats() if stats is None else stats
    with mock.patch.object(decision_step, "after_stop", lambda *args: {}), \
            mock.patch.object(decision_step, "_as_adaptive", lambda *args: None), \
            mock.patch.object(decision_step, "conditional_powers", lambda *args: None):
        return _simulate(streams, seed, days, rows_per_day, day_sd, spending, alpha, min_clusters, rate, stats)


def _simulate(streams, seed, days, rows_per_day, day_sd, spending, alpha, min_clusters, rate, stats):
    clustered = day_sd > 0
    c = _comparison(days, rows_per_day, spending, clustered, min_clusters)
    design = replace(Design.from_config(c), alpha=alpha).with_shift(3.0).with_shift_den(800.0)
    first = min_clusters if clustered else 1
    looks = range(first, days + 1)  # the testing looks: from min_clusters days on when clustered
    rng = np.random.default_rng(seed)
    shape = 1 / 0.6 ** 2
    shared = _SharedBoundaries(design, stats)
    found = 0
    for _ in range(streams):
        cells: dict = {}
        boundary = _StreamBoundary(shared)
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
