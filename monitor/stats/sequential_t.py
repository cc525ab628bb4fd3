"""Group-sequential boundaries for t statistics at the degrees of freedom the looks really have.

Why not the nominal-level approach
----------------------------------
The z-scale boundary of a spending function assumes a known variance. Tests
that estimate it (paired, pooled, Welch, clustered t) used to be compared
through p-values: reject at look ``k`` when the t p-value is at or below the
boundary's nominal level ``1 − Φ(z_k)``. Each look then has the right marginal
level, but the looks share one running variance estimate, and at small degrees
of freedom the joint law of the t statistics is not the joint law of the z
statistics. With looks at 3, 4, …, 15 pairs the false-alarm rate was 0.059
(Pocock) and 0.055 (O'Brien–Fleming) instead of 0.05 (100,000 simulated streams,
``tests/benchmarks/small_sample_false_alarm.py``; Jennison & Turnbull 2000,
ch. 11, describe the same kind of excess).

The exact calculation
---------------------
For normal data the sequential t statistics are ``T_k = (S_k/√t_k) / √(V_k/ν_k)``
with ``S_k`` the score (a Brownian motion observed at the information
fractions ``t_k``) and ``V_k`` the residual sum of squares over the true
variance, ``χ²`` on ``ν_k`` degrees of freedom. ``V`` is not independent of the
path of ``S``: when a look adds data, the Helmert decomposition splits the new
sum of squares into a part that is independent of everything before
(``χ²`` on ``Δν − 1`` df) and one degree of freedom tied to how far the running
mean moved, ``(t_k t_{k−1} / Δt)·(m_k − m_{k−1})²`` with ``m = S/t``. The
pair (mean, ``V``) is Markov, and the chance of crossing a boundary at look
``k`` having continued so far is a two-dimensional recursive integration
(Jennison & Turnbull 1991, "Exact calculations for sequential t, χ² and F
tests", Biometrika 78(1):133–141; Jennison & Turnbull 2000, *Group Sequential
Methods with Applications to Clinical Trials*, ch. 11 and 19).

Numerics: the mean is carried on an even grid (three nodes per standard
deviation of each increment, the normal increment applied as point values);
``V`` on nodes evenly spaced in the normal score of ``χ²_ν``, a mass between
two nodes shared so that its mean is kept ("tent" sharing, exact for chi-square
increments through the chi-square distribution function and its first
partial moment). The continuation region at a look is a cone in
(mean, ``√V``); the share of each mean cell inside it is kept. The crossing
probability at a new look is integrated exactly over the new increment (the
crossing set is an interval set of a quadratic). Two ``V`` resolutions (48 and
96 nodes) are combined by Richardson extrapolation. Against 2,000,000 simulated
paired streams (3 to 15 pairs, two-sided 0.05) the boundaries give 0.0501
(Pocock) and 0.0498 (O'Brien–Fleming), Monte Carlo s.e. 0.00015.


The boundary at look ``k`` is the t value at which the chance of crossing
there, having continued so far, equals the alpha the spending function
releases at ``t_k`` minus what earlier looks actually spent (as in the z
engine). Each look is solved when it happens, from the degrees of freedom it
has, so nothing about future looks is assumed.

What the boundary is used for
-----------------------------
The result is a :class:`~monitor.stats.boundaries.LookBoundary` like the z
engine's: ``nominal_p`` is the one-sided tail of Student t on the model's df
beyond the t boundary (the *calibrated nominal level*), and ``z`` the normal
quantile with that tail. A look crosses when its one-sided t p-value is at or
below ``nominal_p`` (:func:`monitor.stats.boundaries.nominal_decision`), which
for paired and pooled t is the same as ``T ≥`` the t boundary. The repeated
confidence interval uses :func:`t_critical`.

Where the model is approximate
------------------------------
* The model's df is the running maximum of the looks' df, rounded down to a
  whole number. Welch–Satterthwaite and Bell–McCaffrey df are fractional and
  can fall; the rounding makes the boundary a little conservative.
* A look whose df did not rise by a whole degree of freedom (more events in
  the same clusters) leaves ``V`` where it was and moves only the mean.
* Welch's and the cluster-robust statistics are only approximately t; they
  enter with their df as if they were.

Determinism and cost
--------------------
Everything is a fixed quadrature: the same fractions, df and recorded
boundaries always give the same next boundary, so ``verify`` can replay a
comparison and a restart resumes from the recorded looks
(:meth:`SequentialTBoundary.resume`). One look costs tens of milliseconds
(measured figures in ``tests/benchmarks/small_sample_false_alarm.py``).

Pure module: numpy and scipy only.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import optimize, sparse, special

from ..errors import InvalidArgumentError
from ._checks import check_alternative, open_unit
from .boundaries import NEGLIGIBLE_ALPHA, LookBoundary, SequentialBoundary, _check_fraction
from .spending import parse_spending

__all__ = [
    "SequentialTBoundary",
    "t_crossing_probabilities",
    "t_critical",
    "z_equivalent",
    "R_NODES",
]

#: Chi-square nodes of the coarse resolution; the fine one has twice as many and
#: the two are combined by Richardson extrapolation (the node error falls with
#: the square of the spacing).
R_NODES = 48
# Mean nodes per standard deviation of the increment to a look.
_NODES_PER_SD = 3.0
# S is kept within this many sds of its unconstrained spread (mass beyond ~1e-15).
_RANGE_SD = 8.0
# Reach of the increment's kernel, in its sds.
_KERNEL_SD = 6.5
# Normal score of the lowest chi-square node (its tail below is about 1e-10).
_SCORE_LOW = -6.4
# Above this df a t statistic is a z statistic to 1e-6; the model stops adding df there.
_MAX_DF = 1e6


# --------------------------------------------------------------------------- conversions


def t_critical(nominal_p, df):
    """The t value whose upper tail on ``df`` degrees of freedom is ``nominal_p``.

    ``+inf`` when the tail is 0 (a look that may spend nothing); ``df`` of
    ``inf`` gives the normal quantile.

    Examples
    --------
    >>> round(t_critical(0.025, 4), 4)
    2.7764
    >>> t_critical(0.0, 4)
    inf
    """
    p = float(nominal_p)
    if not 0.0 <= p < 1.0 or math.isnan(p):
        raise InvalidArgumentError(f"nominal_p must be in [0, 1); got {nominal_p!r}")
    if p == 0.0:
        return math.inf
    if math.isinf(df):
        return float(-special.ndtri(p))
    critical = float(-special.stdtrit(float(df), p))
    return critical if critical > 0 or p >= 0.5 else math.inf


def z_equivalent(t_value, df):
    """The z value with the same upper tail as ``t_value`` on ``df`` df (``inf`` stays ``inf``).

    Examples
    --------
    >>> round(z_equivalent(2.7764451, 4), 4)
    1.96
    """
    t = float(t_value)
    if math.isinf(t):
        return t
    if math.isinf(df):
        return t
    tail = float(special.stdtr(float(df), -t))
    if tail <= 0.0:
        return math.inf
    return float(-special.ndtri(tail))


# --------------------------------------------------------------------------- grids


def _chi2_nodes(df, count):
    """Nodes for a ``χ²_df`` variable, evenly spaced in its normal score (dense where the mass is)."""
    scores = np.linspace(_SCORE_LOW, -_SCORE_LOW, count)
    return special.chdtri(df, special.ndtr(-scores))


def _tent_split(nodes, positions):
    """Left node index and the share going to the right node for linear ("tent") sharing.

    A mass at ``p`` between nodes ``v_j`` and ``v_{j+1}`` goes to them in
    proportions that keep its mean; beyond the ends it goes to the end node.
    """
    idx = np.clip(np.searchsorted(nodes, positions, side="right") - 1, 0, nodes.size - 2)
    left = nodes[idx]
    share = np.clip((positions - left) / (nodes[idx + 1] - left), 0.0, 1.0)
    return idx, share


def _chi2_moves(sources, nodes, step):
    """``Q[m, m']``: share of a mass at ``sources[m]`` that lands on ``nodes[m']`` after adding χ²_step.

    Exact for the tent representation: needs only the χ² distribution
    function and its first partial moment ``∫₀ˣ u f_k(u) du = k F_{k+2}(x)``.
    """
    gaps = np.maximum(nodes[None, :] - sources[:, None], 0.0)
    below = special.chdtr(step, gaps)                                     # P(Y < v_j)
    moment = sources[:, None] * below + step * special.chdtr(step + 2.0, gaps)   # E[Y; Y < v_j]
    d_below = np.diff(below, axis=1)
    d_moment = np.diff(moment, axis=1)
    width = np.diff(nodes)
    to_right = (d_moment - nodes[:-1][None, :] * d_below) / width[None, :]
    to_left = d_below - to_right
    moves = np.zeros((sources.size, nodes.size))
    moves[:, 1:] += to_right
    moves[:, :-1] += to_left
    moves[:, 0] += below[:, 0]
    moves[:, -1] += 1.0 - below[:, -1]
    return moves


def _interval_mass(lo1, hi1, lo2, hi2, sd):
    m = special.ndtr(hi1 / sd) - special.ndtr(lo1 / sd)
    second = lo2 < hi2
    if second.any():
        m = m + np.where(second, special.ndtr(np.where(second, hi2, 0.0) / sd)
                         - special.ndtr(np.where(second, lo2, 0.0) / sd), 0.0)
    return np.maximum(m, 0.0)


def _coupled_at_least(x, v, dt, t, t_prev, df, b):
    """P(T ≥ b) over the increment ``a ~ N(0, Δt)`` from score ``x`` and sum of squares ``v``.

    ``S = x + a`` and ``V = v + β (a/Δt − x/t_prev)²`` (``β = t_prev Δt / t``;
    ``β = 0`` at the first look), ``T = (S/√t)/√(V/ν)``, so ``|T| ≥ |b|`` is
    ``S² ≥ κ V`` with ``κ = b² t/ν``: a quadratic in ``a`` whose value at
    ``a = −x`` is never positive.
    """
    sd = math.sqrt(dt)
    if math.isinf(b):
        return np.zeros_like(x) if b > 0 else np.ones_like(x)
    kappa = b * b * t / df
    if t_prev > 0:
        beta = t_prev * dt / t
        centre = x / t_prev
    else:
        beta = 0.0
        centre = np.zeros_like(x)
    A = 1.0 - kappa * beta / (dt * dt)
    B = 2.0 * x + 2.0 * kappa * beta * centre / dt
    C = x * x - kappa * v - kappa * beta * centre * centre
    edge = -x
    inf = np.full(x.shape, np.inf)
    if abs(A) < 1e-12:
        A = 1e-12 if A >= 0 else -1e-12
    disc = B * B - 4.0 * A * C
    has = disc >= 0
    root = np.sqrt(np.maximum(disc, 0.0))
    r1 = (-B - root) / (2.0 * A)
    r2 = (-B + root) / (2.0 * A)
    lo_r, hi_r = np.minimum(r1, r2), np.maximum(r1, r2)
    if b >= 0:
        if A > 0:          # q ≥ 0 outside the roots, which straddle −x
            return _interval_mass(np.maximum(hi_r, edge), inf, inf, inf, sd)
        above = has & (lo_r >= edge)   # q ≥ 0 between the roots, all on one side of −x
        return np.where(above, _interval_mass(np.where(above, lo_r, 0.0), np.where(above, hi_r, 0.0),
                                               inf, inf, sd), 0.0)
    if A > 0:              # S ≥ 0, or S < 0 inside the roots
        return _interval_mass(np.minimum(lo_r, edge), inf, inf, inf, sd)
    below = has & (hi_r <= edge)
    return np.where(below, 1.0 - _interval_mass(np.where(below, lo_r, 0.0), np.where(below, hi_r, 0.0),
                                                 inf, inf, sd), 1.0)


class _Resolution:
    """The (mean, sum of squares) law on one set of chi-square nodes.

    After a look: ``weights[m, j]`` is the mass of the continuing paths at
    mean node ``j`` (``m = S/t`` in units where the variance is 1) and scaled
    residual sum of squares ``V = v_m`` (nodes for ``χ²_ν``).
    """

    def __init__(self, cells):
        self.cells = cells
        self.nodes_v = None
        self.weights = np.ones((1, 1))

    def prepare(self, started, df, fresh, coupled):
        nodes = _chi2_nodes(df, self.cells)
        if not started:
            sources, masses = np.zeros(1), self.weights
        else:
            sources, masses = self.nodes_v, self.weights
        if fresh > 0:
            masses = _chi2_moves(sources, nodes, fresh).T @ masses
        elif sources.size != nodes.size or not np.array_equal(sources, nodes):
            masses = _tent_matrix(nodes, sources) @ masses
        return _Prepared(self, nodes, masses, coupled)


def _shift_rows(nodes, gain, block):
    """Rows of masses on ``nodes`` moved up by ``gain`` and shared back onto the nodes."""
    idx, share = _tent_split(nodes, nodes + gain)
    # The shifted positions rise with the node, so equal indices sit together.
    uniq, starts = np.unique(idx, return_index=True)
    out = np.zeros_like(block)
    out[uniq] += np.add.reduceat(block * (1.0 - share)[:, None], starts, axis=0)
    out[uniq + 1] += np.add.reduceat(block * share[:, None], starts, axis=0)
    return out


def _tent_matrix(nodes, positions):
    """Sparse matrix sharing masses at ``positions`` onto ``nodes`` (rows: nodes)."""
    idx, share = _tent_split(nodes, positions)
    count = positions.size
    return sparse.csr_matrix((np.concatenate([1.0 - share, share]),
                              (np.concatenate([idx, idx + 1]), np.concatenate([np.arange(count)] * 2))),
                             shape=(nodes.size, count))


class _Prepared:
    def __init__(self, resolution, nodes, masses, coupled):
        self.resolution = resolution
        self.nodes = nodes
        self.masses = masses
        self.coupled = coupled


class _ExactPath:
    """Two resolutions of the (mean, sum of squares) law advanced together (Richardson)."""

    def __init__(self, nodes=None, per_sd=None):
        nodes = R_NODES if nodes is None else int(nodes)
        self.per_sd = _NODES_PER_SD if per_sd is None else float(per_sd)
        self.res = (_Resolution(nodes), _Resolution(2 * nodes))
        self.fraction = 0.0
        self.df = 0.0
        self.started = False
        self.h = None          # spacing of the mean nodes
        self.first = 0         # mean node j is (first + j)·h
        self.count = 1

    @property
    def means(self):
        return (self.first + np.arange(self.count)) * self.h

    def prepare(self, fraction, df):
        dt = fraction - self.fraction
        step_df = df - self.df
        if not self.started:
            coupled, fresh = False, df          # the first look: V ~ χ²_ν, independent of the mean
        elif step_df >= 1.0:
            coupled, fresh = True, step_df - 1.0
        else:
            coupled, fresh = False, step_df
        sd_mean = math.sqrt(dt) / fraction
        if self.h is None:
            self.h = sd_mean / self.per_sd
        while self.h > sd_mean / (self.per_sd - 1.0):
            # Halve the spacing: the old nodes are the even nodes of the new grid.
            self.h /= 2.0
            self.first *= 2
            for r in self.res:
                spread = np.zeros((r.weights.shape[0], 2 * r.weights.shape[1] - 1))
                spread[:, ::2] = r.weights
                r.weights = spread
            self.count = 2 * self.count - 1
        prepared = tuple(r.prepare(self.started, df, fresh, coupled) for r in self.res)
        return _ExactStep(self, prepared, fraction, df, dt, coupled)

    def advance(self, step, lower, upper):
        h, t, t_prev, dt, df = self.h, step.fraction, self.fraction, step.dt, step.df
        sd_mean = math.sqrt(dt) / t
        mu = self.means
        centre = mu * (t_prev / t)                      # expected new mean from each node
        reach = _KERNEL_SD * sd_mean
        lo_d = np.floor((centre - reach) / h).astype(np.int64) - (self.first + np.arange(self.count))
        hi_d = np.ceil((centre + reach) / h).astype(np.int64) - (self.first + np.arange(self.count))
        d_min, d_max = int(lo_d.min()), int(hi_d.max())
        new_first = self.first + d_min
        new_count = self.count + d_max - d_min
        new_means = (new_first + np.arange(new_count)) * h
        # Kernel weights K[i, d]: point values of the normal law of the new mean, normalised per node.
        offsets = np.arange(d_min, d_max + 1)
        targets = (self.first + np.arange(self.count))[:, None] + offsets[None, :]
        z = (targets * h - centre[:, None]) / sd_mean
        kernel = np.where(np.abs(z) <= _KERNEL_SD + 1.0, np.exp(-0.5 * z * z), 0.0)
        kernel /= kernel.sum(axis=1, keepdims=True)
        results = []
        for prep in step.prepared:
            nodes_v = prep.nodes
            masses = prep.masses
            out = np.zeros((nodes_v.size, new_count))
            if prep.coupled:
                # The between-looks part of the sum of squares depends only on the change
                # of the mean: (t t_prev / Δt)·(Δmean)² (Helmert decomposition).
                factor = t * t_prev / dt
                for k, d in enumerate(offsets):
                    column = kernel[:, k]
                    rows = np.flatnonzero(column > 0)
                    if rows.size == 0:
                        continue
                    a, b = int(rows[0]), int(rows[-1]) + 1
                    block = masses[:, a:b] * column[a:b][None, :]
                    gain = factor * (d * h) ** 2
                    if gain > 0:
                        block = _shift_rows(nodes_v, gain, block)
                    start = a + d - d_min
                    out[:, start:start + (b - a)] += block
            else:
                band = sparse.csr_matrix(
                    (kernel.ravel(), (np.repeat(np.arange(self.count), offsets.size),
                                      (np.arange(self.count)[:, None] + offsets[None, :] - d_min).ravel())),
                    shape=(self.count, new_count))
                out = np.asarray((band.T @ masses.T).T)
            # Keep what continues: the share of each mean cell inside (lower, upper)·√(v/(ν t)).
            scale = np.sqrt(nodes_v / (df * t))
            cap = _RANGE_SD / math.sqrt(t)
            hi = np.minimum(upper * scale, cap) if math.isfinite(upper) else np.full(scale.size, cap)
            lo = np.maximum(lower * scale, -cap) if math.isfinite(lower) else np.full(scale.size, -cap)
            left = new_means - 0.5 * h
            share = np.clip((np.minimum(hi[:, None], left[None, :] + h) - np.maximum(lo[:, None], left[None, :]))
                            / h, 0.0, 1.0)
            results.append((nodes_v, out * share))
        used = np.flatnonzero((results[0][1].sum(axis=0) > 0) | (results[1][1].sum(axis=0) > 0))
        if used.size == 0:
            used = np.array([0])
        a, b = int(used[0]), int(used[-1]) + 1
        for r, (nodes_v, w) in zip(self.res, results):
            r.nodes_v = nodes_v
            r.weights = w[:, a:b]
        self.first = new_first + a
        self.count = b - a
        self.fraction = t
        self.df = df
        self.started = True


class _ExactStep:
    """Crossing probabilities at a new look as functions of the bound (Richardson-combined)."""

    def __init__(self, path, prepared, fraction, df, dt, coupled):
        self.path = path
        self.prepared = prepared
        self.fraction = fraction
        self.df = df
        self.dt = dt
        self.sd = math.sqrt(dt)
        self.coupled = coupled
        self.x = path.means * path.fraction              # scores S at the previous look

    def _one(self, prep, b, side):
        """P(continue so far, side·T ≥ b) on one resolution."""
        x = side * self.x[None, :]
        if math.isinf(b):
            return float(prep.masses.sum()) if b < 0 else 0.0
        if prep.coupled:
            if b > 0:
                # T ≥ b needs S ≥ √(κ v) at least: out of reach more than _KERNEL_SD sds away.
                reach = np.sqrt(b * b * self.fraction / self.df * prep.nodes)[:, None] <= \
                    x + _KERNEL_SD * self.sd
                rows, cols = np.nonzero(reach & (prep.masses > 0))
            else:
                rows, cols = np.nonzero(prep.masses > 0)
            probs = _coupled_at_least(x[0, cols], prep.nodes[rows], self.dt, self.fraction,
                                      self.path.fraction, self.df, b)
            return float(np.sum(prep.masses[rows, cols] * probs))
        scale = np.sqrt(self.fraction * prep.nodes / self.df)[:, None]
        probs = special.ndtr((x - b * scale) / self.sd)
        return float(np.sum(prep.masses * probs))

    def _combined(self, b, side):
        coarse = self._one(self.prepared[0], b, side)
        fine = self._one(self.prepared[1], b, side)
        return (4.0 * fine - coarse) / 3.0

    def upper(self, b):
        """P(continue so far, T ≥ b)."""
        return self._combined(b, 1.0)

    def lower(self, b):
        """P(continue so far, T ≤ b) (the mirror image: T ≤ b ⟺ −T ≥ −b)."""
        return self._combined(-b, -1.0)


def _check_df(df, previous):
    """The model's degrees of freedom: the running maximum, rounded down to a whole number.

    A variance estimate never loses information, so the model never lets its
    df fall (Welch's df can); rounding down (Welch–Satterthwaite and
    Bell–McCaffrey df are fractional) makes the boundary slightly
    conservative and lets each look add whole degrees of freedom.
    """
    try:
        value = float(df)
    except (TypeError, ValueError):
        raise InvalidArgumentError(f"df must be a number of degrees of freedom; got {df!r}") from None
    if math.isnan(value) or value < 1:
        raise InvalidArgumentError(f"df must be at least 1; got {df!r}")
    whole = float(math.floor(min(value, _MAX_DF)))
    return whole if previous is None else max(whole, previous)


# --------------------------------------------------------------------------- public classes


class SequentialTBoundary:
    """Alpha-spending boundaries for t statistics, one look at a time.

    Parameters
    ----------
    alpha : float
        Overall false-alarm rate in (0, 1) (both sides for two-sided).
    spending : SpendingFunction or str
        One-sided spending function or its spec.
    alternative : {"two-sided", "greater", "less"}
    futility : FutilitySpec, optional
        Non-binding futility bounds. They are computed by the z engine from the
        z equivalents of the t boundaries (futility is non-binding: it changes
        the power, never the false-alarm rate).

    Notes
    -----
    :meth:`add_look` takes the look's degrees of freedom as well as its
    fraction and returns a :class:`~monitor.stats.boundaries.LookBoundary`
    whose ``nominal_p`` is the calibrated nominal level (the Student t tail at
    the look's df beyond the t boundary) and whose ``z`` is the normal
    quantile with that tail. The t boundary itself is in :attr:`t_boundaries`.

    Examples
    --------
    Paired looks at 3, 4, …, 8 pairs (df 2…7), Pocock spending, two-sided 0.05:

    >>> b = SequentialTBoundary(0.05, "pocock", "two-sided")
    >>> looks = [b.add_look(n / 8, n - 1) for n in range(3, 9)]
    >>> round(b.t_boundaries[0], 2), round(b.t_boundaries[-1], 2)
    (6.22, 3.4)
    >>> round(b.alpha_used, 4)
    0.05
    """

    def __init__(self, alpha, spending, alternative, *, futility=None):
        self.alpha = open_unit(alpha, "alpha")
        self.spending = parse_spending(spending)
        self.alternative = check_alternative(alternative)
        self._two_sided = self.alternative == "two-sided"
        self._level = self.alpha / 2.0 if self._two_sided else self.alpha
        # The z engine keeps the futility bounds and the bookkeeping of LookBoundary.
        self._z = SequentialBoundary(self.alpha, self.spending, self.alternative, futility=futility)
        self.futility = futility
        self._path = _ExactPath()
        self._t: list[float] = []
        self._df: list[float] = []
        self._model_df: float | None = None
        self._alpha_used = 0.0

    # -- views ------------------------------------------------------------------

    @property
    def looks(self):
        return self._z.looks

    @property
    def fractions(self):
        return self._z.fractions

    @property
    def complete(self) -> bool:
        return self._z.complete

    @property
    def futility_direction(self):
        return self._z.futility_direction

    @property
    def alpha_used(self) -> float:
        """Chance under no difference of crossing an efficacy bound so far (the t model)."""
        return self._alpha_used

    @property
    def t_boundaries(self) -> tuple:
        """Efficacy boundaries on the t scale (magnitudes), one per look."""
        return tuple(self._t)

    @property
    def dfs(self) -> tuple:
        """Degrees of freedom given at each look."""
        return tuple(self._df)

    # -- looks ------------------------------------------------------------------

    def add_look(self, fraction, df) -> LookBoundary:
        """Boundary at the next look, from its information fraction and its degrees of freedom.

        Parameters
        ----------
        fraction : float
            Information fraction (``>= 1`` makes it the final look).
        df : float
            Degrees of freedom of the look's t statistic (``inf`` for a z statistic).

        Returns
        -------
        LookBoundary
        """
        return self._take(fraction, df, None, None)

    @classmethod
    def resume(cls, alpha, spending, alternative, fractions, dfs, upper_z, futility_z=None, futility=None):
        """Rebuild from recorded looks (fractions, df, boundaries on the z scale as recorded).

        The recorded boundary of each look is used as it is: its ``z`` gives the
        nominal level ``1 − Φ(z)`` and, with the look's df, the t boundary.

        Examples
        --------
        >>> live = SequentialTBoundary(0.05, "obrien-fleming", "two-sided")
        >>> first = [live.add_look(t, df).z for t, df in ((0.3, 4), (0.6, 9))]
        >>> again = SequentialTBoundary.resume(0.05, "obrien-fleming", "two-sided", [0.3, 0.6], [4, 9], first)
        >>> abs(again.add_look(1.0, 14).z - live.add_look(1.0, 14).z) < 1e-9
        True
        """
        boundary = cls(alpha, spending, alternative, futility=futility)
        fractions, dfs, upper_z = list(fractions), list(dfs), list(upper_z)
        if not len(fractions) == len(dfs) == len(upper_z):
            raise InvalidArgumentError(
                f"fractions, dfs and upper_z must have one value per look; got {len(fractions)}, "
                f"{len(dfs)} and {len(upper_z)}")
        if futility is not None:
            if futility_z is None or len(list(futility_z)) != len(fractions):
                raise InvalidArgumentError("futility_z: one recorded value per look is required with futility")
            futility_z = list(futility_z)
        for k, (t, df, z) in enumerate(zip(fractions, dfs, upper_z)):
            try:
                z = float(z)
            except (TypeError, ValueError):
                raise InvalidArgumentError(f"upper_z: recorded boundary must be a number, got {z!r}") from None
            if math.isnan(z):
                raise InvalidArgumentError(f"upper_z: recorded boundary must not be nan (look {k + 1})")
            f = None if futility is None else futility_z[k]
            boundary._take(t, df, z, f)
        return boundary

    def _take(self, fraction, df, z_recorded, f_recorded) -> LookBoundary:
        if self.complete:
            raise InvalidArgumentError(
                f"fraction: the final look has been taken; no look at {fraction!r} is possible")
        previous = self._z.looks[-1].fraction if self._z.looks else None
        t = _check_fraction(fraction, previous)
        model_df = _check_df(df, self._model_df)
        look_df = float(df)
        final = t >= 1.0
        sides = 2.0 if self._two_sided else 1.0
        allowed = sides * float(self.spending.cumulative(min(t, 1.0), self._level))
        if final:
            allowed = self.alpha
        step = self._path.prepare(t, model_df)

        def spent(c):
            up = step.upper(c)
            return up + (step.lower(-c) if self._two_sided else 0.0)

        if z_recorded is None:
            amount = allowed - self._alpha_used
            if amount <= NEGLIGIBLE_ALPHA:
                c = math.inf
            else:
                guess = t_critical(min(amount / sides, 0.49), model_df)
                if self._t and math.isfinite(self._t[-1]):
                    guess = self._t[-1]
                c = _solve_boundary(spent, amount, guess)
            # The look is recorded as a z value: take the t bound back from it so that a
            # resumed boundary (which only has the record) continues from the very same value.
            z = z_equivalent(c, model_df)
        else:
            z = z_recorded
        # A recorded z is the nominal level; with the model's df it gives the t boundary.
        c = t_critical(_tail(z), model_df) if z < math.inf else math.inf
        self._alpha_used += spent(c) if math.isfinite(c) else 0.0
        lower = -c if self._two_sided else -math.inf
        self._path.advance(step, lower, c)
        self._model_df = model_df
        self._t.append(float(c))
        self._df.append(look_df)
        look = self._z._take(t, z, f_recorded)
        return look


def _solve_boundary(spent, amount, guess):
    """The t bound ``c >= 0`` with ``spent(c) = amount`` (``spent`` falls as ``c`` rises)."""
    if spent(0.0) <= amount:
        return 0.0
    low, high = max(guess / 1.3, 0.0), guess * 1.3 + 1e-3
    while spent(high) > amount:
        low, high = high, high * 2.0
        if high > 1e7:
            return math.inf
    while low > 0.0 and spent(low) < amount:
        high, low = low, low / 2.0 if low > 1e-3 else 0.0
    return float(optimize.brentq(lambda c: spent(c) - amount, low, high, xtol=1e-9, rtol=1e-10))


def _tail(z):
    return float(special.ndtr(-z))


def t_crossing_probabilities(fractions, dfs, upper_t, lower_t=None, *, nodes=None, per_sd=None):
    """Chance of first crossing each t bound at each look, under no difference.

    ``T_k = Z_k / R_k`` with ``Z`` the sequential z statistics and ``R_k`` the
    standard-deviation ratio on ``dfs[k]`` degrees of freedom (nested
    chi-square increments; see the module notes). A path stops at the first
    look where ``T_k ≥ upper_t[k]`` or ``T_k ≤ lower_t[k]``. To evaluate
    probabilities under a true difference, shift the bounds (the pivot
    ``T_k(δ) = T_k(δ0) − (δ − δ0)/SE_k``).

    Parameters
    ----------
    fractions : sequence of float
        Strictly increasing information fractions.
    dfs : sequence of float
        Degrees of freedom at each look (the running maximum is used).
    upper_t, lower_t : sequence of float
        Bounds on the t scale (``±inf`` for none).
    nodes : int, optional
        Chi-square nodes of the coarse resolution (default ``R_NODES``); fewer
        are quicker and less exact (24 keeps probabilities within a few per
        cent, enough for the adjusted inference's quantiles).
    per_sd : float, optional
        Mean nodes per standard deviation of each increment (default 3; at
        least 2).

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        Per-look probabilities of leaving through the upper and the lower bound.

    Examples
    --------
    One look at 4 df: the two tails of Student t.

    >>> up, low = t_crossing_probabilities([1.0], [4], [2.776445], [-2.776445])
    >>> round(float(up[0]), 4), round(float(low[0]), 4)
    (0.025, 0.025)
    """
    ts = np.asarray(fractions, dtype=float).ravel()
    upper = np.asarray(upper_t, dtype=float).ravel()
    lower = np.full(ts.size, -np.inf) if lower_t is None else np.asarray(lower_t, dtype=float).ravel()
    dfv = list(dfs)
    if not (upper.size == lower.size == ts.size == len(dfv)):
        raise InvalidArgumentError(
            f"fractions, dfs, upper_t and lower_t need one value per look; got {ts.size}, {len(dfv)}, "
            f"{upper.size} and {lower.size}")
    if np.isnan(upper).any() or np.isnan(lower).any():
        raise InvalidArgumentError("upper_t/lower_t: bounds must not be nan")
    previous = None
    model = None
    path = _ExactPath(nodes, per_sd)
    up = np.zeros(ts.size)
    low = np.zeros(ts.size)
    for k, t in enumerate(ts):
        previous = _check_fraction(t, previous)
        model = _check_df(dfv[k], model)
        lo_k, up_k = float(lower[k]), float(upper[k])
        if lo_k > up_k:
            raise InvalidArgumentError(f"lower_t must not exceed upper_t at look {k + 1}; got {lo_k!r} > {up_k!r}")
        step = path.prepare(float(t), model)
        up[k] = step.upper(up_k)
        low[k] = step.lower(lo_k)
        path.advance(step, lo_k, up_k)
    return up, low
