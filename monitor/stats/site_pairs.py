"""Vectorised simulation of pairs of sites monitored daily around a change.

The situation a before/after comparison is built for: two sites (group 1 the
one that changes, group 2 the control) whose levels differ by a persistent
gap, each with its own day-to-day shocks (and optionally a shock both share),
and, from the start, a change at site 1. Per (stream, site, day) only the
sufficient statistics are drawn — the count, the sum and the within-day sum of
squares (for 0/1 outcomes the successes) — so many thousands of monitored
comparisons run in seconds.

Two monitors look once a day after the start, as the live look does with
``cluster_by = "day"``:

* **after-only**: group 1 − group 2 over the days since the start, CR1
  standard error over days, t on days − 1, information fraction = days so far
  over planned days (what a comparison with a start and no baseline reports);
* **before/after**: the difference in differences against the baseline with
  the library's default CR2 standard error over baseline and after days and
  Bell–McCaffrey degrees of freedom (and, beside it, CR1 with t on clusters −
  1), fraction from :func:`monitor.stats.before_after.information_fraction`.

Both decide by the nominal-level approach (the look's one-sided p-value
against the boundary's nominal level) from ``first_look_day`` on; earlier looks
spend nothing. The fraction counts days where the live look counts events over
planned events per day: the two differ only by the Poisson wobble of the daily
counts.

Pure module: numpy and scipy only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields

import numpy as np
from scipy import special

from ..errors import InvalidArgumentError
from ._checks import finite, open_unit, whole
from .before_after import PARAMETERS, degrees_of_freedom, information_fraction
from .boundaries import SequentialBoundary

__all__ = [
    "SitePairs",
    "MonitorOutcome",
    "draw_site_pairs",
    "daily_boundaries",
    "monitor_site_pairs",
]


@dataclass(frozen=True)
class SitePairs:
    """Drawn daily cells: arrays of shape ``(streams, 2, baseline_days + after_days)``.

    ``n`` counts, ``sums`` ``Σx`` and ``within_ss`` ``Σ(x − day mean)²`` per
    (stream, site, day); site 0 is group 1. Days ``0 … baseline_days − 1``
    are the baseline, the rest after the start.
    """

    n: np.ndarray
    sums: np.ndarray
    within_ss: np.ndarray
    baseline_days: int
    after_days: int


def draw_site_pairs(streams, *, baseline_days, after_days, events_per_day, gap, change, sd=None,
                    rate=None, day_sd=0.0, shared_day_sd=0.0, level=0.0, rng) -> SitePairs:
    """Draw daily cells of ``streams`` site pairs.

    Parameters
    ----------
    streams : int
    baseline_days, after_days : int
    events_per_day : float
        Poisson mean of each site's daily count (at least 2 events a day are kept).
    gap : float
        Site 1 − site 2 before the start (a persistent difference).
    change : float
        Added to site 1 from the start.
    sd : float, optional
        Event-level standard deviation (normal values); give ``sd`` or ``rate``.
    rate : float, optional
        Site 2's rate for 0/1 outcomes; site 1's is ``rate + gap (+ change)``,
        day shocks move both on the probability scale (clipped to [0.001, 0.999]).
    day_sd : float
        Standard deviation of each site's own day shock.
    shared_day_sd : float
        Standard deviation of a day shock both sites share.
    level : float
        Site 2's mean (values only).
    rng : numpy.random.Generator

    Examples
    --------
    >>> data = draw_site_pairs(3, baseline_days=5, after_days=4, events_per_day=50, gap=2.0,
    ...                        change=-1.0, sd=10.0, day_sd=1.0, rng=np.random.default_rng(1))
    >>> data.n.shape
    (3, 2, 9)
    """
    streams = whole(streams, "streams", 1)
    baseline_days = whole(baseline_days, "baseline_days", 2)
    after_days = whole(after_days, "after_days", 2)
    events_per_day = finite(events_per_day, "events_per_day")
    if events_per_day <= 0:
        raise InvalidArgumentError(f"events_per_day must be positive; got {events_per_day!r}")
    if (sd is None) == (rate is None):
        raise InvalidArgumentError(f"give sd or rate, not both or neither; got sd={sd!r}, rate={rate!r}")
    days = baseline_days + after_days
    shape = (streams, 2, days)
    n = np.maximum(rng.poisson(events_per_day, size=shape), 2).astype(float)
    after = (np.arange(days) >= baseline_days).astype(float)
    effect = np.zeros(shape)
    effect[:, 0, :] = finite(gap, "gap") + finite(change, "change") * after
    shocks = rng.normal(0.0, 1.0, size=shape) * finite(day_sd, "day_sd")
    shocks += rng.normal(0.0, 1.0, size=(streams, 1, days)) * finite(shared_day_sd, "shared_day_sd")
    if sd is not None:
        sd = finite(sd, "sd")
        day_mean = level + effect + shocks + rng.normal(0.0, 1.0, size=shape) * sd / np.sqrt(n)
        sums = n * day_mean
        within = sd * sd * rng.chisquare(n - 1.0)
    else:
        rate = open_unit(rate, "rate")
        prob = np.clip(rate + effect + shocks, 0.001, 0.999)
        sums = rng.binomial(n.astype(np.int64), prob).astype(float)
        within = sums - sums * sums / n
    return SitePairs(n, sums, within, baseline_days, after_days)


def daily_boundaries(fractions, alpha, spending, alternative="two-sided"):
    """Nominal one-sided levels of the efficacy boundary at successive looks (nan-free).

    Examples
    --------
    >>> p = daily_boundaries([0.25, 0.5, 0.75, 1.0], 0.05, "pocock")
    >>> bool(np.all(np.diff(p) == 0) or np.all(p > 0))
    True
    """
    boundary = SequentialBoundary(alpha, spending, alternative)
    return np.array([boundary.add_look(float(f)).nominal_p for f in fractions])


def _t_critical(nominal_p, df):
    """Upper-tail t quantile; +inf where the nominal level underflows (the look cannot stop)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        critical = -special.stdtrit(df, nominal_p)
    return np.where(critical > 0, critical, np.inf)


