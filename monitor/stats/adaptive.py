"""Changing a running plan without spending alpha twice: the conditional error principle.

A comparison is planned for a maximum information (events per group, or
``1/variance`` of the estimate). When, part way, the lead wants a larger or a
smaller plan — because the event rate fell, or because the interim estimate
looks promising — the later boundaries must be re-derived, and the decision to
change may itself depend on the data seen so far. Re-using the old boundaries
on the new fractions, or restarting with a fresh alpha, then no longer keeps
the false-alarm rate.

Method
------
**Conditional error principle** (Proschan & Hunsberger 1995; Müller & Schäfer
2001). At the look where the plan changes (information ``t_k`` on the scale of
the original plan, z statistic ``z_k``, score ``s_k = z_k √t_k``), the
*conditional error* of the running design is the chance, under no difference,
that its remaining looks would still reject, given ``S(t_k) = s_k``:

    A(s_k) = P_0( reject at a later look of the running design | S(t_k) = s_k ).

Averaged over the paths that have not stopped, ``A`` is exactly the alpha the
design has not spent yet. The new remainder is a group-sequential test of the
data *after* ``t_k`` only (the increment ``S(t) − s_k``, which under no
difference is independent of everything seen so far), with Lan–DeMets spending
of the same family over the new remainder's own fraction
``u = (t − t_k)/(t_new − t_k)``, at level ``A``. Conditionally on the past it
rejects with probability exactly ``A``, so whatever rule chose ``t_new`` from
the data, the overall false-alarm rate stays the design's alpha. The weighted
statistic of Cui, Hung & Wang (1999) is the special case that keeps the old
boundaries and rescales the increment; the conditional error form lets the new
remainder have any length.

Each side is handled separately: for a two-sided design ``A`` splits into the
chance of a later rejection with group 1 above group 2 (``error_upper``) and
below (``error_lower``), and the remainder spends each on its own side (a
one-sided spending function at each level, the same per-side convention as the
original design). The remainder's boundaries are on the increment's z,
``Z_inc = (S(t) − s_k)/√(t − t_k)``; a look translates them back to the z of
all data so far, ``Z ≥ (c √(t − t_k) + s_k)/√t``, so they can be compared with
the look's own statistic (they are then no longer symmetric).

*The running design's remaining looks.* Boundaries under Lan–DeMets spending
depend on when the looks fall, so the conditional error needs a stated
continuation of the running design; a caller gives its remaining fractions
(``reference``; by default the single final look). Any continuation fixed
without looking at the outcome keeps the argument exact; the wiring uses the
plan's remaining equally spaced looks.

Plans may change more than once: every change opens a new *segment* whose
running design is the previous segment's remainder, and the conditional error
is taken of that.

Non-binding futility belongs to the original plan (it was built from the
planned difference); segments opened by a change carry none, and the
conditional error ignores futility (non-binding: ignoring it can only keep the
error rate).

Conditional power (Jennison & Turnbull 2000, ch. 10) uses the same machinery
with a drift: the chance of a later rejection given ``S(t_k) = s_k`` when the
true difference gives drift ``θ`` (expected z at the original plan's end).

Numerics
--------
:func:`conditional_crossing` evaluates the chance of first crossing an upper
or lower bound at later looks, for many starting scores at once, by backward
recursion: at each look the probability of crossing at that or a later look is
a normal tail plus an integral over the continuation region, done with
composite Gauss–Legendre panels (as in :mod:`monitor.stats.boundaries`).

Pure module: numpy and scipy only.
"""

from __future__ import annotations

import copy
import math
from dataclasses import asdict, dataclass

import numpy as np
from scipy import special

from ._checks import check_alternative, finite, open_unit
from .boundaries import MIN_INCREMENT, NEGLIGIBLE_ALPHA, LookBoundary, SequentialBoundary
from ..errors import InvalidArgumentError, ReplanRefusedError
from .spending import parse_spending

__all__ = [
    "METHOD",
    "AdaptiveLook",
    "Replan",
    "ConditionalPower",
    "AdaptiveBoundary",
    "conditional_crossing",
    "remaining_planned_fractions",
]

#: How later boundaries are derived after a change of plan, as recorded and shown.
METHOD = ("conditional error principle (Proschan & Hunsberger 1995; Müller & Schäfer 2001), "
          "Lan-DeMets spending of the conditional error over the new remainder")

