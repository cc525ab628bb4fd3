"""Are each group's events still arriving as they should? A volume check safe under repeated looks.

A depot whose handhelds stop syncing, a desk whose tickets go to another queue, a filter that
silently drops one group: the comparison just sees fewer events and quietly becomes a
comparison of whatever still arrives. Two checks, run at every look:

* **own volume** — a group's events today since a local hour against what the same weekday
  brought over the previous weeks, allowing for the day-to-day swing those weeks show;
* **share** — group 1's share of today's events against the expected share
  (configured, or learned from the history) with the same allowance.

Both are *anytime-valid*: the evidence is a mixture of likelihood ratios (a mixture sequential
probability ratio test, Robbins 1970), a non-negative supermartingale under normal variation, so
by Ville's inequality (Ville 1939) the chance that it *ever* reaches ``1/level`` on a day is at
most ``level``, however often the monitor looks. A check over several window starts (each local
hour of the day) divides the level among them (Bonferroni), so a warning can say "since 10:00".

Normal variation is estimated from the history: the lowest day multiplier that normal days
reach (``exp(−z·σ_day)`` for the day-to-day spread ``σ_day`` of log volume) is the null, and
bursty arrivals are allowed for by a dispersion factor (counts are divided by it, the usual
quasi-likelihood scaling). A warning therefore means "lower than normal days go", not "lower
than average".

Pure module: numpy and scipy only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import special

from ..errors import InvalidArgumentError
from ._checks import finite, open_unit

__all__ = [
    "DEFAULT_LEVEL",
    "UsualVolume",
    "VolumeVerdict",
    "ShareVerdict",
    "drop_log_evidence",
    "drop_log_evidence_many",
    "DROP_MULTIPLIERS",
    "share_log_evidence",
    "usual_volume",
    "check_own_volume",
    "check_share",
]

# The chance, per group and per day, that normal variation raises a warning.
DEFAULT_LEVEL = 0.001
# How far below the typical day a normal day may go: the 5th percentile of the day multiplier.
_NORMAL_Z = 1.645
# Without history enough to measure it, the day-to-day spread of log volume assumed.
_DEFAULT_DAY_SD = 0.25
_MIN_DAY_SD = 0.05
_MIN_WEEKS = 2


# The drops the evidence is mixed over, as multipliers of the null rate: a quarter, half and
# three quarters of it, equally weighted. A few points where drops that matter lie lose less
# power than a uniform mixture over (0, 1) and keep the same guarantee.
DROP_MULTIPLIERS = (0.25, 0.5, 0.75)


def drop_log_evidence_many(observed, expected, floor=1.0, dispersion=1.0) -> np.ndarray:
    """:func:`drop_log_evidence` over arrays (no argument checks): the look's and the simulation's path."""
    n = np.asarray(observed, dtype=float)[..., None] / dispersion
    lam = (np.asarray(floor, dtype=float) * np.asarray(expected, dtype=float))[..., None] / dispersion
    u = np.asarray(DROP_MULTIPLIERS)
    terms = n * np.log(u) + (1.0 - u) * lam
    return special.logsumexp(terms, axis=-1) - math.log(u.size)


def drop_log_evidence(observed, expected, *, floor=1.0, dispersion=1.0) -> float:
    """log of the evidence that events arrive slower than ``floor × expected``.

    The equal-weight mixture, over the drops :data:`DROP_MULTIPLIERS` ``u`` of the null rate
    ``L = floor·expected``, of the Poisson likelihood ratios ``u^N · exp((1 − u)·L)``, with
    ``N`` and ``L`` divided by ``dispersion``. Each ratio is a supermartingale whenever the
    true rate is at least the null's, so the mixture is too (Robbins 1970), and
    P(ever ≥ 1/α) ≤ α (Ville 1939).

    >>> drop_log_evidence(100, 100) < 0 < drop_log_evidence(20, 100)
    True
    """
    observed = finite(observed, "observed")
    expected = finite(expected, "expected")
    floor = finite(floor, "floor")
    dispersion = finite(dispersion, "dispersion")
    if observed < 0 or expected < 0 or floor <= 0 or dispersion < 1.0:
        raise InvalidArgumentError(
            f"observed and expected must not be negative, floor must be positive and dispersion at "
            f"least 1; got observed={observed!r}, expected={expected!r}, floor={floor!r}, "
            f"dispersion={dispersion!r}")
    return float(drop_log_evidence_many(observed, expected, floor, dispersion))


def share_log_evidence(successes, total, low, high, *, dispersion=1.0) -> tuple[float, float]:
    """log evidence that a share lies below ``low`` and above ``high``: ``(below, above)``.

    Given the day's ``total`` events, group 1's count is binomial with the share ``p``; the
    uniform mixture of likelihood ratios ``(p/low)^x ((1−p)/(1−low))^(n−x)`` over ``p < low``
    is a supermartingale whenever the true share is at least ``low`` (and symmetrically
    above ``high``). Counts are divided by ``dispersion``.

    >>> below, above = share_log_evidence(10, 100, 0.4, 0.6)
    >>> below > 0 > above
    True
    """
    x = finite(successes, "successes") / finite(dispersion, "dispersion")
    n = finite(total, "total") / dispersion
    low = open_unit(low, "low")
    high = open_unit(high, "high")
    if not 0 <= x <= n or low > high:
        raise InvalidArgumentError(
            f"need 0 ≤ successes ≤ total and low ≤ high; got {successes!r}, {total!r}, {low!r}, {high!r}")
    a, b = x + 1.0, n - x + 1.0
    log_beta = float(special.betaln(a, b))
    # ∫_0^low p^x (1−p)^(n−x) dp / low = B(a,b)·I_low(a,b) / low
    below_mass = float(special.betainc(a, b, low))
    above_mass = float(special.betainc(b, a, 1.0 - high))
    below = (log_beta + math.log(below_mass) - math.log(low) - x * math.log(low)
             - (n - x) * math.log1p(-low)) if below_mass > 0 else -math.inf
    above = (log_beta + math.log(above_mass) - math.log1p(-high) - x * math.log(high)
             - (n - x) * math.log1p(-high)) if above_mass > 0 else -math.inf
    return float(below), float(above)


@dataclass(frozen=True)
class UsualVolume:
    """What a normal day of one weekday brings, from the previous weeks' slot counts.

    ``expected`` holds the mean count of each slot of the day; ``day_sd`` the spread of
    log day volume from week to week; ``dispersion`` how much burstier than Poisson the slot
    counts are once each week's own level is allowed for (at least 1); ``weeks`` how many
    weeks it was measured on (0 when no history: nothing can be checked then).
    """

    expected: tuple
    day_sd: float
    dispersion: float
    weeks: int

    @property
    def floor(self) -> float:
        """The lowest day multiplier normal variation reaches (its 5th percentile)."""
        return math.exp(-_NORMAL_Z * self.day_sd)


def usual_volume(history) -> UsualVolume:
    """Estimate a weekday's usual volume from ``history[week][slot]`` counts.

    >>> u = usual_volume([[10, 20, 10], [12, 18, 11], [9, 22, 10]])
    >>> u.weeks, round(sum(u.expected), 3)
    (3, 40.667)
    """
    counts = np.asarray(history, dtype=float)
    if counts.ndim != 2 or counts.shape[1] == 0:
        raise InvalidArgumentError(f"history must be weeks × slots counts; got shape {counts.shape}")
    if counts.shape[0] == 0:
        return UsualVolume(tuple([0.0] * counts.shape[1]), _DEFAULT_DAY_SD, 1.0, 0)
    if not np.all(np.isfinite(counts)) or np.any(counts < 0):
        raise InvalidArgumentError("history counts must be finite and not negative")
    weeks = counts.shape[0]
    expected = counts.mean(axis=0)
    totals = counts.sum(axis=1)
    # Dispersion of slot counts around each week's own level (quasi-Poisson Pearson ratio).
    dispersion = 1.0
    if weeks >= _MIN_WEEKS and expected.sum() > 0:
        level = totals / expected.sum()
        fitted = np.outer(level, expected)
        used = fitted > 0
        dof = used.sum() - weeks - used.any(axis=0).sum() + 1
        if dof > 0:
            pearson = float(np.sum((counts[used] - fitted[used]) ** 2 / fitted[used]))
            dispersion = max(1.0, pearson / dof)
    if weeks >= _MIN_WEEKS and np.all(totals > 0):
        # The spread of log day totals holds the counting noise too (about dispersion / total);
        # take it out so it is not allowed for twice.
        spread = float(np.var(np.log(totals), ddof=1)) - dispersion / float(totals.mean())
        day_sd = max(math.sqrt(max(spread, 0.0)), _MIN_DAY_SD)
    else:
        day_sd = _DEFAULT_DAY_SD
    return UsualVolume(tuple(float(e) for e in expected), day_sd, dispersion, weeks)


@dataclass(frozen=True)
class VolumeVerdict:
    """A group's volume today against its usual volume for the weekday."""

    observed: float
    expected: float
    share_of_usual: float | None
    since_slot: int | None
    log_evidence: float
    threshold: float
    warn: bool
    measurable: bool


