"""Lan–DeMets alpha-spending functions.

A spending function ``a(t)`` says how much of a one-sided error level ``a`` may
have been used up by the time a fraction ``t`` of the planned information has
been seen (Lan & DeMets 1983). It is 0 at ``t = 0``, equals the level at
``t >= 1`` and never decreases, so a monitor may look whenever it likes and
still keep the overall false-alarm rate.

Families
--------
``obrien-fleming``
    O'Brien–Fleming type, ``a(t) = 2 − 2 Φ(z_{1−a/2} / √t)``: spends almost
    nothing early, keeping the final look close to a fixed-sample test.
``pocock``
    Pocock type, ``a(t) = a · ln(1 + (e − 1) t)``: spends roughly evenly.
``hsd:GAMMA``
    Hwang–Shih–DeCani, ``a(t) = a (1 − e^{−γt}) / (1 − e^{−γ})``; ``γ = 0`` is
    the linear ``a · t``. Negative γ spends late (γ = −4 resembles
    O'Brien–Fleming), positive γ spends early.
``power:RHO``
    Power family ``a(t) = a · t^ρ`` with ``ρ > 0`` (ρ = 3 resembles
    O'Brien–Fleming, ρ = 1 is linear).

Two-sided designs
-----------------
Every function here is a *one-sided* spending function of the level ``a`` it
is given. A two-sided design at overall ``α`` spends ``a = α/2`` on each side
with the one-sided function, so its cumulative two-sided spend is
``2 · a(t; α/2)``. This is the convention behind the published boundary
tables. It matters for the O'Brien–Fleming type, whose formula is not linear
in ``a``: ``2 · a(t; α/2)`` differs from ``a(t; α)``. The other families are
linear in ``a`` and give the same thing either way.

Pure module: numpy and scipy only.
"""

from __future__ import annotations

import math
from abc import ABC, abstractmethod
from dataclasses import dataclass

import numpy as np
from scipy import special

from ._checks import open_unit
from ..errors import InvalidArgumentError, UnknownSpendingError

__all__ = [
    "SpendingFunction",
    "OBrienFlemingSpending",
    "PocockSpending",
    "HwangShihDeCaniSpending",
    "PowerSpending",
    "parse_spending",
    "VALID_SPENDING_SPECS",
]

#: The forms ``parse_spending`` accepts, as shown to users in error messages.
VALID_SPENDING_SPECS = ("obrien-fleming", "pocock", "hsd:GAMMA", "power:RHO")


def _format_number(x: float) -> str:
    # 15 significant digits round-trips any parameter a person would type.
    return format(float(x), ".15g")


class SpendingFunction(ABC):
    """A one-sided alpha-spending function ``a(t)`` of the information fraction.

    Subclasses implement :meth:`_spend` for ``0 < t < 1`` only; the base class
    validates the arguments and pins the values at 0 and at ``t >= 1``.
    """

    @property
    @abstractmethod
    def spec(self) -> str:
        """The text form accepted by :func:`parse_spending`."""

    @abstractmethod
    def _spend(self, t: np.ndarray, level: float) -> np.ndarray:
        """Cumulative spend for fractions strictly between 0 and 1."""

    def cumulative(self, t, level: float):
        """Level spent by information fraction ``t`` (vectorised).

        Parameters
        ----------
        t : float or array_like
            Information fractions, ``>= 0``; values ``>= 1`` return ``level``.
        level : float
            One-sided level ``a`` in (0, 1). For a two-sided design at ``α``
            pass ``α/2`` and double the result.

        Returns
        -------
        float or numpy.ndarray
            ``a(t)``; a float when ``t`` is a scalar.

        Examples
        --------
        >>> from monitor.stats.spending import parse_spending
        >>> f = parse_spending("pocock")
        >>> round(f.cumulative(0.5, 0.025), 6)
        0.015503
        >>> f.cumulative([0.0, 1.0, 2.0], 0.025).tolist()
        [0.0, 0.025, 0.025]
        """
        level = open_unit(level, "level")
        arr = np.asarray(t, dtype=float)
        if np.any(np.isnan(arr)) or np.any(arr < 0):
            raise InvalidArgumentError(f"t: information fractions must be >= 0, got {t!r}")
        inside = (arr > 0) & (arr < 1)
        out = np.where(arr >= 1, level, 0.0)
        if np.any(inside):
            spent = self._spend(arr[inside], level)
            # Guard the contract against rounding at the ends of (0, 1).
            out[inside] = np.clip(spent, 0.0, level)
        if out.ndim == 0:
            return float(out)
        return out

    def __str__(self) -> str:
        return self.spec