_PANELS_PER_SD = 0.4
_PANEL_POINTS = 8
_RANGE_SD = 8.5
# Working-array size of one block of the kernel (rows × nodes), and a bound on a grid's panels
# (the same safety net as the boundary engine's).
_CHUNK_ENTRIES = 1_000_000
_MAX_PANELS = 40000
_GAUSS_NODES, _GAUSS_WEIGHTS = np.polynomial.legendre.leggauss(_PANEL_POINTS)
_SQRT_2PI = math.sqrt(2.0 * math.pi)


# --------------------------------------------------------------------------
# Conditional crossing probabilities (backward recursion)
# --------------------------------------------------------------------------


def _panel_rule(lo, hi, width):
    panels = min(max(1, math.ceil((hi - lo) / width)), _MAX_PANELS)
    size = (hi - lo) / panels
    starts = lo + size * np.arange(panels)
    nodes = (starts[:, None] + 0.5 * size * (_GAUSS_NODES + 1.0)).ravel()
    weights = np.tile(_GAUSS_WEIGHTS * 0.5 * size, panels)
    return nodes, weights


def _scores(z, t):
    return z * math.sqrt(t) if math.isfinite(z) else z


def conditional_crossing(start_fraction, start_scores, fractions, upper_z, lower_z=None, drift=0.0):
    """Chance of first crossing each bound at a later look, from given scores.

    The score ``S(t) = Z(t) √t`` is a Brownian motion with drift ``drift`` per
    unit of ``t``. Starting from ``S(start_fraction) = s`` (no stop there), a
    path stops at the first later look ``j`` where ``Z_j ≥ upper_z[j]`` or
    ``Z_j ≤ lower_z[j]``.

    Parameters
    ----------
    start_fraction : float
        Where the paths stand (``>= 0``).
    start_scores : float or array_like
        Scores ``S`` at ``start_fraction``; one result per score.
    fractions : sequence of float
        Later looks, strictly increasing, the first above ``start_fraction``.
    upper_z, lower_z : sequence of float
        Bounds on the z scale of all data (``±inf`` for none); ``lower_z``
        None for none at all.
    drift : float
        Expected z at fraction 1 (0 under no difference).

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        For each starting score, the chance of leaving through an upper bound
        and through a lower bound at some later look.

    Examples
    --------
    One final look at fraction 1 from ``S(0.5) = 1``: ``1 − Φ((1.96 − 1)/√0.5)``.

    >>> up, low = conditional_crossing(0.5, [1.0], [1.0], [1.96])
    >>> round(float(up[0]), 6)
    0.087288
    """
    t0 = finite(start_fraction, "start_fraction")
    if t0 < 0:
        raise InvalidArgumentError(f"start_fraction must be >= 0; got {start_fraction!r}")
    s0 = np.atleast_1d(np.asarray(start_scores, dtype=float)).ravel()
    if not np.all(np.isfinite(s0)):
        raise InvalidArgumentError(f"start_scores must be finite; got {start_scores!r}")
    ts = np.asarray(fractions, dtype=float).ravel()
    upper = np.asarray(upper_z, dtype=float).ravel()
    lower = np.full(ts.size, -np.inf) if lower_z is None else np.asarray(lower_z, dtype=float).ravel()
    if ts.size == 0:
        raise InvalidArgumentError("fractions must hold at least one later look")
    if upper.size != ts.size or lower.size != ts.size:
        raise InvalidArgumentError(
            f"upper_z/lower_z: need one value per fraction ({ts.size}), got {upper.size} and {lower.size}")
    steps = np.diff(np.concatenate([[t0], ts]))
    if not np.all(np.isfinite(ts)) or np.any(steps < MIN_INCREMENT):
        raise InvalidArgumentError(
            f"fractions must increase from start_fraction {t0!r} by at least {MIN_INCREMENT:g}; got {fractions!r}")
    if np.isnan(upper).any() or np.isnan(lower).any() or np.any(lower > upper):
        raise InvalidArgumentError(f"bounds must be numbers with lower_z <= upper_z; got {upper_z!r}, {lower_z!r}")
    drift = finite(drift, "drift")

    up_s = np.array([_scores(z, t) for z, t in zip(upper, ts)])
    low_s = np.array([_scores(z, t) for z, t in zip(lower, ts)])
    sds = np.sqrt(steps)
    # Forward: the continuation region kept at each look (the reachable range, cut to the bounds).
    lo, hi = float(s0.min()), float(s0.max())
    grids = []
    for j in range(ts.size - 1):
        shift = drift * steps[j]
        lo = max(low_s[j], lo + shift - _RANGE_SD * sds[j])
        hi = min(up_s[j], hi + shift + _RANGE_SD * sds[j])
        if not lo < hi:
            grids.append((np.empty(0), np.empty(0)))
            lo, hi = 0.0, 0.0
            # Nothing continues past this look: later looks cannot be reached.
            grids.extend((np.empty(0), np.empty(0)) for _ in range(j + 1, ts.size - 1))
            break
        width = min(sds[j], sds[j + 1]) / _PANELS_PER_SD
        grids.append(_panel_rule(lo, hi, width))

    def tails(x, j):
        """Chance of crossing at look j itself, from score x at the previous look."""
        mean = x + drift * steps[j]
        up = special.ndtr((mean - up_s[j]) / sds[j]) if math.isfinite(up_s[j]) else np.zeros_like(x)
        low = special.ndtr((low_s[j] - mean) / sds[j]) if math.isfinite(low_s[j]) else np.zeros_like(x)
        return up, low

    def step_back(x, j, later_up, later_low):
        """At look j, from x at the previous look: cross now, or continue and cross later."""
        up, low = tails(x, j)
        if later_up is None:
            return up, low
        nodes, weights = grids[j]
        if nodes.size == 0:
            return up, low
        out_up, out_low = up.copy(), low.copy()
        wu, wl = weights * later_up, weights * later_low
        rows = max(1, _CHUNK_ENTRIES // nodes.size)
        for start in range(0, x.size, rows):
            block = x[start:start + rows]
            k = (nodes[None, :] - block[:, None] - drift * steps[j]) / sds[j]
            np.square(k, out=k)
            k *= -0.5
            np.exp(k, out=k)
            k /= sds[j] * _SQRT_2PI
            out_up[start:start + rows] += k @ wu
            out_low[start:start + rows] += k @ wl
        return out_up, out_low

    later_up = later_low = None
    for j in range(ts.size - 1, 0, -1):
        # Values at look j's predecessor's nodes, i.e. at the grid of look j - 1.
        nodes = grids[j - 1][0]
        later_up, later_low = step_back(nodes, j, later_up, later_low)
    up, low = step_back(s0, 0, later_up, later_low)
    return np.clip(up, 0.0, 1.0), np.clip(low, 0.0, 1.0)


def remaining_planned_fractions(fraction, looks):
    """The plan's equally spaced look fractions ``j/looks`` still ahead of ``fraction``, ending at 1.

    Examples
    --------
    >>> remaining_planned_fractions(0.45, 5)
    [0.6, 0.8, 1.0]
    """
    fraction = finite(fraction, "fraction")
    if isinstance(looks, bool) or not isinstance(looks, int) or looks < 1:
        raise InvalidArgumentError(f"looks must be a whole number of at least 1; got {looks!r}")
    ahead = [j / looks for j in range(1, looks + 1) if j / looks >= fraction + MIN_INCREMENT]
    return ahead or [max(1.0, fraction + MIN_INCREMENT)]


# --------------------------------------------------------------------------
# Results
# --------------------------------------------------------------------------


def _finite_or_none(x):
    return float(x) if x is not None and math.isfinite(x) else None


@dataclass(frozen=True)
class AdaptiveLook:
    """The boundary at one look of a comparison whose plan may have changed.

    Attributes
    ----------
    look : int
        Testing-look number, from 1, counted over the whole comparison.
    segment : int
        0 under the original plan; ``k`` after the ``k``-th change of plan.
    fraction : float
        Information on the scale of the original plan (1 = the original plan's end).
    segment_fraction : float
        Fraction of the current segment's remainder (the information fraction
        its spending function sees); equal to ``fraction`` in segment 0.
    upper_z, lower_z : float
        Bounds for the z of all data so far: a difference with group 1 above
        group 2 is found when ``Z ≥ upper_z``, below when ``Z ≤ lower_z``
        (``+inf``/``−inf`` where a side cannot reject).
    nominal_p_upper, nominal_p_lower : float
        One-sided nominal levels ``1 − Φ(upper_z)`` and ``Φ(lower_z)``, for
        t statistics compared through p-values.
    bound_upper, bound_lower : float
        The segment's own boundaries (what is recorded and resumed): in
        segment 0 both are the engine's ``z`` (one of them ``inf`` for a
        one-sided design); later, the bounds on the increment's z in the
        direction of group 1 above and below group 2.
    futility_z : float or None
        Non-binding futility bound (segment 0 with futility only).
    cumulative_level : float
        Segment 0: the alpha spent so far (the design's ``cumulative_alpha``);
        later segments: the share of their conditional error spent so far.
    final : bool
        True on the look that ends the current plan.
    """

    look: int
    segment: int
    fraction: float
    segment_fraction: float
    upper_z: float
    lower_z: float
    nominal_p_upper: float
    nominal_p_lower: float
    bound_upper: float
    bound_lower: float
    futility_z: float | None
    cumulative_level: float
    final: bool

    def decision(self, z) -> int:
        """+1 when ``z`` crosses the upper bound, −1 the lower one, 0 neither."""
        z = float(z)
        if z >= self.upper_z:
            return 1
        if z <= self.lower_z:
            return -1
        return 0

    def decision_from_p(self, p_upper, p_lower) -> int:
        """As :meth:`decision` for a statistic compared through its one-sided p-values."""
        if float(p_upper) <= self.nominal_p_upper:
            return 1
        if float(p_lower) <= self.nominal_p_lower:
            return -1
        return 0

    def to_dict(self) -> dict:
        """JSON-ready; infinite bounds become None."""
        return {k: (_finite_or_none(v) if isinstance(v, float) else v) for k, v in asdict(self).items()}


@dataclass(frozen=True)
class Replan:
    """A change of plan: where it was anchored and the alpha its remainder may spend.

    Attributes
    ----------
    segment : int
        The segment it opens (1 for the first change).
    after_look : int
        Testing looks taken when the plan changed (0 before any).
    anchor_fraction, anchor_z : float
        Information (original-plan scale) and z of all data at the anchor look.
    end_fraction : float
        The new plan's end, on the original plan's scale (2 = twice the original).
    error_upper, error_lower : float
        Conditional error the remainder may spend: the chance, under no
        difference, that the running design would still have found group 1
        above (below) group 2.
    reference : tuple of float
        Fractions (of the running segment) of the continuation used for the conditional error.
    spending : str
        Spending family of the remainder.
    method : str
        :data:`METHOD`.
    """

    segment: int
    after_look: int
    anchor_fraction: float
    anchor_z: float
    end_fraction: float
    error_upper: float
    error_lower: float
    reference: tuple
    spending: str
    method: str = METHOD

    @property
    def conditional_error(self) -> float:
        """Both sides together."""
        return self.error_upper + self.error_lower

    def to_dict(self) -> dict:
        out = asdict(self)
        out["reference"] = list(self.reference)
        return out

    @classmethod
    def from_dict(cls, data) -> "Replan":
        """Rebuild from :meth:`to_dict` output (recorded values used as they are)."""
        try:
            return cls(
                segment=int(data["segment"]), after_look=int(data["after_look"]),
                anchor_fraction=float(data["anchor_fraction"]), anchor_z=float(data["anchor_z"]),
                end_fraction=float(data["end_fraction"]), error_upper=float(data["error_upper"]),
                error_lower=float(data["error_lower"]), reference=tuple(float(x) for x in data["reference"]),
                spending=str(data["spending"]), method=str(data.get("method", METHOD)))
        except (KeyError, TypeError, ValueError) as exc:
            raise InvalidArgumentError(f"replan record is incomplete or malformed ({exc}); got {data!r}") from None


@dataclass(frozen=True)
class ConditionalPower:
    """Chance of a later rejection given the data so far, under an assumed drift.

    ``upper``/``lower``: rejection with group 1 above/below group 2 by the end
    of the current plan (its remaining reference looks). ``drift`` is the
    expected z at the original plan's end under the assumed difference.
    """

    upper: float
    lower: float
    drift: float

    @property
    def in_direction(self) -> float:
        """The chance of finding the difference in the direction of the assumed drift."""
        return self.upper if self.drift >= 0 else self.lower


# --------------------------------------------------------------------------
# Segments
# --------------------------------------------------------------------------


class _Segment:
    """The running design between two changes of plan, in its own coordinates.

    Coordinates: fraction ``u = (t − anchor)/(end − anchor)`` and score
    ``B(u) = d·(S(t) − s_anchor)/√(end − anchor)`` with ``d`` the orientation
    of the upper side (−1 only for a one-sided ``"less"`` design), so that
    ``B`` is a standard Brownian motion under no difference and the upper
    side is the tested one.
    """

    def __init__(self, number, anchor, anchor_score, end, orientation, upper, lower, final_at=1.0):
        self.number = number
        self.anchor = anchor
        self.anchor_score = anchor_score     # S at the anchor, natural orientation
        self.end = end
        self.d = orientation
        self.upper = upper                   # engine for the upper (tested) side, or None
        self.lower = lower                   # engine for the lower side, or None (same object for segment 0 two-sided)
        self.length = end - anchor

    def u(self, t):
        return (t - self.anchor) / self.length

    def score(self, t, z):
        s = z * math.sqrt(t)
        return self.d * (s - self.anchor_score) / math.sqrt(self.length)

    def drift(self, theta):
        """Drift of B per unit u for a drift θ per unit t (natural orientation)."""
        return self.d * theta * math.sqrt(self.length)


class AdaptiveBoundary:
    """Boundaries of a comparison across changes of plan, one look at a time.

    Starts as the original design (exactly :class:`SequentialBoundary`); every
    :meth:`replan` opens a segment whose remainder spends the conditional error.

    Parameters
    ----------
    alpha, spending, alternative, futility
        The original design, as for :class:`SequentialBoundary`.

    Examples
    --------
    >>> b = AdaptiveBoundary(0.05, "obrien-fleming", "two-sided")
    >>> first = b.add_look(0.3)
    >>> change = b.replan(1.2, end_fraction=2.0)   # twice the plan, at z = 1.2
    >>> round(change.error_upper, 4), round(change.error_lower, 5)
    (0.0597, 0.00088)
    >>> later = b.add_look(1.0)
    >>> later.segment, round(later.segment_fraction, 4), round(later.upper_z, 3), round(later.lower_z, 3)
    (1, 0.4118, 2.927, -3.571)
    """

    def __init__(self, alpha, spending, alternative, *, futility=None):
        self.alpha = open_unit(alpha, "alpha")
        self.spending = parse_spending(spending)
        self.alternative = check_alternative(alternative)
        self._original = SequentialBoundary(self.alpha, self.spending, self.alternative, futility=futility)
        self.futility = futility
        d = -1 if self.alternative == "less" else 1
        two = self.alternative == "two-sided"
        segment = _Segment(0, 0.0, 0.0, 1.0, d, self._original, self._original if two else None)
        self._segments = [segment]
        self._replans: list[Replan] = []
        self._looks: list[AdaptiveLook] = []
        self._last_z: float | None = None

    # -- views ------------------------------------------------------------

    @property
    def looks(self) -> tuple:
        return tuple(self._looks)

    @property
    def replans(self) -> tuple:
        return tuple(self._replans)

    @property
    def segment(self) -> int:
        return self._segments[-1].number

    @property
    def end_fraction(self) -> float:
        """The current plan's end on the original plan's scale."""
        return self._segments[-1].end

    @property
    def complete(self) -> bool:
        return bool(self._looks) and self._looks[-1].final

    @property
    def last_fraction(self) -> float:
        return self._looks[-1].fraction if self._looks else 0.0

    @property
    def original(self) -> SequentialBoundary:
        """The original design's engine (its looks are those of segment 0)."""
        return self._original

    def can_look(self, fraction) -> bool:
        """Whether ``fraction`` is far enough past the last look to test (in the segment's own scale too)."""
        t = float(fraction)
        seg = self._segments[-1]
        last_t = self.last_fraction
        last_u = seg.u(last_t) if self._looks and self._looks[-1].segment == seg.number else 0.0
        return t - last_t >= MIN_INCREMENT and seg.u(t) - last_u >= MIN_INCREMENT

    # -- looks ------------------------------------------------------------

    def add_look(self, fraction) -> AdaptiveLook:
        """The boundary at the next look, at ``fraction`` of the original plan's information."""
        if self.complete:
            raise InvalidArgumentError(
                f"fraction: the current plan's final look has been taken; no look at {fraction!r} is possible")
        t = finite(fraction, "fraction")
        if not self.can_look(t):
            raise InvalidArgumentError(
                f"fraction: {fraction!r} is too little past the previous look ({self.last_fraction!r}) "
                f"for a testing look")
        return self._take(t, None, None, None)

    def _take(self, t, bound_upper, bound_lower, futility_z):
        seg = self._segments[-1]
        number = len(self._looks) + 1
        if seg.number == 0:
            if bound_upper is None:
                lb = self._original.add_look(t)
            else:
                z = bound_upper if math.isfinite(bound_upper) or self._two_sided or self.alternative != "less" \
                    else bound_lower
                lb = _resume_one(self._original, t, z, futility_z)
            return self._record_original(number, t, lb)
        u = seg.u(t)
        c_up = self._side(seg.upper, u, bound_upper)
        c_low = self._side(seg.lower, u, bound_lower)
        # Back to the z of all data: d·Z ≥ (c √(t − a) + d·s_a)/√t on the tested side.
        root_inc, root_t = math.sqrt(t - seg.anchor), math.sqrt(t)
        frame_s = seg.d * seg.anchor_score
        hi_frame = (c_up * root_inc + frame_s) / root_t if math.isfinite(c_up) else math.inf
        lo_frame = (-c_low * root_inc + frame_s) / root_t if math.isfinite(c_low) else -math.inf
        upper_z, lower_z = (hi_frame, lo_frame) if seg.d == 1 else (-lo_frame, -hi_frame)
        engines = [e for e in (seg.upper, seg.lower) if e is not None]
        final = u >= 1.0
        level = sum(e.looks[-1].cumulative_alpha for e in engines)
        bu, bl = (c_up, c_low) if seg.d == 1 else (c_low, c_up)
        look = AdaptiveLook(
            look=number, segment=seg.number, fraction=t, segment_fraction=u, upper_z=upper_z,
            lower_z=lower_z, nominal_p_upper=float(special.ndtr(-upper_z)),
            nominal_p_lower=float(special.ndtr(lower_z)), bound_upper=bu, bound_lower=bl,
            futility_z=None, cumulative_level=level, final=final)
        self._looks.append(look)
        return look

    @property
    def _two_sided(self):
        return self.alternative == "two-sided"

    @staticmethod
    def _side(engine, u, recorded):
        if engine is None:
            return math.inf
        if recorded is None:
            return engine.add_look(u).z
        return _resume_one(engine, u, recorded, None).z

    def _record_original(self, number, t, lb: LookBoundary):
        z = lb.z
        if self.alternative == "greater":
            upper_z, lower_z, bu, bl = z, -math.inf, z, math.inf
        elif self.alternative == "less":
            upper_z, lower_z, bu, bl = math.inf, -z, math.inf, z
        else:
            upper_z, lower_z, bu, bl = z, -z, z, z
        look = AdaptiveLook(
            look=number, segment=0, fraction=t, segment_fraction=t, upper_z=upper_z, lower_z=lower_z,
            nominal_p_upper=float(special.ndtr(-upper_z)), nominal_p_lower=float(special.ndtr(lower_z)),
            bound_upper=bu, bound_lower=bl, futility_z=lb.futility_z, cumulative_level=lb.cumulative_alpha,
            final=lb.final)
        self._looks.append(look)
        return look

    # -- conditional probabilities ------------------------------------------

    def _reference_bounds(self, seg, reference):
        """Segment boundaries (frame, increment-z scale) at the reference continuation."""
        upper = copy.deepcopy(seg.upper) if seg.upper is not None else None
        lower = upper if (seg.lower is seg.upper and seg.lower is not None) else (
            copy.deepcopy(seg.lower) if seg.lower is not None else None)
        ups, lows = [], []
        for u in reference:
            if seg.number == 0:
                # The original engine is the tested side (frame), and both sides when two-sided.
                z = upper.add_look(u).z
                ups.append(z)
                lows.append(z if lower is upper else math.inf)
            else:
                ups.append(upper.add_look(u).z if upper is not None else math.inf)
                lows.append(lower.add_look(u).z if lower is not None else math.inf)
        return np.array(ups), np.array(lows)

    def _position(self, z):
        """(segment, u, B) at the last look with the given z of all data."""
        seg = self._segments[-1]
        if not self._looks or self._looks[-1].segment != seg.number:
            return seg, 0.0, 0.0
        t = self._looks[-1].fraction
        z = finite(z, "z")
        return seg, seg.u(t), seg.score(t, z)

    def _check_reference(self, u_now, reference):
        if reference is None:
            reference = [1.0]
        ref = [finite(x, "reference") for x in reference]
        if not ref or any(b <= a for a, b in zip(ref, ref[1:])) or ref[0] < u_now + MIN_INCREMENT or ref[-1] < 1.0:
            raise InvalidArgumentError(
                f"reference: the running segment's remaining look fractions must rise from above "
                f"{u_now!r} and end at 1 or later; got {reference!r}")
        return ref

    def _conditional(self, z, drift, reference):
        (out,), ref = self._conditionals(z, [drift], reference)
        return out, ref

    def _conditionals(self, z, drifts, reference):
        """(upper, lower) per drift, with the reference boundaries computed once."""
        seg, u_now, b_now = self._position(z)
        ref = self._check_reference(u_now, reference)
        ups, lows = self._reference_bounds(seg, ref)
        out = []
        for drift in drifts:
            up, low = conditional_crossing(u_now, [b_now], ref, ups, -lows, drift=seg.drift(drift))
            up, low = float(up[0]), float(low[0])
            # Back to the natural orientation: the frame's upper side is group 1 below group 2 for "less".
            out.append((up, low) if seg.d == 1 else (low, up))
        return out, ref

    def conditional_error(self, z, reference=None):
        """``(upper, lower)`` chance under no difference of a later rejection, given ``z`` at the last look.

        ``reference`` lists the running segment's remaining look fractions
        (default: its final look only).
        """
        self._check_open(z)
        (up, low), _ = self._conditional(z, 0.0, reference)
        return up, low

    def conditional_power(self, z, drift, reference=None) -> ConditionalPower:
        """Chance of a later rejection given ``z`` at the last look, when the drift is ``drift``.

        ``drift`` is the expected z at the *original* plan's end (the design's
        θ; ``z/√fraction`` for the current estimate). Non-binding futility is
        ignored. Jennison & Turnbull (2000), ch. 10.
        """
        drift = finite(drift, "drift")
        if self.complete:
            return ConditionalPower(0.0, 0.0, drift)
        (up, low), _ = self._conditional(z, drift, reference)
        return ConditionalPower(up, low, drift)

    def conditional_powers(self, z, drifts, reference=None) -> list:
        """:meth:`conditional_power` for several drifts at once (the reference boundaries are
        computed once)."""
        drifts = [finite(d, "drift") for d in drifts]
        if self.complete:
            return [ConditionalPower(0.0, 0.0, d) for d in drifts]
        pairs, _ = self._conditionals(z, drifts, reference)
        return [ConditionalPower(up, low, d) for (up, low), d in zip(pairs, drifts)]

    def _check_open(self, z):
        if self.complete:
            raise ReplanRefusedError(
                "the current plan's final look has been taken: no alpha is left to spend")
        if self._looks and z is not None:
            last = self._looks[-1]
            if last.decision(finite(z, "z")) != 0:
                raise ReplanRefusedError(
                    f"z = {float(z):.4g} crossed the boundary at the last look: the comparison has stopped")

    # -- changes of plan ----------------------------------------------------

    def replan(self, z, end_fraction, *, reference=None, spending=None) -> Replan:
        """Change the plan's end at the last look, keeping the overall false-alarm rate.

        Parameters
        ----------
        z : float
            The z of all data at the last testing look (ignored before any look).
        end_fraction : float
            The new plan's end on the original plan's scale (new maximum
            information over the original maximum: 2 doubles the plan).
        reference : sequence of float, optional
            Remaining look fractions of the running segment for the conditional
            error (default: its final look only).
        spending : str, optional
            Spending family of the new remainder (default: the design's).

        Returns
        -------
        Replan

        Raises
        ------
        ReplanRefusedError
            The plan has ended, the last look crossed, the new end is not past
            the information already seen, or no alpha is left to spend.
        """
        self._check_open(z)
        end = finite(end_fraction, "end_fraction")
        here = self.last_fraction
        if end < here + MIN_INCREMENT:
            raise ReplanRefusedError(
                f"the new plan ends at {end:.4g} of the original plan's information, but {here:.4g} "
                f"has been seen already: nothing would be left to test; stop or keep the plan instead")
        seg, u_now, _ = self._position(0.0 if not self._looks else z)
        (up, low), ref = self._conditional(0.0 if not self._looks else z, 0.0, reference)
        if not self._looks and seg.number == 0:
            # Before any look the whole alpha is left, split as the design splits it.
            up, low = ((self.alpha / 2, self.alpha / 2) if self._two_sided else
                       (self.alpha, 0.0) if self.alternative == "greater" else (0.0, self.alpha))
        if up + low <= NEGLIGIBLE_ALPHA:
            raise ReplanRefusedError(
                f"the new plan would need alpha to spend, but the chance left of a rejection under no "
                f"difference given the data so far is {up + low:.2g} (alpha {self.alpha:g} is used up by "
                f"the looks taken): a change of plan cannot find a difference any more")
        spec = parse_spending(spending if spending is not None else self.spending)
        anchor_z = 0.0 if not self._looks else float(z)
        change = Replan(
            segment=seg.number + 1, after_look=len(self._looks), anchor_fraction=here, anchor_z=anchor_z,
            end_fraction=end, error_upper=float(up), error_lower=float(low), reference=tuple(ref),
            spending=spec.spec)
        self._open(change)
        return change

    def _open(self, change: Replan):
        d = -1 if self.alternative == "less" else 1
        frame_up, frame_low = (change.error_upper, change.error_lower) if d == 1 else (
            change.error_lower, change.error_upper)
        upper = SequentialBoundary(frame_up, change.spending, "greater") if frame_up > NEGLIGIBLE_ALPHA else None
        lower = SequentialBoundary(frame_low, change.spending, "greater") if frame_low > NEGLIGIBLE_ALPHA else None
        anchor_score = change.anchor_z * math.sqrt(change.anchor_fraction)
        seg = _Segment(change.segment, change.anchor_fraction, anchor_score, change.end_fraction, d, upper, lower)
        self._segments.append(seg)
        self._replans.append(change)

    # -- replay -------------------------------------------------------------

    @classmethod
    def resume(cls, alpha, spending, alternative, looks, replans=(), *, futility=None):
        """Rebuild from recorded looks and changes of plan, using the recorded values as they are.

        Parameters
        ----------
        looks : sequence of mapping
            Per testing look, in order: ``fraction`` (original-plan scale),
            ``bound_upper`` and ``bound_lower`` (as in :class:`AdaptiveLook`;
            in segment 0 the engine's ``z`` may be given as ``z`` instead),
            and ``futility_z`` when the design has futility.
        replans : sequence of Replan or mapping
            The changes of plan, each applied after its ``after_look`` looks.

        Examples
        --------
        >>> live = AdaptiveBoundary(0.05, "pocock", "greater")
        >>> a = live.add_look(0.4)
        >>> r = live.replan(0.9, 1.6)
        >>> b = live.add_look(0.9)
        >>> again = AdaptiveBoundary.resume(0.05, "pocock", "greater",
        ...                                 [a.to_dict(), b.to_dict()], [r.to_dict()])
        >>> abs(again.add_look(1.6).upper_z - live.add_look(1.6).upper_z) < 1e-9
        True
        """
        boundary = cls(alpha, spending, alternative, futility=futility)
        changes = sorted((c if isinstance(c, Replan) else Replan.from_dict(c) for c in replans),
                         key=lambda c: c.segment)
        pending = list(changes)
        for index, record in enumerate(list(looks)):
            while pending and pending[0].after_look == index:
                boundary._open(pending.pop(0))
            try:
                t = float(record["fraction"])
                if "bound_upper" in record or "bound_lower" in record:
                    bu, bl = record.get("bound_upper"), record.get("bound_lower")
                else:
                    bu = bl = record["z"]
            except (KeyError, TypeError, ValueError):
                raise InvalidArgumentError(f"looks[{index}]: needs a fraction and its bounds; got {record!r}") from None
            bu = math.inf if bu is None else float(bu)
            bl = math.inf if bl is None else float(bl)
            f = record.get("futility_z") if futility is not None else None
            if futility is not None:
                f = -math.inf if f is None else float(f)
            seg = boundary._segments[-1]
            if seg.d == -1 and seg.number > 0:
                bu, bl = bl, bu  # frame: the tested side is the lower one in natural terms
            boundary._take(t, bu, bl, f)
        for change in pending:
            if change.after_look != len(boundary._looks):
                raise InvalidArgumentError(
                    f"replan of segment {change.segment}: recorded after look {change.after_look}, "
                    f"but {len(boundary._looks)} looks were given")
            boundary._open(change)
        return boundary


def _resume_one(engine: SequentialBoundary, t, z, futility_z) -> LookBoundary:
    """Append one recorded look to an engine (the value is used as it is)."""
    return engine.add_recorded_look(t, z, futility_z)