def check_own_volume(today, usual: UsualVolume, *, starts=None, level=DEFAULT_LEVEL) -> VolumeVerdict:
    """Check a group's slot counts so far today against its usual volume.

    ``today`` holds the counts of the day's slots up to the look (its length is how far
    the day has got); ``starts`` the slots a window may start at (default: every eighth slot,
    every two hours for 15-minute slots). The level is split evenly among the starts; the
    verdict reports the window with the strongest evidence, and warns when that evidence
    reaches ``len(starts)/level``.
    """
    level = open_unit(level, "level")
    counts = np.asarray(today, dtype=float)
    slots = counts.size
    expected = np.asarray(usual.expected, dtype=float)
    if slots > expected.size:
        raise InvalidArgumentError(f"today has {slots} slots but the usual day has {expected.size}")
    if starts is None:
        starts = range(0, max(slots, 1), 8)
    starts = [s for s in starts if 0 <= s < slots]
    threshold = math.log(max(len(starts), 1) / level)
    if usual.weeks < _MIN_WEEKS or not starts:
        return VolumeVerdict(float(counts.sum()), float(expected[:slots].sum()), None, None,
                             0.0, threshold, False, False)
    tail = np.cumsum(counts[::-1])[::-1]            # events from each slot to now
    tail_expected = np.cumsum(expected[:slots][::-1])[::-1]
    idx = np.asarray(starts)
    evidence = drop_log_evidence_many(tail[idx], tail_expected[idx], usual.floor, usual.dispersion)
    evidence = np.where(tail_expected[idx] > 0, evidence, -np.inf)
    pick = int(np.argmax(evidence))
    best, best_start = float(evidence[pick]), int(idx[pick])
    obs = float(counts[best_start:slots].sum())
    exp_ = float(expected[best_start:slots].sum())
    return VolumeVerdict(obs, exp_, obs / exp_ if exp_ > 0 else None, best_start,
                         float(best) if math.isfinite(best) else 0.0, threshold,
                         bool(best >= threshold), exp_ > 0)


