"""The scale a look's decision is taken on, so the picture and the words match the state.

z-based looks (``df`` is None: known-sigma z, two proportions) compare the statistic with the
boundary ``b`` directly. t-based looks (pooled, Welch, paired, clustered: ``df`` recorded) use
the nominal-level rule: the look crosses when its one-sided p-value is at or below
``Φ(−b)``. That is the same as comparing the *z-equivalent* of t, the normal value with the
same one-sided p-value, ``z = Φ⁻¹(1 − P[T ≥ t])``, with ``b`` — so the dashboard draws and
words the z-equivalent against the same boundary, and a t of 461 on 1 df (one-sided
p ≈ 0.0007, z ≈ 3.2) is never shown above a boundary of 5.4 it did not cross.

numpy/scipy only: pure, and unit-tested against ``scipy.stats``.
"""

from __future__ import annotations

import math

from scipy import special

__all__ = ["Z_CAP", "z_equivalent", "one_sided_p", "nominal_level", "crossed"]

# ndtri of the smallest positive double is about -37.5: beyond it a tail underflows to 0.
Z_CAP = 37.5


def one_sided_p(statistic, df):
    """``P[T ≥ |t|]`` (``P[Z ≥ |z|]`` when ``df`` is None): the tail in the statistic's own direction."""
    if statistic is None or not math.isfinite(statistic):
        return None
    if df is None:
        return float(special.ndtr(-abs(statistic)))
    return float(special.stdtr(df, -abs(statistic)))


def z_equivalent(statistic, df):
    """The statistic on the decision's scale: itself for a z look, ``Φ⁻¹(1 − P[T ≥ t])`` for a t look.

    Keeps the sign of ``statistic``; None when there is no statistic. Computed from the tail in
    the statistic's own direction, so a large t keeps its digits (no ``1 − tiny``); capped at
    ``±Z_CAP`` where that tail underflows.

    >>> round(z_equivalent(5.924, 4), 3), z_equivalent(-1.5, None)
    (2.873, -1.5)
    """
    if statistic is None or not math.isfinite(statistic):
        return None
    if df is None:
        return float(statistic)
    tail = special.stdtr(df, -abs(statistic))
    z = Z_CAP if tail <= 0 else min(Z_CAP, float(-special.ndtri(tail)))
    return math.copysign(z, statistic)


def nominal_level(boundary_z):
    """The one-sided p-value at or below which a t look crosses: ``Φ(−b)``."""
    if boundary_z is None or not math.isfinite(boundary_z):
        return None
    return float(special.ndtr(-boundary_z))


def crossed(z, boundary_z, alternative):
    """Whether ``z`` (on the decision's scale) is at or beyond the efficacy boundary."""
    if z is None or boundary_z is None:
        return False
    if alternative == "greater":
        return z >= boundary_z
    if alternative == "less":
        return z <= -boundary_z
    return abs(z) >= boundary_z
