"""Operating characteristics of changed plans and of the two kinds of fraction, by simulation.

Two questions, each answered with simulated comparisons and Monte Carlo
standard errors:

1. **Data-driven changes of plan** (:func:`simulate_replanning`). Comparisons
   take a first look at fraction ``interim`` of the original plan; a rule
   chooses, from what that look shows, whether the plan stays, doubles or
   halves. A changed plan continues either

   * by the **conditional error principle** (:mod:`monitor.stats.adaptive`):
     the remainder tests only the data after the change, spending the
     conditional error of the original design's remaining looks; or
   * by **restarting and spending again**: a new version with a fresh alpha
     re-tests all data, the first of its looks at once on the data the first
     version has just tested (what a plain restart that re-reads every row does).

   Unchanged comparisons continue the original plan at its remaining equally
   spaced looks (the same continuation defines the conditional error). The
   score ``S(t) = Z(t)√t`` is simulated as a Brownian motion on the original
   plan's information scale, as in :mod:`monitor.stats.simulate`.

   The conditional error differs from comparison to comparison, and the
   remainder's boundaries depend on it; to avoid one boundary computation
   per simulated comparison the conditional error is rounded *down* to a grid
   of levels 0.2 % apart (relative) and the exact boundaries are computed once
   per level used. Rounding down can only lower the error rate, by at most
   0.2 % of the conditional error.

2. **Events-based against information-based fractions when the planning sd
   is wrong** (:func:`simulate_fraction_choice`). Two groups of normal events
   with a true sd, planned with another; the statistic is the pooled t of
   equal groups, decided by the nominal-level approach as the look decides
   t statistics. With ``fraction="events"`` the
   looks fall at ``k/K`` of the planned events and the last one at the plan;
   with ``fraction="information"`` each look falls where the variance seen so
   far projects ``k/K`` of the maximum information, its fraction is the
   observed information ``1/se²`` over the maximum, and the comparison ends at
   the first look whose fraction reaches 1 (boundaries computed for the
   fractions each comparison actually reached). Per-look data are drawn as
   sufficient statistics (normal sums, chi-square sums of squares), exactly
   as if drawn event by event.

Pure module: numpy and scipy only (``tqdm`` only when a progress bar is asked for).
"""

from __future__ import annotations

import copy
import math
from dataclasses import asdict, dataclass

import numpy as np
from scipy import special

from ._checks import finite, open_unit, whole
from .adaptive import conditional_crossing
from .boundaries import NEGLIGIBLE_ALPHA, SequentialBoundary
from ..errors import InvalidArgumentError
from .information import plan_information
from .planning import design_boundaries, plan_mean, sequential_drift

__all__ = ["RULES", "ReplanRow", "FractionRow", "simulate_replanning", "simulate_fraction_choice",
           "LEVEL_STEP"]

#: Relative spacing of the grid the conditional error is rounded down to.
LEVEL_STEP = 0.002

#: The data-driven rules :func:`simulate_replanning` knows, with what they do.
RULES = {
    "none": "never change the plan",
    "promising-doubles": "double the plan when the conditional power under the interim estimate is "
                         "between 0.3 and 0.8",
    "falling-rate-halves": "halve the plan in half of the comparisons (the event rate fell), whatever "
                           "the data show",
    "double-or-halve": "double when promising (conditional power 0.3-0.8 under the interim estimate), "
                       "halve when already strong (0.8 or more)",
}


def _rate(mask):
    p = float(np.mean(mask))
    return p, math.sqrt(p * (1 - p) / mask.size)


def _mean(x):
    return float(np.mean(x)), float(np.std(x, ddof=1) / math.sqrt(x.size))


@dataclass(frozen=True)
class ReplanRow:
    """One rule × method × drift of :func:`simulate_replanning`.

    ``rejection`` is the share of comparisons that found a difference (either
    direction under ``drift = 0``, the planned direction otherwise), with its
    Monte Carlo standard error; ``changed`` the share whose plan changed;
    ``information`` the mean information at the decision on the original
    plan's scale (1 = the original plan), with its standard error.
    """

    rule: str
    method: str
    drift: float
    streams: int
    rejection: float
    rejection_se: float
    changed: float
    information: float
    information_se: float

    def to_dict(self):
        return asdict(self)


