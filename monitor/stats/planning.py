"""How many events per group a sequential comparison should plan for.

The plan starts from the fixed-sample size for the difference worth detecting,
then multiplies it by the **inflation factor** of the sequential design: the
ratio of the information a K-look design needs for the same power to the
information a single analysis needs. Writing the drift of a design as the
expected z at fraction 1 under the planned difference, a single two-sided
analysis at level α with power 1 − β needs drift ``z_{1−α/2} + z_{1−β}``; the
K-look design needs the drift θ at which its boundaries are crossed (in the
planned direction) with probability 1 − β, and the inflation is the squared
ratio of the two (Jennison & Turnbull 2000, ch. 2 and ch. 7).

Expected events at decision follow from the crossing probabilities at equally
spaced looks: a comparison that stops at look k has used ``k/K`` of the plan.

Pure module: numpy and scipy only.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
from scipy import optimize, stats

from ._checks import check_alternative, finite, open_unit, whole
from .boundaries import FutilitySpec, SequentialBoundary, crossing_probabilities, efficacy_boundaries
from ..errors import InvalidArgumentError
from .spending import parse_spending

__all__ = [
    "Plan",
    "plan_mean",
    "plan_proportion",
    "fixed_sample_mean",
    "fixed_sample_proportion",
    "design_boundaries",
    "sequential_drift",
    "inflation_for_boundaries",
]

@dataclass(frozen=True)
class Plan:
    """A planned sequential comparison.

    Attributes
    ----------
    metric : str
        ``"mean"`` or ``"proportion"``.
    difference : float
        Planned difference, group 1 − group 2 (``p1 − p2`` for proportions).
    sd : float or None
        Common standard deviation (means only).
    p1, p2 : float or None
        Planned proportions (proportions only).
    alpha, power : float
    alternative : str
    spending : str
        Spending-function specification, as understood by ``parse_spending``.
    looks : int
        Planned number of equally spaced looks.
    futility : bool
        Whether a non-binding futility boundary (β-spending with the same
        family) is part of the design.
    fixed_per_group : int
        Events per group a single analysis would need (rounded up).
    fixed_per_group_exact : float
        The same before rounding.
    inflation : float
        Information of the sequential design over that of a single analysis.
    max_per_group : int
        Planned events per group: ``ceil(fixed_per_group_exact · inflation)``.
        The information fraction at a look is events so far over this.
    expected_per_group_null, expected_per_group_alternative : int
        Expected events per group at the decision when the groups do not differ
        and when they differ by the planned amount (rounded up). With futility
        they assume futility stops are followed.
    drift : float
        Expected z at fraction 1 under the planned difference (the design's θ).
    fixed_drift : float
        The drift a single analysis needs, ``z_{1−α(/2)} + z_{1−β}``.
    fractions : tuple of float
        Information fractions of the planned looks.
    efficacy_z : tuple of float
        Efficacy boundaries at the planned looks (positive z).
    futility_z : tuple or None
        Futility boundaries at the planned looks, in the planned direction.
    """

    metric: str
    difference: float
    sd: float | None
    p1: float | None
    p2: float | None
    alpha: float
    power: float
    alternative: str
    spending: str
    looks: int
    futility: bool
    fixed_per_group: int
    fixed_per_group_exact: float
    inflation: float
    max_per_group: int
    expected_per_group_null: int
    expected_per_group_alternative: int
    drift: float
    fixed_drift: float
    fractions: tuple
    efficacy_z: tuple
    futility_z: tuple | None

    def to_dict(self):
        """Plain JSON-ready dict; an infinite boundary (a look that cannot stop) becomes None."""
        out = asdict(self)
        for key in ("fractions", "efficacy_z", "futility_z"):
            if out[key] is not None:
                out[key] = [z if math.isfinite(z) else None for z in out[key]]
        return out


# ----------------------------------------------------------------- validation


def _check_common(alpha, power, alternative, looks):
    alpha = open_unit(alpha, "alpha")
    power = finite(power, "power")
    if not alpha < power < 1:
        raise InvalidArgumentError(f"power must be in (alpha, 1) = ({alpha}, 1); got {power!r}")
    check_alternative(alternative)
    return alpha, power, whole(looks, "looks", 1)


def _check_direction(difference, alternative, name):
    if difference == 0:
        raise InvalidArgumentError(f"{name} must not be zero; got {difference!r}")
    if alternative == "greater" and difference < 0:
        raise InvalidArgumentError(
            f"{name} must be positive for alternative 'greater' (group 1 above group 2); got {difference!r}"
        )
    if alternative == "less" and difference > 0:
        raise InvalidArgumentError(
            f"{name} must be negative for alternative 'less' (group 1 below group 2); got {difference!r}"
        )


def _quantiles(alpha, power, alternative):
    z_alpha = stats.norm.isf(alpha / 2 if alternative == "two-sided" else alpha)
    z_beta = stats.norm.isf(1.0 - power)
    return z_alpha, z_beta


# ------------------------------------------------------------- fixed sample


def fixed_sample_mean(difference, sd, *, alpha=0.05, power=0.8, alternative="two-sided"):
    """Events per group for a single two-sample z analysis of means (not rounded).

    ``n = 2 σ² (z_{1−α/2} + z_{1−β})² / δ²`` (one-sided: ``z_{1−α}``), the
    normal-approximation size that ignores the far tail of a two-sided test.

    Examples
    --------
    >>> round(fixed_sample_mean(0.5, 1.0), 2)   # 2 (1.95996 + 0.84162)² / 0.25
    62.79
    """
    difference = finite(difference, "difference")
    sd = finite(sd, "sd")
    if sd <= 0:
        raise InvalidArgumentError(f"sd must be positive; got {sd!r}")
    alpha, power, _ = _check_common(alpha, power, alternative, 1)
    _check_direction(difference, alternative, "difference")
    z_alpha, z_beta = _quantiles(alpha, power, alternative)
    return float(2.0 * sd**2 * (z_alpha + z_beta) ** 2 / difference**2)


def fixed_sample_proportion(p1, p2, *, alpha=0.05, power=0.8, alternative="two-sided"):
    """Events per group for a single two-proportion z analysis (not rounded).

    The test statistic uses the pooled variance under no difference, and power
    is computed with the unpooled variance under the planned proportions::

        n = [z_{1−α/2} √(2 p̄ (1 − p̄)) + z_{1−β} √(p1 (1 − p1) + p2 (1 − p2))]² / (p1 − p2)²

    with ``p̄ = (p1 + p2)/2`` (one-sided: ``z_{1−α}``), no continuity correction
    (the usual normal-approximation formula, e.g. Fleiss, Levin & Paik 2003, ch. 4;
    statsmodels' ``samplesize_proportions_2indep_onetail`` gives the same).

    Examples
    --------
    >>> round(fixed_sample_proportion(0.6, 0.4), 1)
    96.9
    """
    p1 = open_unit(p1, "p1")
    p2 = open_unit(p2, "p2")
    if p1 == p2:
        raise InvalidArgumentError(f"p1 and p2 must differ; got p1={p1!r}, p2={p2!r}")
    alpha, power, _ = _check_common(alpha, power, alternative, 1)
    _check_direction(p1 - p2, alternative, "p1 - p2")
    z_alpha, z_beta = _quantiles(alpha, power, alternative)
    pbar = (p1 + p2) / 2
    root = z_alpha * math.sqrt(2 * pbar * (1 - pbar)) + z_beta * math.sqrt(p1 * (1 - p1) + p2 * (1 - p2))
    return float(root**2 / (p1 - p2) ** 2)


# ----------------------------------------------------------- sequential part


def _design_frame(alternative):
    # "less" is the mirror image of "greater": same positive boundaries, and
    # everything is computed in the frame where the planned difference is positive.
    return "greater" if alternative == "less" else alternative


def design_boundaries(fractions, alpha, spending, alternative, *, futility=False, beta=None, drift=None):
    """Efficacy (and futility) boundaries of a design in the planned-direction frame.

    Returns ``(upper, lower, futility_z)``: the upper limits, the lower limits
    that stop the comparison (the mirrored efficacy boundary for two-sided
    designs, the futility boundary for one-sided designs with futility, else
    None), and the futility boundaries (or None).

    Examples
    --------
    >>> upper, lower, futility = design_boundaries([0.5, 1.0], 0.05, "pocock", "two-sided")
    >>> [round(float(z), 3) for z in upper], futility is None
    ([2.157, 2.201], True)
    """
    frame = _design_frame(alternative)
    fractions = [float(f) for f in fractions]
    if not futility:
        looks = efficacy_boundaries(fractions, alpha, spending, frame)
        upper = np.array([lb.z for lb in looks], dtype=float)
        lower = -upper if frame == "two-sided" else None
        return upper, lower, None
    boundary = SequentialBoundary(
        alpha, spending, frame, futility=FutilitySpec(spending, beta, drift)
    )
    looks = [boundary.add_look(f) for f in fractions]
    upper = np.array([lb.z for lb in looks], dtype=float)
    fut = np.array(
        [-np.inf if lb.futility_z is None else lb.futility_z for lb in looks], dtype=float
    )
    # The futility limit can never sit above the efficacy one.
    fut = np.minimum(fut, upper)
    # Two-sided: below the futility limit or beyond the far efficacy limit both stop;
    # whichever is higher is where stopping from below begins.
    lower = np.maximum(fut, -upper) if frame == "two-sided" else fut
    return upper, lower, fut


def _stop_profile(fractions, upper, lower, drift):
    up, low = crossing_probabilities(fractions, upper, lower, drift=drift)
    up = np.asarray(up, dtype=float)
    low = np.zeros_like(up) if lower is None else np.asarray(low, dtype=float)
    return up, low


def _expected_fraction(fractions, up, low):
    """Expected information fraction at decision; the last look ends the plan regardless."""
    t = np.asarray(fractions, dtype=float)
    stop = up[:-1] + low[:-1]
    return float(np.sum(t[:-1] * stop) + t[-1] * max(0.0, 1.0 - np.sum(stop)))


def _power(fractions, alpha, spending, alternative, power, futility, drift):
    upper, lower, _ = design_boundaries(
        fractions, alpha, spending, alternative, futility=futility, beta=1 - power, drift=drift
    )
    up, _ = _stop_profile(fractions, upper, lower, drift)
    return float(np.sum(up))


def sequential_drift(fractions, alpha, spending, alternative, power, *, futility=False):
    """Drift θ at which the design crosses its efficacy boundary with probability ``power``.

    Examples
    --------
    >>> round(sequential_drift([1.0], 0.05, "obrien-fleming", "two-sided", 0.8), 4)  # z_.975 + z_.8
    2.8016
    """
    z_alpha, z_beta = _quantiles(alpha, power, alternative)
    fixed = z_alpha + z_beta

    def gap(theta):
        return _power(fractions, alpha, spending, alternative, power, futility, theta) - power

    low, high = fixed * 0.9, fixed * 1.3
    while gap(low) > 0:
        low *= 0.8
    while gap(high) < 0:
        high *= 1.3
    return optimize.brentq(gap, low, high, xtol=1e-9, rtol=1e-10)


def inflation_for_boundaries(fractions, upper, lower, alpha, power, alternative):
    """Inflation factor of a design given its boundaries directly (for checking tables).

    Solves for the drift at which the probability of crossing ``upper`` first
    is ``power`` and returns ``(θ / (z_{1−α(/2)} + z_{1−β}))²``.

    Examples
    --------
    Pocock's constant 2.413 for five looks at two-sided 0.05 (Jennison & Turnbull
    2000, Table 2.1):

    >>> import numpy as np
    >>> t = [0.2, 0.4, 0.6, 0.8, 1.0]
    >>> round(inflation_for_boundaries(t, np.full(5, 2.413), np.full(5, -2.413), 0.05, 0.8, "two-sided"), 3)
    1.228
    """
    z_alpha, z_beta = _quantiles(alpha, power, alternative)
    fixed = z_alpha + z_beta

    def gap(theta):
        up, _ = _stop_profile(fractions, upper, lower, theta)
        return float(np.sum(up)) - power

    theta = optimize.brentq(gap, 0.5 * fixed, 3.0 * fixed, xtol=1e-10, rtol=1e-12)
    return float((theta / fixed) ** 2)


def _sequential_plan(metric, difference, sd, p1, p2, fixed_exact, alpha, power, alternative, spending, looks, futility):
    spec = parse_spending(spending)
    spec_text = getattr(spec, "spec", spending)
    futility = bool(futility)
    fractions = [k / looks for k in range(1, looks + 1)]
    z_alpha, z_beta = _quantiles(alpha, power, alternative)
    fixed_drift = z_alpha + z_beta
    drift = sequential_drift(fractions, alpha, spec_text, alternative, power, futility=futility)
    upper, lower, fut = design_boundaries(
        fractions, alpha, spec_text, alternative, futility=futility, beta=1 - power, drift=drift
    )
    inflation = (drift / fixed_drift) ** 2
    max_per_group = math.ceil(fixed_exact * inflation - 1e-9)
    null_up, null_low = _stop_profile(fractions, upper, lower, 0.0)
    alt_up, alt_low = _stop_profile(fractions, upper, lower, drift)
    expected_null = _expected_fraction(fractions, null_up, null_low) * max_per_group
    expected_alt = _expected_fraction(fractions, alt_up, alt_low) * max_per_group
    return Plan(
        metric=metric,
        difference=float(difference),
        sd=sd,
        p1=p1,
        p2=p2,
        alpha=alpha,
        power=power,
        alternative=alternative,
        spending=spec_text,
        looks=looks,
        futility=futility,
        fixed_per_group=math.ceil(fixed_exact - 1e-9),
        fixed_per_group_exact=float(fixed_exact),
        inflation=float(inflation),
        max_per_group=int(max_per_group),
        expected_per_group_null=math.ceil(expected_null - 1e-9),
        expected_per_group_alternative=math.ceil(expected_alt - 1e-9),
        drift=float(drift),
        fixed_drift=float(fixed_drift),
        fractions=tuple(fractions),
        efficacy_z=tuple(float(z) for z in upper),
        futility_z=None if fut is None else tuple(float(z) for z in fut),
    )


def plan_mean(
    difference,
    sd,
    *,
    alpha=0.05,
    power=0.8,
    alternative="two-sided",
    spending="obrien-fleming",
    looks=5,
    futility=False,
):
    """Plan a sequential comparison of two means.

    Parameters
    ----------
    difference : float
        Difference worth detecting, group 1 − group 2 (non-zero; positive for
        ``"greater"``, negative for ``"less"``).
    sd : float
        Standard deviation of one event's value, assumed common to both groups.
    alpha : float, default 0.05
        False-alarm rate, in (0, 1); two-sided designs spend ``alpha/2`` per side.
    power : float, default 0.8
        Probability of crossing the efficacy boundary at the planned difference,
        in (alpha, 1).
    alternative : {"two-sided", "greater", "less"}
    spending : str, default "obrien-fleming"
        Spending-function specification (``parse_spending``).
    looks : int, default 5
        Number of equally spaced looks the plan assumes (1 = a single analysis).
    futility : bool, default False
        Add a non-binding futility boundary by β-spending with the same family.
        For two-sided designs it sits on the z in the direction of ``difference``.

    Returns
    -------
    Plan

    Examples
    --------
    >>> plan = plan_mean(0.5, 1.0, looks=1)
    >>> plan.fixed_per_group, plan.max_per_group, round(plan.inflation, 6)
    (63, 63, 1.0)
    >>> plan_mean(0.5, 1.0, looks=5).max_per_group > 63
    True
    """
    alpha, power, looks = _check_common(alpha, power, alternative, looks)
    fixed = fixed_sample_mean(difference, sd, alpha=alpha, power=power, alternative=alternative)
    return _sequential_plan(
        "mean", difference, float(sd), None, None, fixed, alpha, power, alternative, spending, looks, futility
    )


def plan_proportion(
    p1,
    p2,
    *,
    alpha=0.05,
    power=0.8,
    alternative="two-sided",
    spending="obrien-fleming",
    looks=5,
    futility=False,
):
    """Plan a sequential comparison of two proportions (rates of 0/1 events).

    The fixed-sample size is :func:`fixed_sample_proportion` (pooled variance
    under no difference, unpooled under the planned proportions); the sequential
    inflation is the same as for means. Other parameters as :func:`plan_mean`.

    Examples
    --------
    >>> plan = plan_proportion(0.6, 0.4, looks=1)
    >>> plan.fixed_per_group
    97
    """
    alpha, power, looks = _check_common(alpha, power, alternative, looks)
    fixed = fixed_sample_proportion(p1, p2, alpha=alpha, power=power, alternative=alternative)
    p1, p2 = float(p1), float(p2)
    return _sequential_plan(
        "proportion", p1 - p2, None, p1, p2, fixed, alpha, power, alternative, spending, looks, futility
    )
