"""When will a comparison decide: projected completion from observed event rates.

The plan completes when the smaller group reaches its planned events (or the
information fraction reaches 1). At the rate each group has been producing
events, the remaining days are, per group, ``(target − events so far) / rate``
and the plan completes when the slower group gets there. Rates come from
counts over a number of days, both given by the caller (from the look's day
cells); nothing here reads a clock — the caller adds the days to its own date.

Pure module: numpy and scipy only.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

from ._checks import finite
from ..errors import InvalidArgumentError

__all__ = ["Projection", "daily_rates", "project_completion"]


@dataclass(frozen=True)
class Projection:
    """Days until the plan completes at the observed rates.

    Attributes
    ----------
    days_left : float
        Days until every group reaches its target; 0 when they have; ``inf``
        when a group short of its target produces no events.
    rates : tuple of float
        Events per day, per group.
    short : tuple of float
        Events each group still needs (0 when reached).
    slowest : int or None
        Index of the group that decides the date (None when complete).
    """

    days_left: float
    rates: tuple
    short: tuple
    slowest: int | None

    @property
    def reachable(self) -> bool:
        return math.isfinite(self.days_left)

    def to_dict(self) -> dict:
        out = asdict(self)
        out["days_left"] = self.days_left if self.reachable else None
        out["rates"], out["short"] = list(self.rates), list(self.short)
        return out


def daily_rates(counts, days):
    """Events per day, per group: ``counts[g] / days``.

    Parameters
    ----------
    counts : sequence of float
        Events per group over the window.
    days : float
        Length of the window in days (positive).

    Examples
    --------
    >>> daily_rates([140, 70], 7)
    (20.0, 10.0)
    """
    days = finite(days, "days")
    if days <= 0:
        raise InvalidArgumentError(f"days must be positive; got {days!r}")
    out = []
    for i, c in enumerate(counts):
        c = finite(c, f"counts[{i}]")
        if c < 0:
            raise InvalidArgumentError(f"counts[{i}] must be >= 0; got {c!r}")
        out.append(c / days)
    return tuple(out)


def project_completion(events, target, rates) -> Projection:
    """Days until each group has ``target`` events at its daily rate.

    Parameters
    ----------
    events : sequence of float
        Events so far, per group.
    target : float or sequence of float
        Events needed per group (one figure for all groups, or one each).
    rates : sequence of float
        Events per day, per group (see :func:`daily_rates`).

    Returns
    -------
    Projection

    Examples
    --------
    >>> p = project_completion([400, 300], 500, [20.0, 10.0])
    >>> p.days_left, p.slowest, p.short
    (20.0, 1, (100.0, 200.0))
    >>> project_completion([400, 300], 500, [20.0, 0.0]).reachable
    False
    """
    events = [finite(e, f"events[{i}]") for i, e in enumerate(events)]
    rates = [finite(r, f"rates[{i}]") for i, r in enumerate(rates)]
    if len(rates) != len(events) or not events:
        raise InvalidArgumentError(
            f"events and rates need one value per group; got {len(events)} and {len(rates)}")
    if isinstance(target, (list, tuple)):
        targets = [finite(x, f"target[{i}]") for i, x in enumerate(target)]
        if len(targets) != len(events):
            raise InvalidArgumentError(f"target needs one value per group; got {len(targets)}")
    else:
        targets = [finite(target, "target")] * len(events)
    if any(r < 0 for r in rates):
        raise InvalidArgumentError(f"rates must be >= 0; got {rates!r}")
    short = [max(0.0, t - e) for t, e in zip(targets, events)]
    days = []
    for s, r in zip(short, rates):
        days.append(0.0 if s == 0 else (s / r if r > 0 else math.inf))
    left = max(days)
    slowest = None if left == 0 else max(range(len(days)), key=lambda i: days[i])
    return Projection(days_left=float(left), rates=tuple(float(r) for r in rates),
                      short=tuple(float(s) for s in short), slowest=slowest)