@dataclass(frozen=True)
class FractionRow:
    """One fraction kind × planning sd of :func:`simulate_fraction_choice`."""

    fraction: str
    sd_ratio: float
    drift_ratio: float
    streams: int
    rejection: float
    rejection_se: float
    events: float
    events_se: float
    planned_events: int

    def to_dict(self):
        return asdict(self)


# --------------------------------------------------------------------------
# Data-driven changes of plan
# --------------------------------------------------------------------------


def _promise(z, t, final_bound, drift_hat_sign=True):
    """Conditional power under the interim estimate, for one remaining analysis at the plan's end.

    θ̂ = z/√t is the drift the estimate implies; the chance that S(1) passes the
    final bound (in the estimate's direction), given S(t) = z√t.
    """
    a = np.abs(z)
    s = a * math.sqrt(t)
    theta = a / math.sqrt(t)
    return special.ndtr((s + theta * (1 - t) - final_bound) / math.sqrt(1 - t))


def _ends(rule, z, t, final_bound, rng):
    ends = np.full(z.size, np.nan)
    if rule == "none":
        return ends
    if rule == "falling-rate-halves":
        ends[rng.random(z.size) < 0.5] = 0.5
        return ends
    cp = _promise(z, t, final_bound)
    ends[(cp >= 0.3) & (cp < 0.8)] = 2.0
    if rule == "double-or-halve":
        ends[cp >= 0.8] = 0.5
    return ends


class _LevelTable:
    """Remainder boundaries (one-sided, at the remainder's fractions) per level on a grid."""

    def __init__(self, spending, fractions):
        self.spending = spending
        self.fractions = list(fractions)
        self.cache: dict = {}
        self.log_step = math.log1p(LEVEL_STEP)

    def bounds(self, levels):
        """Bounds (streams × looks) for levels rounded down to the grid; inf where nothing is left."""
        out = np.full((levels.size, len(self.fractions)), np.inf)
        ok = levels > NEGLIGIBLE_ALPHA
        idx = np.floor(np.log(np.minimum(levels[ok], 0.999999)) / self.log_step).astype(np.int64)
        rows = np.empty((idx.size, len(self.fractions)))
        for k in np.unique(idx):
            if k not in self.cache:
                level = math.exp(k * self.log_step)
                if level <= NEGLIGIBLE_ALPHA:
                    self.cache[k] = np.full(len(self.fractions), np.inf)
                else:
                    engine = SequentialBoundary(level, self.spending, "greater")
                    self.cache[k] = np.array([engine.add_look(u).z for u in self.fractions])
            rows[idx == k] = self.cache[k]
        out[ok] = rows
        return out


def _first_crossing(z, upper, lower):
    """Index of the first look crossing (or -1) and its direction, per row."""
    up = z >= upper
    down = z <= lower
    hit = up | down
    any_hit = hit.any(axis=1)
    first = np.where(any_hit, np.argmax(hit, axis=1), -1)
    rows = np.arange(z.shape[0])
    direction = np.zeros(z.shape[0], dtype=np.int8)
    at = np.maximum(first, 0)
    direction[any_hit & up[rows, at]] = 1
    direction[any_hit & down[rows, at]] = -1
    return first, direction