@dataclass(frozen=True)
class MonitorOutcome:
    """Per-stream outcomes of the daily monitors (arrays of length ``streams``).

    ``*_stop_day`` is the day after the start at which the monitor crossed its
    efficacy boundary (0: never). ``did_estimate``, ``did_standard_error``,
    ``did_df`` and ``did_z`` are the before/after look's figures at that look
    (at the plan's last day when it never crossed); ``did_z`` is the z with the
    t statistic's one-sided p-value, as the look's adjusted inference uses it.
    ``*_fixed``: one test at the plan's last day rejects at ``alpha``.
    ``did_cr1_*``: the same monitor with CR1 and t on clusters − 1.
    ``did_known_variance_stop_day``: the same looks with the true variance of
    the DiD given the counts and z against the boundary (values only, when the
    spreads are given): separates the boundary and the data from the t
    statistics' share of any excess.
    """

    after_only_stop_day: np.ndarray
    after_only_estimate: np.ndarray
    after_only_fixed: np.ndarray
    did_stop_day: np.ndarray
    did_estimate: np.ndarray
    did_standard_error: np.ndarray
    did_df: np.ndarray
    did_z: np.ndarray
    did_final_estimate: np.ndarray
    did_fixed: np.ndarray
    did_cr1_stop_day: np.ndarray
    did_cr1_fixed: np.ndarray
    baseline_gap: np.ndarray
    did_known_variance_stop_day: np.ndarray | None = None
    # Asked for with ``keep_looks``: every testing look's before/after figures, arrays of shape
    # (streams, looks) under ``estimate``, ``standard_error``, ``df``, ``statistic`` (CR2), the
    # after-only ``after_statistic``/``after_df`` and the CR1 ``cr1_statistic``/``cr1_df``, and the
    # looks' ``days`` after the start, so that a caller can decide them on other boundaries.
    did_looks: dict | None = None

    def to_dict(self) -> dict:
        return {f.name: getattr(self, f.name) for f in fields(self)}


def _cell_scores(n, sums):
    """Per-cluster residual sums, sizes and means of one group's cells: shapes (streams, days)."""
    size = n.sum(axis=1)
    mean = sums.sum(axis=1) / size
    return sums - n * mean[:, None], size, mean


def _period_parts(n1, s1, n2, s2, sign):
    """One period's contribution to the DiD's CR1 and CR2 sums and Bell–McCaffrey traces.

    ``sign`` is the contrast weight of group 1 in this period (−1 baseline, +1 after);
    group 2 gets ``−sign``. Returns a dict of per-stream arrays and the cell means.
    """
    r1, size1, m1 = _cell_scores(n1, s1)
    r2, size2, m2 = _cell_scores(n2, s2)
    cr1 = sign * (r1 / size1[:, None] - r2 / size2[:, None])
    adj1 = 1.0 / np.sqrt(1.0 - n1 / size1[:, None])
    adj2 = 1.0 / np.sqrt(1.0 - n2 / size2[:, None])
    cr2 = sign * (r1 * adj1 / size1[:, None] - r2 * adj2 / size2[:, None])
    # Bell–McCaffrey pieces (see monitor.stats.before_after._bell_mccaffrey).
    k1 = sign * adj1 / size1[:, None]
    k2 = -sign * adj2 / size2[:, None]
    u1, u2 = n1 * k1, n2 * k2
    d = n1 * k1 * k1 + n2 * k2 * k2
    uu11, uu22, uu12 = (u1 * u1).sum(1), (u2 * u2).sum(1), (u1 * u2).sum(1)
    return {
        "cr1": (cr1 * cr1).sum(1), "cr2": (cr2 * cr2).sum(1),
        "trace": d.sum(1) - uu11 / size1 - uu22 / size2,
        "d2": (d * d).sum(1) - 2.0 * ((d * u1 * u1).sum(1) / size1 + (d * u2 * u2).sum(1) / size2),
        "cross": uu11 ** 2 / size1 ** 2 + uu22 ** 2 / size2 ** 2 + 2.0 * uu12 ** 2 / (size1 * size2),
        "means": (m1, m2), "sizes": (size1, size2),
    }


