"""Mergeable per-group summaries built from shifted sums.

A group's values are kept as ``n``, ``Σ(x − c)`` and ``Σ(x − c)²`` for a
constant ``c`` fixed per comparison and chosen near the data. The textbook
``Σx² − (Σx)²/n`` cancels catastrophically when the mean is large against the
spread (timestamps, counters, values like 1e9 + noise); shifting by ``c`` keeps
the digits. Summaries merge exactly, so per-bucket partial aggregates returned
by a database can be added up in any order.

Pure module: numpy only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import InvalidArgumentError

__all__ = ["MomentSummary"]


@dataclass(frozen=True)
class MomentSummary:
    """Count and shifted first and second sums of one group's values.

    Attributes
    ----------
    n : int
        Number of values.
    shift : float
        The constant ``c`` subtracted before summing.
    sum_dev : float
        ``Σ(x − c)``.
    sum_dev2 : float
        ``Σ(x − c)²``.

    Examples
    --------
    >>> s = MomentSummary.from_values([1e9 + 1, 1e9 + 2, 1e9 + 3], shift=1e9)
    >>> s.mean, s.variance
    (1000000002.0, 1.0)
    """

    n: int = 0
    shift: float = 0.0
    sum_dev: float = 0.0
    sum_dev2: float = 0.0

    @classmethod
    def from_values(cls, values, shift: float | None = None) -> "MomentSummary":
        """Summarise an array of finite values (``shift`` defaults to the first value)."""
        x = np.asarray(values, dtype=float).ravel()
        if not np.all(np.isfinite(x)):
            raise InvalidArgumentError("values must all be finite")
        if shift is None:
            shift = float(x[0]) if x.size else 0.0
        d = x - shift
        return cls(int(x.size), float(shift), float(d.sum()), float(np.dot(d, d)))

    def reshift(self, shift: float) -> "MomentSummary":
        """The same values summarised about another constant."""
        delta = self.shift - shift
        return MomentSummary(
            self.n,
            float(shift),
            self.sum_dev + self.n * delta,
            self.sum_dev2 + 2.0 * delta * self.sum_dev + self.n * delta * delta,
        )

    def merge(self, other: "MomentSummary") -> "MomentSummary":
        """Summary of the union of both sets of values (kept about ``self.shift``)."""
        if other.shift != self.shift:
            other = other.reshift(self.shift)
        return MomentSummary(
            self.n + other.n,
            self.shift,
            self.sum_dev + other.sum_dev,
            self.sum_dev2 + other.sum_dev2,
        )

    __add__ = merge

    @property
    def mean(self) -> float:
        """Arithmetic mean (nan when empty)."""
        if self.n == 0:
            return math.nan
        return self.shift + self.sum_dev / self.n

    @property
    def sum_squares(self) -> float:
        """``Σ(x − mean)²``, never negative."""
        if self.n == 0:
            return math.nan
        return max(self.sum_dev2 - self.sum_dev * self.sum_dev / self.n, 0.0)

    @property
    def variance(self) -> float:
        """Sample variance with ``n − 1`` in the denominator (nan below two values)."""
        if self.n < 2:
            return math.nan
        return self.sum_squares / (self.n - 1)

    @property
    def sd(self) -> float:
        """Sample standard deviation (nan below two values)."""
        return math.sqrt(self.variance) if self.n >= 2 else math.nan

    @property
    def total(self) -> float:
        """``Σx`` (for 0/1 values: the number of successes)."""
        return self.sum_dev + self.n * self.shift

    def to_dict(self) -> dict:
        return {"n": self.n, "shift": self.shift, "sum_dev": self.sum_dev, "sum_dev2": self.sum_dev2}

    @classmethod
    def from_dict(cls, d: dict) -> "MomentSummary":
        return cls(int(d["n"]), float(d["shift"]), float(d["sum_dev"]), float(d["sum_dev2"]))