def simulate_replanning(
    *,
    rule,
    streams=100_000,
    alpha=0.05,
    spending="obrien-fleming",
    power=0.8,
    looks=4,
    interim=0.4,
    after_looks=3,
    drift_ratios=(0.0, 1.0),
    seed=None,
):
    """Simulate a data-driven change of plan at the first look, two ways of continuing.

    Parameters
    ----------
    rule : str
        One of :data:`RULES`.
    streams : int
        Simulated comparisons per drift.
    alpha, spending, power, looks
        The original two-sided design (its drift θ gives ``power`` at ``looks``
        equally spaced looks).
    interim : float
        Fraction of the original plan at the first look, where the rule acts.
    after_looks : int
        Equally spaced looks over a changed plan's remainder.
    drift_ratios : sequence of float
        Drifts simulated, as multiples of the plan's θ (0 = no difference).
    seed : int, optional

    Returns
    -------
    list of ReplanRow
        Per drift: ``"conditional error"`` and ``"restart and spend again"``.

    Examples
    --------
    >>> rows = simulate_replanning(rule="double-or-halve", streams=4000, seed=1, drift_ratios=(0.0,))
    >>> [r.method for r in rows]
    ['conditional error', 'restart and spend again']
    >>> rows[0].rejection < 0.05 + 4 * rows[0].rejection_se
    True
    """
    if rule not in RULES:
        raise InvalidArgumentError(f"rule must be one of {', '.join(RULES)}; got {rule!r}")
    streams = whole(streams, "streams", 2)
    alpha = open_unit(alpha, "alpha")
    looks = whole(looks, "looks", 2)
    after_looks = whole(after_looks, "after_looks", 1)
    interim = open_unit(interim, "interim")
    if interim >= 0.5:
        raise InvalidArgumentError(f"interim must be below 0.5 (a halved plan must still lie ahead); got {interim!r}")
    rng = np.random.default_rng(seed)

    planned = [k / looks for k in range(1, looks + 1)]
    theta = sequential_drift(planned, alpha, spending, "two-sided", power)
    original = SequentialBoundary(alpha, spending, "two-sided")
    b1 = original.add_look(interim).z
    remaining = [f for f in planned if f > interim + 1e-9]
    cont = copy.deepcopy(original)
    b_rem = np.array([cont.add_look(f).z for f in remaining])
    final_bound = b_rem[-1]
    u = np.arange(1, after_looks + 1) / after_looks
    table = _LevelTable(spending, u)
    restart_bounds = {}

    rows = []
    for ratio in drift_ratios:
        drift = finite(ratio, "drift_ratios") * theta
        s1 = drift * interim + math.sqrt(interim) * rng.standard_normal(streams)
        z1 = s1 / math.sqrt(interim)
        stop1 = np.abs(z1) >= b1
        ends = _ends(rule, z1, interim, final_bound, rng)
        changed = ~stop1 & np.isfinite(ends)
        kept = ~stop1 & ~changed

        decision = {m: np.zeros(streams, dtype=np.int8) for m in ("cep", "restart")}
        info = {m: np.full(streams, interim) for m in ("cep", "restart")}
        for m in decision:
            decision[m][stop1] = np.sign(z1[stop1]).astype(np.int8)

        # Unchanged: the original plan's remaining looks (same for both methods).
        if kept.any():
            n = int(kept.sum())
            steps = np.diff(np.concatenate([[interim], remaining]))
            s = s1[kept, None] + np.cumsum(drift * steps + np.sqrt(steps) * rng.standard_normal((n, steps.size)), axis=1)
            z = s / np.sqrt(remaining)
            first, direction = _first_crossing(z, b_rem, -b_rem)
            stop_t = np.where(first >= 0, np.asarray(remaining)[np.maximum(first, 0)], remaining[-1])
            for m in decision:
                decision[m][kept] = direction
                info[m][kept] = stop_t

        # Changed: the same simulated data continued two ways.
        if changed.any():
            idx = np.flatnonzero(changed)
            e = ends[idx]
            taus = interim + u[None, :] * (e[:, None] - interim)
            steps = np.diff(np.concatenate([np.full((idx.size, 1), interim), taus], axis=1), axis=1)
            w = np.cumsum(drift * steps + np.sqrt(steps) * rng.standard_normal(steps.shape), axis=1)
            # Conditional error principle: the increment's z against the remainder's bounds.
            a_up, a_low = conditional_crossing(interim, s1[idx], remaining, b_rem, -b_rem)
            c_up, c_low = table.bounds(a_up), table.bounds(a_low)
            z_inc = w / np.sqrt(taus - interim)
            first, direction = _first_crossing(z_inc, c_up, -c_low)
            decision["cep"][idx] = direction
            info["cep"][idx] = np.where(first >= 0, taus[np.arange(idx.size), np.maximum(first, 0)], e)
            # Restart: version 2 with a fresh alpha over all data, its first look on the data just tested.
            z_all = np.hstack([z1[idx, None], (s1[idx, None] + w) / np.sqrt(taus)])
            t_all = np.hstack([np.full((idx.size, 1), interim), taus])
            upper = np.empty_like(z_all)
            for end in np.unique(e):
                if end not in restart_bounds:
                    fresh = SequentialBoundary(alpha, spending, "two-sided")
                    restart_bounds[end] = np.array(
                        [fresh.add_look(t / end).z for t in np.concatenate([[interim], interim + u * (end - interim)])])
                upper[e == end] = restart_bounds[end]
            first, direction = _first_crossing(z_all, upper, -upper)
            decision["restart"][idx] = direction
            info["restart"][idx] = np.where(first >= 0, t_all[np.arange(idx.size), np.maximum(first, 0)], e)

        for m, label in (("cep", "conditional error"), ("restart", "restart and spend again")):
            found = decision[m] != 0 if ratio == 0 else decision[m] == 1
            rej, rej_se = _rate(found)
            mean_info, mean_info_se = _mean(info[m])
            rows.append(ReplanRow(rule=rule, method=label, drift=float(drift), streams=streams,
                                  rejection=rej, rejection_se=rej_se, changed=float(np.mean(changed)),
                                  information=mean_info, information_se=mean_info_se))
    return rows