@dataclass(frozen=True)
class OBrienFlemingSpending(SpendingFunction):
    """O'Brien–Fleming-type spending, ``2 − 2Φ(z_{1−a/2} / √t)``."""

    @property
    def spec(self) -> str:
        return "obrien-fleming"

    def _spend(self, t, level):
        # z_{1-a/2} computed from the lower tail keeps precision for tiny a.
        z = -special.ndtri(level / 2.0)
        return 2.0 * special.ndtr(-z / np.sqrt(t))


@dataclass(frozen=True)
class PocockSpending(SpendingFunction):
    """Pocock-type spending, ``a · ln(1 + (e − 1) t)``."""

    @property
    def spec(self) -> str:
        return "pocock"

    def _spend(self, t, level):
        return level * np.log1p((math.e - 1.0) * t)


@dataclass(frozen=True)
class HwangShihDeCaniSpending(SpendingFunction):
    """Hwang–Shih–DeCani spending with shape ``gamma`` (0 gives linear spending)."""

    gamma: float = -4.0

    def __post_init__(self):
        if not math.isfinite(float(self.gamma)):
            raise InvalidArgumentError(f"gamma: must be finite, got {self.gamma!r}")

    @property
    def spec(self) -> str:
        return f"hsd:{_format_number(self.gamma)}"

    def _spend(self, t, level):
        g = float(self.gamma)
        if abs(g) < 1e-12:
            return level * t
        # expm1 keeps the ratio accurate for small |gamma|.
        return level * np.expm1(-g * t) / math.expm1(-g)


@dataclass(frozen=True)
class PowerSpending(SpendingFunction):
    """Power-family spending, ``a · t^rho`` with ``rho > 0``."""

    rho: float = 1.0

    def __post_init__(self):
        r = float(self.rho)
        if not (math.isfinite(r) and r > 0):
            raise InvalidArgumentError(f"rho: must be a finite number > 0, got {self.rho!r}")

    @property
    def spec(self) -> str:
        return f"power:{_format_number(self.rho)}"

    def _spend(self, t, level):
        return level * np.power(t, float(self.rho))


def parse_spending(spec) -> SpendingFunction:
    """Build a spending function from its text form.

    Parameters
    ----------
    spec : str or SpendingFunction
        ``"obrien-fleming"``, ``"pocock"``, ``"hsd:GAMMA"`` or ``"power:RHO"``
        (case and surrounding spaces ignored). A :class:`SpendingFunction` is
        returned unchanged.

    Returns
    -------
    SpendingFunction

    Raises
    ------
    UnknownSpendingError
        If the name is not one of the known families.
    InvalidArgumentError
        If the parameter is missing, not a number, or out of range.

    Examples
    --------
    >>> parse_spending("hsd:-4").spec
    'hsd:-4'
    >>> round(parse_spending("obrien-fleming").cumulative(0.5, 0.025), 6)
    0.001525
    """
    if isinstance(spec, SpendingFunction):
        return spec
    if not isinstance(spec, str):
        raise UnknownSpendingError(
            f"spending: expected text such as 'obrien-fleming', got {spec!r}; "
            f"valid: {', '.join(VALID_SPENDING_SPECS)}"
        )
    text = spec.strip().lower()
    name, sep, param = text.partition(":")
    name = name.strip()
    if name in ("obrien-fleming", "pocock"):
        if sep:
            raise InvalidArgumentError(f"spending: {name!r} takes no parameter, got {spec!r}")
        return OBrienFlemingSpending() if name == "obrien-fleming" else PocockSpending()
    if name in ("hsd", "power"):
        symbol = "GAMMA" if name == "hsd" else "RHO"
        try:
            value = float(param)
        except ValueError:
            raise InvalidArgumentError(
                f"spending: {spec!r} needs a number after the colon, as in '{name}:{symbol}'"
            ) from None
        if not math.isfinite(value):
            raise InvalidArgumentError(f"spending: the parameter in {spec!r} must be finite")
        if name == "hsd":
            return HwangShihDeCaniSpending(value)
        if value <= 0:
            raise InvalidArgumentError(f"spending: RHO in {spec!r} must be > 0")
        return PowerSpending(value)
    raise UnknownSpendingError(
        f"spending: unknown spending function {spec!r}; valid: {', '.join(VALID_SPENDING_SPECS)}"
    )