@dataclass(frozen=True)
class ShareVerdict:
    """Group 1's share of today's events against the expected share."""

    events1: float
    events2: float
    share: float | None
    expected_share: float
    low: float
    high: float
    log_evidence: float
    threshold: float
    warn: bool


def check_share(events1, events2, expected_share, *, tolerance=0.1, dispersion=1.0,
                level=DEFAULT_LEVEL) -> ShareVerdict:
    """Check group 1's share of the day's events against ``expected_share ± tolerance``.

    ``tolerance`` is the swing of the daily share that normal days show (learn it from the
    history's daily shares where there is one); the level is split between the two sides.

    >>> check_share(50, 50, 0.5).warn, check_share(5, 95, 0.5).warn
    (False, True)
    """
    p0 = open_unit(expected_share, "expected_share")
    tolerance = finite(tolerance, "tolerance")
    level = open_unit(level, "level")
    low = max(p0 - tolerance, 1e-6)
    high = min(p0 + tolerance, 1 - 1e-6)
    x1, x2 = finite(events1, "events1"), finite(events2, "events2")
    total = x1 + x2
    threshold = math.log(2.0 / level)
    if total <= 0:
        return ShareVerdict(x1, x2, None, p0, low, high, 0.0, threshold, False)
    below, above = share_log_evidence(x1, total, low, high, dispersion=dispersion)
    evidence = max(below, above)
    return ShareVerdict(x1, x2, x1 / total, p0, low, high, float(evidence), threshold,
                        bool(evidence >= threshold))