# --------------------------------------------------------------------------
# Events-based against information-based fractions
# --------------------------------------------------------------------------


class _Groups:
    """Running n, means and sums of squared deviations of two groups, per stream."""

    def __init__(self, streams):
        self.n = np.zeros(streams, dtype=np.int64)
        self.mean = np.zeros((2, streams))
        self.m2 = np.zeros((2, streams))

    def add(self, rng, m, means, sd):
        """Add ``m`` events per group (per stream; 0 allowed) drawn as sufficient statistics."""
        m = m.astype(np.int64)
        grow = m > 0
        n_new = self.n + m
        for g in range(2):
            mm = m[grow].astype(float)
            batch_mean = means[g] + sd * rng.standard_normal(mm.size) / np.sqrt(mm)
            df = np.maximum(mm - 1, 1)
            batch_m2 = np.where(mm > 1, sd * sd * rng.chisquare(df), 0.0)
            n_old = self.n[grow].astype(float)
            total = n_old + mm
            delta = batch_mean - self.mean[g, grow]
            self.mean[g, grow] += delta * mm / total
            self.m2[g, grow] += batch_m2 + delta * delta * n_old * mm / total
        self.n = n_new

    def z_and_information(self):
        """The z the nominal-level rule compares (from the pooled t's two-sided p-value), 1/se², v1 + v2."""
        n = self.n.astype(float)
        var = (self.m2[0] + self.m2[1]) / (n - 1)  # v1 + v2 (sum of the two sample variances)
        se2 = var / n
        t = (self.mean[0] - self.mean[1]) / np.sqrt(se2)
        # Nominal-level approach, as the look does for t statistics: the one-sided p-value of the
        # t on 2n − 2 df, turned into the z with the same tail (so z ≥ b ⇔ p ≤ 1 − Φ(b)).
        p = special.stdtr(2 * n - 2, -np.abs(t))
        z = np.sign(t) * -special.ndtri(np.maximum(p, 1e-300))
        return z, 1.0 / se2, var


