"""Operating characteristics of a sequential design, by simulation.

A planned design promises a false-alarm rate, a power and an expected number of
events at decision. :func:`simulate_design` checks those promises by simulating
many comparisons at the level of the sequential z statistics: the score
``S(t) = Z(t)·√t`` of a comparison is a Brownian motion with drift θ (the plan's
drift under the planned difference, 0 under no difference), so the z values at
any information fractions follow from independent normal increments. That is
exact for z tests and the large-sample picture for every other statistic.

Schedules: ``"regular"`` looks at equally spaced fractions ``k/K``;
``"irregular"`` gives each simulated comparison random look times — K − 1 sorted
uniform fractions on (0, 1) and the final look at 1 — as happens when looks run
on a clock while events arrive unevenly. Boundaries depend on the schedule, so
irregular runs draw a fixed number of random schedules (``schedules``, default
100), compute each one's boundaries once with the boundary engine and spread the
simulated comparisons evenly over them.

Pure module: numpy and scipy only (``tqdm`` is imported only when a progress bar
is asked for).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from ._checks import whole
from ..errors import InvalidArgumentError
from .planning import design_boundaries

__all__ = ["EventsAtDecision", "OperatingCharacteristics", "simulate_design"]

QUANTILES = (25, 50, 75, 90)

# Quantile standard errors come from batch means; 20 batches keeps each batch
# large while giving a usable spread.
_BATCHES = 20

# Streams simulated at once; bounds memory at about chunk × looks × 8 bytes per array.
_CHUNK = 50_000


def _finite_or_none(x):
    return x if math.isfinite(x) else None


@dataclass(frozen=True)
class EventsAtDecision:
    """Events per group at the decision, over simulated comparisons.

    Attributes
    ----------
    mean, mean_se : float
        Mean and its Monte Carlo standard error.
    quantiles : dict
        Percent (25, 50, 75, 90) → events per group (whole events, rounded up).
    quantile_se : dict
        Percent → batch-means Monte Carlo standard error of that quantile
        (often 0: stops happen only at looks, so quantiles sit on look sizes).
    """

    mean: float
    mean_se: float
    quantiles: dict
    quantile_se: dict

    def to_dict(self):
        """Plain JSON-ready dict (percent keys as text; an undefined error is None)."""
        return {
            "mean": self.mean,
            "mean_se": _finite_or_none(self.mean_se),
            "quantiles": {str(k): v for k, v in self.quantiles.items()},
            "quantile_se": {str(k): _finite_or_none(v) for k, v in self.quantile_se.items()},
        }


@dataclass(frozen=True)
class OperatingCharacteristics:
    """What a design does, estimated from simulated comparisons.

    Attributes
    ----------
    streams, looks, schedule, seed, schedules
        How the simulation was run (``schedules``: distinct look schedules used).
    false_alarm_rate, false_alarm_rate_se : float
        Share of comparisons with no real difference that crossed an efficacy
        boundary (futility stops followed), and its Monte Carlo standard error.
    false_alarm_rate_ignoring_futility : float
        The same when futility stops are ignored (the non-binding guarantee: at
        most alpha). Equal to ``false_alarm_rate`` without futility.
    power, power_se : float
        Share of comparisons with the planned difference that crossed the
        efficacy boundary in the planned direction.
    futility_stop_null, futility_stop_alternative : float
        Shares stopped by the futility boundary before the last look.
    events_null, events_alternative : EventsAtDecision
        Events per group at the decision under no difference and under the
        planned difference.
    max_per_group : int
        The plan's events per group (fraction 1).
    """

    streams: int
    looks: int
    schedule: str
    seed: int | None
    schedules: int
    false_alarm_rate: float
    false_alarm_rate_se: float
    false_alarm_rate_ignoring_futility: float
    power: float
    power_se: float
    futility_stop_null: float
    futility_stop_alternative: float
    events_null: EventsAtDecision
    events_alternative: EventsAtDecision
    max_per_group: int

    def to_dict(self):
        out = asdict(self)
        out["events_null"] = self.events_null.to_dict()
        out["events_alternative"] = self.events_alternative.to_dict()
        return out


def _random_schedules(rng, count, looks):
    """``count`` increasing schedules of ``looks`` fractions, the last one at 1."""
    if looks == 1:
        return np.ones((count, 1))
    while True:
        inner = np.sort(rng.uniform(0.0, 1.0, size=(count, looks - 1)), axis=1)
        schedules = np.hstack([inner, np.ones((count, 1))])
        # Two looks at (numerically) the same fraction would be one look.
        gaps = np.diff(np.hstack([np.zeros((count, 1)), schedules]), axis=1)
        if np.all(gaps > 1e-6):
            return schedules


def _simulate_chunk(rng, fractions, upper, futility, two_sided, drift):
    """One batch of streams: returns (stop index, decision codes, efficacy ignoring futility).

    Decision codes: 1 efficacy in the planned direction, -1 efficacy in the other
    direction, 2 futility stop, 0 reached the last look without crossing.
    """
    n, k = fractions.shape
    steps = np.diff(np.hstack([np.zeros((n, 1)), fractions]), axis=1)
    score = np.cumsum(drift * steps + np.sqrt(steps) * rng.standard_normal((n, k)), axis=1)
    z = score / np.sqrt(fractions)

    up = z >= upper
    down = (z <= -upper) if two_sided else np.zeros_like(up)
    efficacy = up | down
    fut = (z <= futility) & ~efficacy if futility is not None else np.zeros_like(up)

    stop_any = efficacy | fut
    stop_any[:, -1] = True  # the last look ends the plan whatever it shows
    stop = np.argmax(stop_any, axis=1)
    rows = np.arange(n)
    decision = np.zeros(n, dtype=np.int8)
    decision[up[rows, stop]] = 1
    decision[down[rows, stop]] = -1
    decision[fut[rows, stop] & (stop < k - 1)] = 2
    crossed_ignoring_futility = efficacy.any(axis=1)
    return stop, decision, crossed_ignoring_futility


def _events_summary(events):
    n = events.size
    mean = float(np.mean(events))
    mean_se = float(np.std(events, ddof=1) / math.sqrt(n)) if n > 1 else float("nan")
    quantiles = {q: float(math.ceil(np.percentile(events, q) - 1e-9)) for q in QUANTILES}
    quantile_se = {}
    batches = np.array_split(events, _BATCHES) if n >= 10 * _BATCHES else []
    for q in QUANTILES:
        if len(batches):
            per_batch = np.array([np.percentile(b, q) for b in batches])
            quantile_se[q] = float(np.std(per_batch, ddof=1) / math.sqrt(len(batches)))
        else:
            quantile_se[q] = float("nan")
    return EventsAtDecision(mean=mean, mean_se=mean_se, quantiles=quantiles, quantile_se=quantile_se)


def simulate_design(
    plan,
    *,
    streams=20000,
    looks=None,
    schedule="regular",
    seed=None,
    progress=False,
    schedules=100,
):
    """Simulate a planned design under no difference and under the planned one.

    Parameters
    ----------
    plan : monitor.stats.planning.Plan
        The design (alpha, spending, alternative, futility, drift, events).
    streams : int, default 20000
        Simulated comparisons per scenario.
    looks : int, optional
        Looks actually taken (default: the plan's). The plan's events per group
        and drift stay fixed, so this shows what more or fewer looks do.
    schedule : {"regular", "irregular"}
        Equally spaced looks, or random look fractions per comparison.
    seed : int, optional
        Seed of the random generator, for a repeatable run.
    progress : bool, default False
        Show a progress bar on stderr (boundary computation and simulation).
    schedules : int, default 100
        Distinct random schedules for ``"irregular"`` (ignored for ``"regular"``).

    Returns
    -------
    OperatingCharacteristics

    Examples
    --------
    >>> from monitor.stats.planning import plan_mean
    >>> oc = simulate_design(plan_mean(0.5, 1.0, looks=3), streams=4000, seed=1)
    >>> abs(oc.false_alarm_rate - 0.05) < 4 * oc.false_alarm_rate_se
    True
    >>> abs(oc.power - 0.8) < 4 * oc.power_se
    True
    """
    for attribute in ("alpha", "power", "alternative", "spending", "futility", "drift", "max_per_group", "looks"):
        if not hasattr(plan, attribute):
            raise InvalidArgumentError(f"plan must be a Plan from monitor.stats.planning; got {plan!r}")
    streams = whole(streams, "streams", 2)
    looks = plan.looks if looks is None else whole(looks, "looks", 1)
    if schedule not in ("regular", "irregular"):
        raise InvalidArgumentError(f"schedule must be 'regular' or 'irregular'; got {schedule!r}")
    schedules = whole(schedules, "schedules", 1)
    if seed is not None and (isinstance(seed, bool) or not isinstance(seed, (int, np.integer))):
        raise InvalidArgumentError(f"seed must be a whole number; got {seed!r}")
    rng = np.random.default_rng(seed)

    if schedule == "regular":
        table = np.arange(1, looks + 1, dtype=float)[None, :] / looks
    else:
        table = _random_schedules(rng, min(schedules, streams), looks)
    count = table.shape[0]
    chunks = math.ceil(streams / _CHUNK)

    bar = None
    if progress:
        # lazy: only the terminal needs the progress bar.
        from tqdm import tqdm

        bar = tqdm(total=count + 2 * chunks, desc="simulating design", unit="step", leave=False)

    two_sided = plan.alternative == "two-sided"
    upper_table = np.empty_like(table)
    futility_table = np.empty_like(table) if plan.futility else None
    for row in range(count):
        upper, _, fut = design_boundaries(
            table[row],
            plan.alpha,
            plan.spending,
            plan.alternative,
            futility=plan.futility,
            beta=1.0 - plan.power,
            drift=plan.drift,
        )
        upper_table[row] = upper
        if futility_table is not None:
            futility_table[row] = fut
        if bar is not None:
            bar.update(1)

    results = {}
    for name, drift in (("null", 0.0), ("alternative", float(plan.drift))):
        stops, decisions, ignoring = [], [], []
        for chunk in range(chunks):
            size = min(_CHUNK, streams - chunk * _CHUNK)
            which = (np.arange(size) + chunk * _CHUNK) % count
            stop, decision, crossed = _simulate_chunk(
                rng,
                table[which],
                upper_table[which],
                None if futility_table is None else futility_table[which],
                two_sided,
                drift,
            )
            fraction_at_stop = table[which, stop]
            stops.append(fraction_at_stop)
            decisions.append(decision)
            ignoring.append(crossed)
            if bar is not None:
                bar.update(1)
        results[name] = (np.concatenate(stops), np.concatenate(decisions), np.concatenate(ignoring))
    if bar is not None:
        bar.close()

    def rate(mask):
        p = float(np.mean(mask))
        return p, math.sqrt(p * (1 - p) / mask.size)

    null_fraction, null_decision, null_ignoring = results["null"]
    alt_fraction, alt_decision, _ = results["alternative"]
    false_alarm, false_alarm_se = rate(np.isin(null_decision, (1, -1)))
    power, power_se = rate(alt_decision == 1)
    # Events are whole: a look at fraction t has seen ceil(t · max) events per group.
    null_events = np.ceil(null_fraction * plan.max_per_group - 1e-9)
    alt_events = np.ceil(alt_fraction * plan.max_per_group - 1e-9)
    return OperatingCharacteristics(
        streams=streams,
        looks=looks,
        schedule=schedule,
        seed=None if seed is None else int(seed),
        schedules=count,
        false_alarm_rate=false_alarm,
        false_alarm_rate_se=false_alarm_se,
        false_alarm_rate_ignoring_futility=float(np.mean(null_ignoring)),
        power=power,
        power_se=power_se,
        futility_stop_null=float(np.mean(null_decision == 2)),
        futility_stop_alternative=float(np.mean(alt_decision == 2)),
        events_null=_events_summary(null_events),
        events_alternative=_events_summary(alt_events),
        max_per_group=int(plan.max_per_group),
    )