def monitor_site_pairs(data: SitePairs, *, planned_after_days, first_look_day, alpha=0.05,
                       spending="obrien-fleming", baseline_days_for_plan=None, sd=None,
                       day_sd=None, keep_looks=False) -> MonitorOutcome:
    """Run the after-only and the before/after monitors day by day, two-sided.

    The before/after monitor is the library's default: CR2 with Bell–McCaffrey
    degrees of freedom (:func:`monitor.stats.before_after.difference_in_differences`);
    the same looks with CR1 and t on clusters − 1 are kept beside it. The
    after-only monitor is a day-clustered two-group comparison as configured
    today (CR1, t on days − 1).

    Parameters
    ----------
    data : SitePairs
    planned_after_days : float
        The plan's days after the start (the last look is at its ceiling and spends what is left).
    first_look_day : int
        First day after the start that may decide (the minimum of clusters).
    alpha : float
    spending : str
    baseline_days_for_plan : float, optional
        Baseline days the fraction formula uses (default: the drawn baseline).
    sd, day_sd : float, optional
        The spreads the values were drawn with: adds the known-variance monitor.
    keep_looks : bool
        Keep every testing look's statistics and df (``MonitorOutcome.did_looks``).

    Returns
    -------
    MonitorOutcome

    Examples
    --------
    >>> data = draw_site_pairs(4, baseline_days=14, after_days=12, events_per_day=80, gap=5.0,
    ...                        change=0.0, sd=20.0, day_sd=1.0, rng=np.random.default_rng(2))
    >>> out = monitor_site_pairs(data, planned_after_days=12, first_look_day=5)
    >>> out.did_stop_day.shape
    (4,)
    """
    alpha = open_unit(alpha, "alpha")
    first_look_day = whole(first_look_day, "first_look_day", 2)
    b = data.baseline_days
    last = int(math.ceil(planned_after_days - 1e-9))
    if last > data.after_days:
        raise InvalidArgumentError(
            f"planned_after_days {planned_after_days!r} goes beyond the {data.after_days} drawn days")
    if last < 2:
        raise InvalidArgumentError(f"planned_after_days must reach 2 days at least; got {planned_after_days!r}")
    first = min(first_look_day, last)
    plan_b = b if baseline_days_for_plan is None else baseline_days_for_plan
    days = np.arange(first, last + 1, dtype=float)
    # The last look (a whole day) may pass the plan: its fraction above 1 is kept, as the
    # live look keeps events over planned events, so the boundary sees the real correlations.
    did_fractions = np.atleast_1d(information_fraction(days, planned_after_days, plan_b))
    did_fractions[-1] = max(1.0, did_fractions[-1])
    did_nominal = np.full(last + 1, np.nan)
    did_nominal[first:] = daily_boundaries(did_fractions, alpha, spending)
    after_fractions = days / planned_after_days
    after_fractions[-1] = max(1.0, after_fractions[-1])
    after_nominal = np.full(last + 1, np.nan)
    after_nominal[first:] = daily_boundaries(after_fractions, alpha, spending)

    n, s = data.n, data.sums
    streams = n.shape[0]
    base = _period_parts(n[:, 0, :b], s[:, 0, :b], n[:, 1, :b], s[:, 1, :b], -1.0)
    gap_b = base["means"][0] - base["means"][1]
    total_b = base["sizes"][0] + base["sizes"][1]

    stop = {key: np.zeros(streams, dtype=int) for key in ("after_only", "did", "did_cr1", "known")}
    known = sd is not None and day_sd is not None
    if known:
        did_z_boundary = -special.ndtri(did_nominal)

        def true_variance(counts):
            # Σ_d (n_d/N)² (day_sd² + sd²/n_d) per site, summed over both sites.
            size = counts.sum(axis=2)
            w = counts / size[:, :, None]
            return np.sum(w * w * day_sd ** 2 + w * sd ** 2 / size[:, :, None], axis=(1, 2))

        base_variance = true_variance(n[:, :, :b])
    fixed = {key: np.zeros(streams, dtype=bool) for key in ("after_only", "did", "did_cr1")}
    rec = {key: np.full(streams, np.nan) for key in ("after_only_estimate", "did_estimate", "did_se",
                                                      "did_df", "did_z", "did_final")}
    kept = None
    if keep_looks:
        kept = {key: np.full((streams, last - first + 1), np.nan)
                for key in ("estimate", "standard_error", "df", "statistic", "after_statistic", "after_df",
                            "cr1_statistic", "cr1_df")}
        kept["days"] = np.arange(first, last + 1)
    for k in range(2, last + 1):
        cols = slice(b, b + k)
        after = _period_parts(n[:, 0, cols], s[:, 0, cols], n[:, 1, cols], s[:, 1, cols], 1.0)
        after_gap = after["means"][0] - after["means"][1]
        did = after_gap - gap_b
        final = k == last
        testing = k >= first
        total_a = after["sizes"][0] + after["sizes"][1]

        # After-only: CR1 over the days since the start, t on days − 1.
        g = float(k)
        t_after = after_gap / np.sqrt(g / (g - 1) * (total_a - 1) / (total_a - 2) * after["cr1"])
        if testing:
            crossed = (np.abs(t_after) >= _t_critical(after_nominal[k], g - 1)) & (stop["after_only"] == 0)
            stop["after_only"][crossed] = k
            rec["after_only_estimate"][crossed] = after_gap[crossed]
        if final:
            fixed["after_only"] = np.abs(t_after) >= _t_critical(alpha / 2, g - 1)
            open_ = stop["after_only"] == 0
            rec["after_only_estimate"][open_] = after_gap[open_]

        # Before/after: CR2 with Bell–McCaffrey df (the default), and CR1 with G − 1.
        g = float(b + k)
        total = total_b + total_a
        se = np.sqrt(base["cr2"] + after["cr2"])
        trace = base["trace"] + after["trace"]
        bm = trace * trace / (base["d2"] + after["d2"] + base["cross"] + after["cross"])
        df = degrees_of_freedom("cr2", g, bm)
        t_did = did / se
        cr1_df = degrees_of_freedom("cr1", g, bm)
        t_cr1 = did / np.sqrt(g / (g - 1) * (total - 1) / (total - PARAMETERS) * (base["cr1"] + after["cr1"]))
        if testing and kept is not None:
            for key, value in (("estimate", did), ("standard_error", se), ("df", df), ("statistic", t_did),
                               ("after_statistic", t_after), ("after_df", float(k) - 1.0),
                               ("cr1_statistic", t_cr1), ("cr1_df", cr1_df)):
                kept[key][:, k - first] = value
        if testing:
            crossed = (np.abs(t_did) >= _t_critical(did_nominal[k], df)) & (stop["did"] == 0)
            record = crossed | (final & (stop["did"] == 0))
            stop["did"][crossed] = k
            rec["did_estimate"][record] = did[record]
            rec["did_se"][record] = se[record]
            rec["did_df"][record] = df[record]
            p_upper = special.stdtr(df[record], -t_did[record])
            rec["did_z"][record] = -special.ndtri(np.clip(p_upper, 1e-300, 1 - 1e-16))
            crossed = (np.abs(t_cr1) >= _t_critical(did_nominal[k], cr1_df)) & (stop["did_cr1"] == 0)
            stop["did_cr1"][crossed] = k
            if known:
                z_known = did / np.sqrt(base_variance + true_variance(n[:, :, cols]))
                crossed = (np.abs(z_known) >= did_z_boundary[k]) & (stop["known"] == 0)
                stop["known"][crossed] = k
        if final:
            fixed["did"] = np.abs(t_did) >= _t_critical(alpha / 2, df)
            fixed["did_cr1"] = np.abs(t_cr1) >= _t_critical(alpha / 2, cr1_df)
            rec["did_final"] = did.copy()
    return MonitorOutcome(
        after_only_stop_day=stop["after_only"], after_only_estimate=rec["after_only_estimate"],
        after_only_fixed=fixed["after_only"], did_stop_day=stop["did"], did_estimate=rec["did_estimate"],
        did_standard_error=rec["did_se"], did_df=rec["did_df"], did_z=rec["did_z"],
        did_final_estimate=rec["did_final"], did_fixed=fixed["did"], did_cr1_stop_day=stop["did_cr1"],
        did_cr1_fixed=fixed["did_cr1"], baseline_gap=gap_b,
        did_known_variance_stop_day=stop["known"] if known else None, did_looks=kept)
