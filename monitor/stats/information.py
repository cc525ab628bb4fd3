"""Information-based fractions (Mehta & Tsiatis 2001).

A plan states how much *information* its last look needs: for a difference
worth detecting ``δ`` (distance from the null difference) and a design whose
drift — the expected z at the last look under ``δ`` — is ``θ`` (the
fixed-sample ``z_{1−α(/2)} + z_{1−β}`` times the square root of the design's
inflation), the maximum information is

    I_max = (θ / δ)²,

where information is ``1 / variance`` of the estimated difference. A look's
information fraction is its observed information over ``I_max``:

    fraction = (1 / standard_error²) / I_max.

With a planning sd that was wrong, counting events against a planned number
either stops short of the information the power needs (sd too small) or
collects more than needed (sd too large); the information fraction reaches 1
when the information is there, whatever the sd turns out to be. For two
independent means with common sd σ and ``n`` events per group, ``1/se² =
n/(2σ²)``, so the events plan is ``2σ²·I_max`` per group. The same formula
serves any estimate with a standard error (paired, clustered, before/after).

The fraction can fall between looks when the variance estimate rises; a look
whose fraction has not risen tests nothing (the look's usual rule).

Pure module: numpy and scipy only.
"""

from __future__ import annotations

import math

from ._checks import finite
from ..errors import InvalidArgumentError

__all__ = ["FRACTION_KINDS", "max_information", "plan_information", "information_fraction",
           "events_for_information"]

#: The ``fraction`` settings a comparison may use.
FRACTION_KINDS = ("events", "information")


def max_information(drift, difference) -> float:
    """``(drift / difference)²``: the information a plan's last look needs.

    Parameters
    ----------
    drift : float
        The design's drift θ (``Plan.drift``): expected z at the last look
        under the planned difference.
    difference : float
        Planned difference minus the null difference (non-zero), in the
        estimate's units.

    Examples
    --------
    A single analysis at two-sided 0.05 with power 0.8 needs drift 2.8016;
    for δ = 0.5 that is 31.4 units of information, i.e. 62.8 events per group at σ = 1:

    >>> round(max_information(2.801585, 0.5), 3)
    31.396
    """
    drift = finite(drift, "drift")
    difference = finite(difference, "difference")
    if drift == 0 or difference == 0:
        raise InvalidArgumentError(
            f"drift and difference must be non-zero; got drift {drift!r}, difference {difference!r}")
    return float((drift / difference) ** 2)


def plan_information(plan, null_difference=0.0) -> float:
    """Maximum information of a :class:`monitor.stats.planning.Plan` (drift over the planned distance, squared).

    Examples
    --------
    >>> from monitor.stats.planning import plan_mean
    >>> p = plan_mean(0.5, 2.0, looks=3)
    >>> round(2 * 2.0 ** 2 * plan_information(p) / p.fixed_per_group_exact, 6) == round(p.inflation, 6)
    True
    """
    for name in ("drift", "difference"):
        if not hasattr(plan, name):
            raise InvalidArgumentError(f"plan must be a Plan from monitor.stats.planning; got {plan!r}")
    return max_information(plan.drift, plan.difference - finite(null_difference, "null_difference"))


def information_fraction(standard_error, maximum) -> float:
    """Observed information ``1/standard_error²`` over ``maximum``.

    Returns nan for a missing, zero or non-finite standard error (no
    information can be measured: the look tests nothing).

    Examples
    --------
    >>> round(information_fraction(0.25, 32.0), 6)
    0.5
    """
    maximum = finite(maximum, "maximum")
    if maximum <= 0:
        raise InvalidArgumentError(f"maximum must be positive; got {maximum!r}")
    if standard_error is None:
        return math.nan
    se = float(standard_error)
    if not math.isfinite(se) or se <= 0:
        return math.nan
    return 1.0 / (se * se) / maximum


def events_for_information(events, fraction) -> float:
    """Events per group at which the information fraction would reach 1, at the present variance.

    Information grows in proportion to events when the variance holds still,
    so the plan's events are ``events / fraction``.

    Examples
    --------
    >>> events_for_information(120, 0.4)
    300.0
    """
    events = finite(events, "events")
    fraction = float(fraction)
    if not math.isfinite(fraction) or fraction <= 0:
        return math.inf
    return events / fraction
