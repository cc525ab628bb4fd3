"""Group-sequential boundaries by recursive numerical integration.

The z statistics of a comparison seen at information fractions
``t_1 < t_2 < …`` behave like a Brownian motion observed at those times: on the
score scale ``S_k = Z_k √t_k`` the increments ``S_k − S_{k−1}`` are
independent normal with variance ``t_k − t_{k−1}`` and mean
``θ (t_k − t_{k−1})``, where ``θ`` (the *drift*) is the expected z at fraction
1. A boundary is found one look at a time: the density of ``S_{k−1}`` over the
paths that have not yet stopped is carried forward, and the boundary at look
``k`` is the value at which the chance of crossing it there, having continued
so far, equals the alpha the spending function releases at ``t_k``
(Armitage, McPherson & Rowe 1969; Jennison & Turnbull 2000, ch. 19).

Numerics
--------
The density at a look is kept on composite Gauss–Legendre nodes (8 per panel)
over its continuation region, cut to the unconstrained mean ± 8 standard
deviations of ``S_k``, and as a Gaussian mixture over the previous look's
nodes, so that it can be evaluated anywhere. Jennison & Turnbull use Simpson's
rule; Gauss–Legendre panels reach the same accuracy with a third of the
points, because the integrands are smooth inside the continuation region and
the region's ends are panel ends. The nodes for look ``k`` are laid only when
the next fraction is known, at about 3.2 nodes per standard deviation of the
narrower of the two neighbouring increments, so fractions may be irregular and
arrive one at a time. Crossing probabilities at the new look use the normal
distribution function exactly. Against a much finer grid the crossing
probabilities agree to about 1e-9 (regular and irregular looks alike).

Conventions
-----------
* ``alternative`` is ``"greater"`` (reject when ``Z ≥ z``), ``"less"``
  (reject when ``Z ≤ −z``) or ``"two-sided"`` (reject when ``|Z| ≥ z``); the
  reported boundary ``z`` is the magnitude.
* A two-sided design at ``α`` spends ``α/2`` per side with the one-sided
  spending function (see :mod:`monitor.stats.spending`); ``cumulative_alpha``
  counts both sides.
* A fraction ``>= 1`` is the final look and spends all that is left.
* Fractions must strictly increase, by at least ``MIN_INCREMENT`` (1e-7). A
  look only 1e-7 after the previous one costs about 0.1 s instead of ~1 ms,
  because its grid must resolve an increment with standard deviation 3e-4.
* When the alpha a look may spend is below ``1e-12`` (a small first fraction
  under O'Brien–Fleming spending, say) the boundary is ``+inf``: nothing can be
  rejected at that look, and the untouched amount stays available to later
  looks. The boundary is never nan.
* The alpha a look spends is the spending function's cumulative value minus
  what earlier boundaries really spent, so a monitor resumed from rounded
  recorded boundaries still ends at exactly ``α``.

Futility (non-binding, β-spending)
----------------------------------
With ``FutilitySpec(spending, beta, drift)`` each look also gets a futility
bound ``f_k``, on the scale of the z statistic *in the planned direction*
``d·Z`` (``d = +1`` for ``"greater"``, ``−1`` for ``"less"``, the sign of
``drift`` for ``"two-sided"``). The comparison may stop for no material
difference when ``d·Z_k < f_k``. ``f_k`` is chosen so that, under the planned
difference (``θ = |drift|`` in the planned direction) and with the earlier
efficacy and futility bounds in place, the chance of ending below ``f_k`` at
look ``k`` equals the β released at ``t_k``. Being non-binding, futility never
changes the efficacy boundaries (they are computed as if there were none). A
futility bound that would exceed the efficacy bound is capped at it, and at the
final look ``f_K`` equals the efficacy bound. For one-sided designs only the
magnitude of ``drift`` is used.

t-based tests: the nominal-level rule
-------------------------------------
Tests whose statistic is not normal (pooled, Welch, paired and clustered t) are
compared through p-values: at look ``k`` reject when the look's one-sided
p-value in the tested direction (for two-sided, in either direction) is at or
below the boundary's nominal level; see :func:`nominal_decision`. With this
z engine's ``1 − Φ(z_k)`` that rule runs above alpha at small degrees of
freedom; the look takes its nominal levels from the exact sequential t
boundaries of :mod:`monitor.stats.sequential_t` instead. Futility uses the same idea: the one-sided p-value in
the planned direction is turned back into a z by ``Φ⁻¹(1 − p)`` and compared
with ``f_k`` (:func:`futility_decision`).

Pure module: numpy and scipy only.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
from scipy import special

from ._checks import ALTERNATIVES, check_alternative, finite, open_unit
from ..errors import InvalidArgumentError
from .spending import SpendingFunction, parse_spending

__all__ = [
    "LookBoundary",
    "FutilitySpec",
    "SequentialBoundary",
    "efficacy_boundaries",
    "crossing_probabilities",
    "nominal_decision",
    "futility_decision",
    "ALTERNATIVES",
    "NEGLIGIBLE_ALPHA",
    "MIN_INCREMENT",
]


#: A look allowed to spend less than this gets an infinite boundary.
NEGLIGIBLE_ALPHA = 1e-12

#: Looks must be at least this far apart in information fraction. Smaller
#: steps carry no usable information and would need grids of millions of
#: nodes; a caller whose fraction has not moved this much should not take a
#: boundary look.
MIN_INCREMENT = 1e-7

# Gauss–Legendre panels per standard deviation of the narrower neighbouring
# increment, and nodes per panel: 3.2 nodes per sd keep crossing
# probabilities within ~1e-9 of a grid eight times finer.
_PANELS_PER_SD = 0.4
_PANEL_POINTS = 8
# Half-width of the S_k range kept, in standard deviations of S_k; the mass
# cut off (2 Φ(−8) ≈ 1e-15) is far below any accuracy we promise.
_RANGE_SD = 8.0
# Mixture terms farther than this many kernel sds from a point are dropped.
_KERNEL_SD = 8.5
# Bound on grid size (320,000 nodes), a safety net: with increments of at
# least MIN_INCREMENT the widest region before fraction 1 needs about 20,300
# panels.
_MAX_PANELS = 40000
# Working-array size for the banded mixture evaluation.
_CHUNK_ENTRIES = 1_000_000
_SQRT_2PI = math.sqrt(2.0 * math.pi)


# --------------------------------------------------------------------------
# The integration engine
# --------------------------------------------------------------------------


_GAUSS_NODES, _GAUSS_WEIGHTS = np.polynomial.legendre.leggauss(_PANEL_POINTS)


def _panel_rule(lo: float, hi: float, panels: int):
    """Composite Gauss–Legendre nodes and weights on [lo, hi] with equal panels."""
    width = (hi - lo) / panels
    starts = lo + width * np.arange(panels)
    nodes = (starts[:, None] + (0.5 * width) * (_GAUSS_NODES + 1.0)).ravel()
    weights = np.tile(_GAUSS_WEIGHTS * (0.5 * width), panels)
    return nodes, weights


def _mixture_density(points, nodes, weights, shift, sd):
    """Evaluate ``Σ_j weights_j φ((points − nodes_j − shift)/sd) / sd``.

    ``nodes`` is sorted; only a window of nodes covering ``_KERNEL_SD`` sds
    around each point is summed, which turns an n×m product into a band about
    55 nodes wide when neighbouring increments are alike.
    """
    m = nodes.size
    n = points.size
    out = np.zeros(n)
    if m == 0 or n == 0:
        return out
    centre = (points - shift) / sd
    scaled = nodes / sd
    first = np.searchsorted(scaled, centre - _KERNEL_SD, side="left")
    stop = np.searchsorted(scaled, centre + _KERNEL_SD, side="right")
    width = int((stop - first).max())
    if width == 0:
        return out
    if 2 * width >= m:
        # The band covers most nodes anyway: a dense product is quicker.
        rows = max(1, _CHUNK_ENTRIES // m)
        for start in range(0, n, rows):
            x = centre[start:start + rows, None] - scaled[None, :]
            np.square(x, out=x)
            x *= -0.5
            np.exp(x, out=x)
            out[start:start + rows] = x @ weights
        return out / (sd * _SQRT_2PI)
    # Pad with zero-weight nodes so every window of ``width`` nodes is in
    # range; windows may then include a few real nodes beyond the reach,
    # which only adds (negligible) exact terms.
    scaled = np.concatenate([scaled, np.full(width, scaled[-1])])
    weights = np.concatenate([weights, np.zeros(width)])
    offsets = np.arange(width)
    rows = max(1, _CHUNK_ENTRIES // width)
    for start in range(0, n, rows):
        sl = slice(start, start + rows)
        idx = first[sl, None] + offsets
        x = centre[sl, None] - scaled[idx]
        np.square(x, out=x)
        x *= -0.5
        np.exp(x, out=x)
        out[sl] = np.einsum("ij,ij->i", x, weights[idx])
    return out / (sd * _SQRT_2PI)


class _Path:
    """Density of ``S`` at the latest look over the paths still continuing.

    The density is held as a Gaussian mixture: quadrature-weighted density values
    on the previous look's grid (``_nodes``, ``_weights``), convolved with the
    normal increment to the latest look and restricted to its continuation
    region ``(_low, _high)``. Before the first look it is a point mass at 0.
    """

    def __init__(self, drift: float):
        self.drift = float(drift)
        self.fraction = 0.0
        self._prev_fraction = 0.0
        self._nodes = np.zeros(1)
        self._weights = np.ones(1)
        self._low = -math.inf
        self._high = math.inf
        self._started = False

    def discretise(self, next_fraction: float):
        """Nodes and quadrature-weighted density at the latest look, fit for ``next_fraction``."""
        if not self._started:
            return self._nodes, self._weights
        t = self.fraction
        var_now = t - self._prev_fraction
        var_next = next_fraction - t
        centre = self.drift * t
        span = _RANGE_SD * math.sqrt(t)
        lo = max(self._low, centre - span)
        hi = min(self._high, centre + span)
        if not lo < hi or self._nodes.size == 0:
            return np.empty(0), np.empty(0)
        width = math.sqrt(min(var_now, var_next)) / _PANELS_PER_SD
        panels = min(max(math.ceil((hi - lo) / width), 1), _MAX_PANELS)
        grid, quad = _panel_rule(lo, hi, panels)
        density = _mixture_density(
            grid, self._nodes, self._weights, self.drift * var_now, math.sqrt(var_now)
        )
        return grid, density * quad

    def crossing(self, nodes, weights, next_fraction, upper_s, lower_s, slopes=False):
        """P(continue so far, S_next ≥ upper_s) and P(continue so far, S_next ≤ lower_s).

        With ``slopes`` also the derivatives of the two with respect to
        ``upper_s`` and ``lower_s`` (for Newton's method).
        """
        if nodes.size == 0:
            return (0.0, 0.0, 0.0, 0.0) if slopes else (0.0, 0.0)
        var = next_fraction - self.fraction
        sd = math.sqrt(var)
        moved = nodes + self.drift * var
        up = low = up_slope = low_slope = 0.0
        if upper_s < math.inf:
            x = (moved - upper_s) / sd
            up = float(weights @ special.ndtr(x))
            if slopes:
                up_slope = -float(weights @ np.exp(-0.5 * x * x)) / (sd * _SQRT_2PI)
        if lower_s > -math.inf:
            x = (lower_s - moved) / sd
            low = float(weights @ special.ndtr(x))
            if slopes:
                low_slope = float(weights @ np.exp(-0.5 * x * x)) / (sd * _SQRT_2PI)
        return (up, low, up_slope, low_slope) if slopes else (up, low)

    def advance(self, nodes, weights, next_fraction, low_s, high_s):
        """Move to the look at ``next_fraction`` whose continuation region is ``(low_s, high_s)``."""
        self._nodes, self._weights = nodes, weights
        self._prev_fraction = self.fraction
        self.fraction = float(next_fraction)
        self._low, self._high = float(low_s), float(high_s)
        self._started = True


def _scaled(z: float, root_t: float) -> float:
    # inf * root_t is fine, but keep 0 * inf out of the way.
    return z * root_t if math.isfinite(z) else z


def _solve_monotone(value_and_slope, target, start, *, increasing, floor=-math.inf, ceiling=math.inf):
    """Root of ``p(x) = target`` for a monotone ``p``, kept within ``[floor, ceiling]``.

    Newton's method on ``log p`` (tail probabilities are close to log-linear,
    so it converges in a few steps), safeguarded by the bracket that the signs
    seen so far imply; steps are limited to 1 in x. Returns ``floor`` or
    ``ceiling`` when the root lies beyond them.
    """
    log_target = math.log(target)
    # Bracket from points actually evaluated (the limits are not evaluated).
    lo, hi = -math.inf, math.inf
    x = min(max(start, floor), ceiling)
    for _ in range(100):
        p, slope = value_and_slope(x)
        gap = math.log(p) - log_target if p > 0 else -math.inf
        # A relative error of 1e-11 in the probability is far below the
        # integration error; asking for less makes rounding noise chase itself.
        if abs(gap) < 1e-11:
            return x
        # The root lies above x when p is too small and increasing, or too
        # large and decreasing.
        root_above = (gap < 0) == increasing
        if root_above:
            lo = x
            if x >= ceiling:
                return ceiling
        else:
            hi = x
            if x <= floor:
                return floor
        if p > 0 and slope != 0 and math.isfinite(gap):
            step = -gap * p / slope
        else:
            step = 1.0 if root_above else -1.0
        new = x + max(-1.0, min(1.0, step))
        if not lo < new < hi:
            if math.isfinite(lo) and math.isfinite(hi):
                new = 0.5 * (lo + hi)
            else:
                new = lo + 1.0 if root_above else hi - 1.0
        new = min(max(new, floor), ceiling)
        if hi - lo <= 1e-13 * max(1.0, abs(x)):
            return new
        x = new
    return x


# --------------------------------------------------------------------------
# Public results and inputs
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class LookBoundary:
    """The boundary at one look.

    Attributes
    ----------
    look : int
        Look number, from 1.
    fraction : float
        Information fraction at the look (``>= 1`` on the final look).
    z : float
        Efficacy boundary on the z scale, as a magnitude: reject when
        ``Z ≥ z`` (``"greater"``), ``Z ≤ −z`` (``"less"``) or ``|Z| ≥ z``
        (``"two-sided"``). ``+inf`` when the look may spend nothing.
    nominal_p : float
        One-sided nominal level ``1 − Φ(z)``.
    cumulative_alpha : float
        Alpha the spending function allows by this look (both sides for
        two-sided designs); ``alpha`` on the final look.
    alpha_spent : float
        Increase of ``cumulative_alpha`` at this look.
    futility_z : float or None
        Non-binding futility bound on the z in the planned direction (stop for
        no material difference below it); None without futility.
    final : bool
        True on the look that spends whatever alpha was left.
    """

    look: int
    fraction: float
    z: float
    nominal_p: float
    cumulative_alpha: float
    alpha_spent: float
    futility_z: float | None
    final: bool

    def to_dict(self) -> dict:
        """Plain dict of the fields (infinite values kept as floats)."""
        return asdict(self)


@dataclass(frozen=True)
class FutilitySpec:
    """Non-binding futility by β-spending.

    Parameters
    ----------
    spending : SpendingFunction or str
        How β is released over the information fraction (a spec string such as
        ``"hsd:-2"`` is parsed).
    beta : float
        Total type II error to spend, in (0, 1).
    drift : float
        Expected z at fraction 1 under the planned difference (nonzero; its
        sign picks the side of a two-sided design).

    Examples
    --------
    >>> spec = FutilitySpec("hsd:-2", 0.1, 2.9)
    >>> b = SequentialBoundary(0.025, "hsd:-4", "greater", futility=spec)
    >>> first = b.add_look(0.5)
    >>> round(first.z, 3), round(first.futility_z, 3)
    (2.75, 0.122)
    """

    spending: SpendingFunction
    beta: float
    drift: float

    def __post_init__(self):
        object.__setattr__(self, "spending", parse_spending(self.spending))
        object.__setattr__(self, "beta", open_unit(self.beta, "beta"))
        drift = finite(self.drift, "drift")
        if drift == 0.0:
            raise InvalidArgumentError(f"drift must not be zero; got {self.drift!r}")
        object.__setattr__(self, "drift", drift)


def _check_fraction(fraction, previous) -> float:
    try:
        t = float(fraction)
    except (TypeError, ValueError):
        raise InvalidArgumentError(f"fraction: must be a number, got {fraction!r}") from None
    if not math.isfinite(t) or t <= 0:
        raise InvalidArgumentError(f"fraction: must be finite and > 0, got {fraction!r}")
    if previous is not None and not t > previous:
        raise InvalidArgumentError(
            f"fraction: information fractions must strictly increase, got {fraction!r} after {previous!r}"
        )
    if previous is not None and t - previous < MIN_INCREMENT:
        raise InvalidArgumentError(
            f"fraction: {fraction!r} is less than {MIN_INCREMENT:g} above the previous look's "
            f"{previous!r}; too little new information for a look"
        )
    return t


def _nominal_p(z: float) -> float:
    return float(special.ndtr(-z))


# --------------------------------------------------------------------------
# The live boundary
# --------------------------------------------------------------------------


class SequentialBoundary:
    """Alpha-spending boundaries computed one look at a time.

    Parameters
    ----------
    alpha : float
        Overall false-alarm rate, in (0, 1) (both sides for two-sided).
    spending : SpendingFunction or str
        One-sided spending function or its spec (see :func:`parse_spending`).
    alternative : {"two-sided", "greater", "less"}
    futility : FutilitySpec, optional
        Adds non-binding β-spending futility bounds.

    Examples
    --------
    >>> b = SequentialBoundary(0.05, "obrien-fleming", "two-sided")
    >>> [round(b.add_look(t).z, 3) for t in (0.2, 0.4, 0.6, 0.8, 1.0)]
    [4.877, 3.357, 2.68, 2.29, 2.031]
    >>> b.looks[-1].final, round(b.looks[-1].cumulative_alpha, 6)
    (True, 0.05)
    """

    def __init__(self, alpha, spending, alternative, *, futility=None):
        self.alpha = open_unit(alpha, "alpha")
        self.spending = parse_spending(spending)
        self.alternative = check_alternative(alternative)
        if futility is not None and not isinstance(futility, FutilitySpec):
            raise InvalidArgumentError(f"futility: must be a FutilitySpec or None, got {futility!r}")
        self.futility = futility
        self._two_sided = alternative == "two-sided"
        self._level = self.alpha / 2.0 if self._two_sided else self.alpha
        self._null = _Path(0.0)
        self._planned = _Path(abs(futility.drift)) if futility is not None else None
        self._looks: list[LookBoundary] = []
        # What the boundaries really spent (exact crossing probabilities), as
        # opposed to what the spending function allowed.
        self._alpha_used = 0.0
        self._beta_used = 0.0

    # -- read-only views ---------------------------------------------------

    @property
    def looks(self) -> tuple[LookBoundary, ...]:
        """Boundaries of the looks taken so far."""
        return tuple(self._looks)

    @property
    def fractions(self) -> tuple[float, ...]:
        return tuple(b.fraction for b in self._looks)

    @property
    def complete(self) -> bool:
        """True once the final look (fraction ``>= 1``) has been taken."""
        return bool(self._looks) and self._looks[-1].final

    @property
    def futility_direction(self) -> int | None:
        """``d`` in the futility rule ``d·Z < f``; None without futility."""
        if self.futility is None:
            return None
        if self.alternative == "greater":
            return 1
        if self.alternative == "less":
            return -1
        return 1 if self.futility.drift > 0 else -1

    @property
    def alpha_used(self) -> float:
        """Exact probability under no difference of crossing an efficacy bound so far."""
        return self._alpha_used

    # -- looks ---------------------------------------------------------------

    def add_look(self, fraction) -> LookBoundary:
        """Compute the boundary at the next look.

        Parameters
        ----------
        fraction : float
            Information fraction reached, greater than the previous look's;
            ``>= 1`` makes it the final look.

        Returns
        -------
        LookBoundary

        Examples
        --------
        >>> b = SequentialBoundary(0.025, "pocock", "greater")
        >>> round(b.add_look(0.3).z, 4), round(b.add_look(1.0).z, 4)
        (2.3118, 2.1237)
        """
        return self._take(fraction, None, None)

    @classmethod
    def resume(cls, alpha, spending, alternative, fractions, upper_z, futility_z=None, futility=None):
        """Rebuild a boundary from recorded looks without re-deriving them.

        The recorded boundary values are used as they are (rounded or not), so
        the next :meth:`add_look` continues exactly from what was decided.

        Parameters
        ----------
        alpha, spending, alternative, futility
            The design, as given to the constructor.
        fractions : sequence of float
            Recorded information fractions, strictly increasing.
        upper_z : sequence of float
            Recorded efficacy boundaries (magnitudes; ``inf`` allowed).
        futility_z : sequence of float, optional
            Recorded futility bounds; required when ``futility`` is given.

        Returns
        -------
        SequentialBoundary

        Examples
        --------
        >>> live = SequentialBoundary(0.05, "pocock", "two-sided")
        >>> first = [live.add_look(t).z for t in (0.25, 0.5)]
        >>> again = SequentialBoundary.resume(0.05, "pocock", "two-sided", [0.25, 0.5], first)
        >>> abs(again.add_look(0.8).z - live.add_look(0.8).z) < 1e-9
        True
        """
        boundary = cls(alpha, spending, alternative, futility=futility)
        fractions = list(fractions)
        upper_z = list(upper_z)
        if len(upper_z) != len(fractions):
            raise InvalidArgumentError(
                f"upper_z: expected {len(fractions)} values (one per fraction), got {len(upper_z)}"
            )
        if futility is None and futility_z is not None:
            raise InvalidArgumentError("futility_z: given without a futility design")
        if futility is not None:
            if futility_z is None:
                raise InvalidArgumentError("futility_z: required when the design has futility")
            futility_z = list(futility_z)
            if len(futility_z) != len(fractions):
                raise InvalidArgumentError(
                    f"futility_z: expected {len(fractions)} values (one per fraction), got {len(futility_z)}"
                )
        for k, (t, z) in enumerate(zip(fractions, upper_z)):
            z = _recorded("upper_z", z, allow_negative=not boundary._two_sided)
            f = None
            if futility is not None:
                f = _recorded("futility_z", futility_z[k], allow_negative=True, allow_minus_inf=True)
            boundary._take(t, z, f)
        return boundary

    def add_recorded_look(self, fraction, z, futility_z=None) -> LookBoundary:
        """Append one recorded look, using its boundary as it is (see :meth:`resume`).

        Examples
        --------
        >>> b = SequentialBoundary(0.025, "pocock", "greater")
        >>> look = b.add_recorded_look(0.5, 2.2)
        >>> round(b.alpha_used, 6)   # 1 - Φ(2.2): what the recorded boundary spent
        0.013903
        """
        z = _recorded("upper_z", z, allow_negative=not self._two_sided)
        f = None
        if self.futility is not None:
            if futility_z is None:
                raise InvalidArgumentError("futility_z: required when the design has futility")
            f = _recorded("futility_z", futility_z, allow_negative=True, allow_minus_inf=True)
        elif futility_z is not None:
            raise InvalidArgumentError("futility_z: given without a futility design")
        return self._take(fraction, z, f)

    def _take(self, fraction, z_recorded, f_recorded) -> LookBoundary:
        if self.complete:
            raise InvalidArgumentError(
                f"fraction: the final look (fraction {self._looks[-1].fraction!r}) has been taken; "
                f"no look at {fraction!r} is possible"
            )
        previous = self._looks[-1].fraction if self._looks else None
        t = _check_fraction(fraction, previous)
        final = t >= 1.0
        sides = 2.0 if self._two_sided else 1.0
        allowed = sides * float(self.spending.cumulative(min(t, 1.0), self._level))
        if final:
            allowed = self.alpha
        root_t = math.sqrt(t)

        nodes, weights = self._null.discretise(t)

        def spent_at(z):
            up, low = self._null.crossing(
                nodes, weights, t, _scaled(z, root_t), -_scaled(z, root_t) if self._two_sided else -math.inf
            )
            return up + low

        def spent_and_slope(z):
            upper_s = z * root_t
            lower_s = -upper_s if self._two_sided else -math.inf
            up, low, up_slope, low_slope = self._null.crossing(nodes, weights, t, upper_s, lower_s, slopes=True)
            return up + low, root_t * (up_slope - low_slope)

        if z_recorded is None:
            z = self._solve_efficacy(spent_and_slope, allowed - self._alpha_used, sides)
        else:
            z = z_recorded
        self._alpha_used += spent_at(z) if math.isfinite(z) else 0.0
        low_s = -_scaled(z, root_t) if self._two_sided else -math.inf
        self._null.advance(nodes, weights, t, low_s, _scaled(z, root_t))

        f = None
        if self.futility is not None:
            f = self._futility_look(t, z, f_recorded, final)

        previous_allowed = self._looks[-1].cumulative_alpha if self._looks else 0.0
        look = LookBoundary(
            look=len(self._looks) + 1,
            fraction=t,
            z=float(z),
            nominal_p=_nominal_p(z),
            cumulative_alpha=allowed,
            alpha_spent=max(allowed - previous_allowed, 0.0),
            futility_z=None if f is None else float(f),
            final=final,
        )
        self._looks.append(look)
        return look

    def _solve_efficacy(self, spent_and_slope, amount, sides):
        if amount <= NEGLIGIBLE_ALPHA:
            return math.inf
        # Boundaries move smoothly from look to look, so the last one is the
        # best first guess; at the first look the fixed-sample value is exact.
        start = float(-special.ndtri(amount / sides))
        if self._looks and math.isfinite(self._looks[-1].z):
            start = self._looks[-1].z
        floor = 0.0 if self._two_sided else -40.0
        return float(_solve_monotone(spent_and_slope, amount, start, increasing=False, floor=floor, ceiling=40.0))

    def _futility_look(self, t, z, f_recorded, final):
        path = self._planned
        root_t = math.sqrt(t)
        nodes, weights = path.discretise(t)

        def below(f):
            return path.crossing(nodes, weights, t, math.inf, _scaled(f, root_t))[1]

        def below_and_slope(f):
            _, low, _, low_slope = path.crossing(nodes, weights, t, math.inf, f * root_t, slopes=True)
            return low, root_t * low_slope

        if f_recorded is not None:
            f = f_recorded
        elif final:
            f = z
        else:
            allowed = float(self.futility.spending.cumulative(t, self.futility.beta))
            amount = allowed - self._beta_used
            if amount <= NEGLIGIBLE_ALPHA:
                f = -math.inf
            elif below(z) <= amount:
                f = z
            else:
                # Without earlier looks the chance would be Φ(f − θ√t): a lower bracket.
                start = path.drift * root_t + float(special.ndtri(amount))
                if self._looks and self._looks[-1].futility_z is not None and math.isfinite(self._looks[-1].futility_z):
                    start = self._looks[-1].futility_z
                ceiling = z if math.isfinite(z) else 40.0
                f = float(_solve_monotone(below_and_slope, amount, min(start, ceiling), increasing=True,
                                          floor=-40.0, ceiling=ceiling))
        if f > z:
            f = z
        self._beta_used += below(f) if f > -math.inf else 0.0
        low = f if not self._two_sided else max(f, -z)
        path.advance(nodes, weights, t, _scaled(low, root_t), _scaled(z, root_t))
        return f


def _recorded(name, value, *, allow_negative, allow_minus_inf=False) -> float:
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise InvalidArgumentError(f"{name}: recorded boundary must be a number, got {value!r}") from None
    if math.isnan(x) or (x == -math.inf and not allow_minus_inf):
        raise InvalidArgumentError(f"{name}: recorded boundary must not be {value!r}")
    if x < 0 and not allow_negative:
        raise InvalidArgumentError(f"{name}: a two-sided boundary is a magnitude (>= 0), got {value!r}")
    return x


def efficacy_boundaries(fractions, alpha, spending, alternative) -> list[LookBoundary]:
    """Efficacy boundaries for a whole sequence of information fractions.

    Parameters
    ----------
    fractions : sequence of float
        Strictly increasing, positive; a value ``>= 1`` must be the last.
    alpha : float
        Overall level in (0, 1).
    spending : SpendingFunction or str
    alternative : {"two-sided", "greater", "less"}

    Returns
    -------
    list of LookBoundary

    Examples
    --------
    >>> [round(b.z, 3) for b in efficacy_boundaries([0.5, 1.0], 0.05, "pocock", "two-sided")]
    [2.157, 2.201]
    """
    boundary = SequentialBoundary(alpha, spending, alternative)
    return [boundary.add_look(t) for t in fractions]


def crossing_probabilities(fractions, upper_z, lower_z=None, drift=0.0):
    """Chance of first crossing each bound at each look.

    ``Z_k ~ N(drift·√t_k, 1)`` with ``corr(Z_j, Z_k) = √(t_j / t_k)``, the
    joint law of sequential z statistics. A path stops at the first look where
    ``Z_k ≥ upper_z[k]`` or ``Z_k ≤ lower_z[k]``.

    Parameters
    ----------
    fractions : sequence of float
        Strictly increasing, positive information fractions (any may exceed 1).
    upper_z : sequence of float
        Upper bounds on the z scale; ``+inf`` for none at a look.
    lower_z : sequence of float, optional
        Lower bounds; ``-inf`` for none at a look; None for none at all. Each
        must not exceed the upper bound at the same look.
    drift : float
        Expected z at fraction 1.

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        Per-look probabilities of stopping by crossing the upper bound, and
        the lower bound.

    Examples
    --------
    >>> up, low = crossing_probabilities([1.0], [1.959964], [-1.959964])
    >>> round(float(up[0]), 6), round(float(low[0]), 6)
    (0.025, 0.025)
    >>> up, low = crossing_probabilities([0.5, 1.0], [2.797, 1.977], drift=2.8)
    >>> round(float(up.sum()), 3)
    0.797
    """
    ts = np.asarray(fractions, dtype=float).ravel()
    upper = np.asarray(upper_z, dtype=float).ravel()
    lower = np.full(ts.size, -np.inf) if lower_z is None else np.asarray(lower_z, dtype=float).ravel()
    if upper.size != ts.size or lower.size != ts.size:
        raise InvalidArgumentError(
            f"upper_z/lower_z: need one value per fraction ({ts.size}), "
            f"got {upper.size} and {lower.size}"
        )
    previous = None
    for t in ts:
        previous = _check_fraction(t, previous)
    if np.isnan(upper).any() or np.isnan(lower).any():
        raise InvalidArgumentError("upper_z/lower_z: bounds must not be nan")
    if (lower > upper).any():
        k = int(np.argmax(lower > upper))
        raise InvalidArgumentError(
            f"lower_z: must not exceed upper_z at a look, got {lower[k]!r} > {upper[k]!r} at look {k + 1}"
        )
    drift = finite(drift, "drift")

    path = _Path(drift)
    up = np.zeros(ts.size)
    low = np.zeros(ts.size)
    for k, t in enumerate(ts):
        root_t = math.sqrt(t)
        u = _scaled(float(upper[k]), root_t)
        lo = _scaled(float(lower[k]), root_t)
        nodes, weights = path.discretise(t)
        up[k], low[k] = path.crossing(nodes, weights, t, u, lo)
        path.advance(nodes, weights, t, lo, u)
    return up, low


# --------------------------------------------------------------------------
# Decisions for tests compared through p-values
# --------------------------------------------------------------------------


def _check_p(name, p) -> float:
    try:
        x = float(p)
    except (TypeError, ValueError):
        raise InvalidArgumentError(f"{name}: must be a probability, got {p!r}") from None
    if not (0.0 <= x <= 1.0):
        raise InvalidArgumentError(f"{name}: must be in [0, 1], got {p!r}")
    return x


def nominal_decision(p_one_sided_upper, p_one_sided_lower, look_boundary, alternative) -> bool:
    """Whether a look crosses the efficacy boundary under the nominal-level rule.

    Parameters
    ----------
    p_one_sided_upper : float
        The look's p-value for "group 1 − group 2 > δ0".
    p_one_sided_lower : float
        The look's p-value for "group 1 − group 2 < δ0".
    look_boundary : LookBoundary
    alternative : {"two-sided", "greater", "less"}

    Returns
    -------
    bool
        True when the p-value in the tested direction (either direction for
        two-sided) is at or below ``look_boundary.nominal_p``.

    Examples
    --------
    >>> b = SequentialBoundary(0.05, "obrien-fleming", "two-sided").add_look(1.0)
    >>> nominal_decision(0.02, 0.98, b, "two-sided"), nominal_decision(0.03, 0.97, b, "two-sided")
    (True, False)
    """
    upper = _check_p("p_one_sided_upper", p_one_sided_upper)
    lower = _check_p("p_one_sided_lower", p_one_sided_lower)
    alternative = check_alternative(alternative)
    level = look_boundary.nominal_p
    if alternative == "greater":
        return upper <= level
    if alternative == "less":
        return lower <= level
    return min(upper, lower) <= level


def futility_decision(p_one_sided_upper, p_one_sided_lower, look_boundary, direction) -> bool:
    """Whether a look falls below its futility bound, for tests compared through p-values.

    The one-sided p-value in the planned direction is turned into the z that
    would give it, ``Φ⁻¹(1 − p)``, and compared with ``look_boundary.futility_z``.
    Check efficacy first: on a look that crosses both, the efficacy decision wins.

    Parameters
    ----------
    p_one_sided_upper, p_one_sided_lower : float
        As in :func:`nominal_decision`.
    look_boundary : LookBoundary
    direction : {1, -1}
        The planned direction (``SequentialBoundary.futility_direction``).

    Returns
    -------
    bool
        False when the look has no futility bound.

    Examples
    --------
    >>> spec = FutilitySpec("obrien-fleming", 0.2, 2.8)
    >>> b = SequentialBoundary(0.025, "obrien-fleming", "greater", futility=spec).add_look(0.5)
    >>> futility_decision(0.6, 0.4, b, 1), futility_decision(0.05, 0.95, b, 1)
    (True, False)
    """
    upper = _check_p("p_one_sided_upper", p_one_sided_upper)
    lower = _check_p("p_one_sided_lower", p_one_sided_lower)
    if direction not in (1, -1):
        raise InvalidArgumentError(f"direction: must be 1 or -1, got {direction!r}")
    if look_boundary.futility_z is None:
        return False
    p = upper if direction == 1 else lower
    z_planned = float(-special.ndtri(p)) if 0.0 < p < 1.0 else (math.inf if p == 0.0 else -math.inf)
    return z_planned < look_boundary.futility_z