def simulate_fraction_choice(
    *,
    fraction,
    sd_ratio,
    drift_ratio=1.0,
    streams=20_000,
    difference=0.25,
    alpha=0.05,
    power=0.8,
    spending="obrien-fleming",
    looks=5,
    seed=None,
    progress=False,
):
    """Power of a mean comparison when the planning sd is ``sd_ratio`` times the true one.

    Parameters
    ----------
    fraction : {"events", "information"}
    sd_ratio : float
        Planning sd over true sd (0.7: the sd was guessed 30 % too small).
    drift_ratio : float
        True difference over ``difference`` (0 for the false-alarm rate).
    streams : int
    difference, alpha, power, spending, looks
        The plan: a two-sided comparison of means with true sd 1, planned
        with sd ``sd_ratio``.
    seed : int, optional
    progress : bool
        Progress bar for the per-comparison boundaries (information only).

    Returns
    -------
    FractionRow

    Examples
    --------
    >>> row = simulate_fraction_choice(fraction="events", sd_ratio=0.7, streams=4000, seed=2)
    >>> row.rejection < 0.7
    True
    """
    if fraction not in ("events", "information"):
        raise InvalidArgumentError(f"fraction must be 'events' or 'information'; got {fraction!r}")
    sd_ratio = finite(sd_ratio, "sd_ratio")
    if sd_ratio <= 0:
        raise InvalidArgumentError(f"sd_ratio must be positive; got {sd_ratio!r}")
    drift_ratio = finite(drift_ratio, "drift_ratio")
    streams = whole(streams, "streams", 2)
    looks = whole(looks, "looks", 1)
    rng = np.random.default_rng(seed)
    plan = plan_mean(difference, sd_ratio, alpha=alpha, power=power, spending=spending, looks=looks)
    means = (drift_ratio * difference, 0.0)
    groups = _Groups(streams)
    direction = np.zeros(streams, dtype=np.int8)
    stop_events = np.zeros(streams)

    if fraction == "events":
        counts = [math.ceil(k * plan.max_per_group / looks - 1e-9) for k in range(1, looks + 1)]
        fractions = [c / plan.max_per_group for c in counts]
        upper, _, _ = design_boundaries(fractions, alpha, spending, "two-sided")
        alive = np.ones(streams, dtype=bool)
        previous = 0
        for c, b in zip(counts, upper):
            groups.add(rng, np.where(alive, c - previous, 0), means, 1.0)
            previous = c
            z, _, _ = groups.z_and_information()
            hit = alive & (np.abs(z) >= b)
            direction[hit] = np.sign(z[hit]).astype(np.int8)
            stop_events[alive] = c
            alive &= ~hit
        planned_events = plan.max_per_group
    else:
        maximum = plan_information(plan)
        steps = looks + 8
        zs = np.full((streams, steps), np.nan)
        fs = np.full((streams, steps), np.nan)
        ns = np.zeros((streams, steps))
        open_ = np.ones(streams, dtype=bool)
        var_guess = np.full(streams, 2.0 * sd_ratio**2)
        for k in range(steps):
            target = min((k + 1) / looks, 1.0) * maximum
            need = np.ceil(target * var_guess)
            add = np.where(open_, np.maximum(need - groups.n, 2), 0)
            groups.add(rng, add, means, 1.0)
            z, information, var = groups.z_and_information()
            var_guess = var
            fs[open_, k] = information[open_] / maximum
            zs[open_, k] = z[open_]
            ns[open_, k] = groups.n[open_]
            open_ &= information / maximum < 1.0
            if not open_.any():
                break
        bar = None
        if progress:
            # lazy: only a terminal run asks for a progress bar.
            from tqdm import tqdm

            bar = tqdm(total=streams, desc="boundaries", unit="comparison", leave=False)
        for i in range(streams):
            engine = SequentialBoundary(alpha, spending, "two-sided")
            last = 0.0
            for k in range(steps):
                f = fs[i, k]
                final_step = k == steps - 1 or not np.isfinite(fs[i, k + 1]) if k + 1 < steps else True
                if not np.isfinite(f):
                    break
                if final_step and f < 1.0:
                    f = max(1.0, last + 1e-6)  # the plan's last look spends what is left
                if f < last + 1e-7:
                    continue  # the variance rose: no new information, no test
                lb = engine.add_look(f)
                last = f
                stop_events[i] = ns[i, k]
                if abs(zs[i, k]) >= lb.z:
                    direction[i] = 1 if zs[i, k] > 0 else -1
                    break
                if lb.final:
                    break
            if bar is not None:
                bar.update(1)
        if bar is not None:
            bar.close()
        planned_events = math.ceil(2.0 * maximum - 1e-9)  # at the true sd of 1
    found = direction != 0 if drift_ratio == 0 else direction == 1
    rej, rej_se = _rate(found)
    ev, ev_se = _mean(stop_events)
    return FractionRow(fraction=fraction, sd_ratio=sd_ratio, drift_ratio=drift_ratio, streams=streams,
                       rejection=rej, rejection_se=rej_se, events=ev, events_se=ev_se,
                       planned_events=int(planned_events))
