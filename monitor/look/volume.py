"""The volume check of a look: is each group's event count today what its weekday usually brings?

Pure (no SQL, no clock): from the running ``hour`` cells (each group's events per local hour)
it compares today's complete hours with the same weekday over the previous weeks
(``check_own_volume``) and group 1's share of today's events with the expected share
(``check_share``), both anytime-valid at ``monitor.stats.volume.DEFAULT_LEVEL`` per group and
day. The verdict is recorded with the look and never changes its decision.

* **History.** Same weekdays 1 to 8 weeks back that hold events of either group; fewer than two
  such weeks and the volume is "not yet measurable".
* **Expected share.** The configured ``expected_share``; else group 1's share over the history;
  else 0.5. The allowance for the daily swing of the share is learned from the history's daily
  shares (2.326 of their standard deviations, at least 0.02), 0.1 without history.
"""

from __future__ import annotations

import math
from datetime import timedelta

import numpy as np

from ..stats.volume import check_own_volume, check_share, usual_volume
from .cells import of_kind

__all__ = ["VOLUME_STATES", "assess_volume"]

VOLUME_STATES = ("ok", "warning", "not_yet_measurable")
_HISTORY_WEEKS = 8
_MIN_WEEKS = 2


def _hourly(cells) -> dict:
    """{(group_index, local date text): 24 hourly counts} from the hour cells."""
    out: dict = {}
    for gi, key, v in of_kind(cells, "hour"):
        day, hour = key[:10], int(key[11:13])
        out.setdefault((gi, day), np.zeros(24))[hour] += v[0]
    return out


def assess_volume(design, cells, cutoff, expected_share=None) -> dict:
    """The look's volume verdict as a JSON-friendly dict (``state`` one of :data:`VOLUME_STATES`)."""
    local = cutoff.astimezone(design.measure.zone)
    hours = local.hour                     # complete local hours of today
    today = local.date()
    counts = _hourly(cells)
    history = [(today - timedelta(days=7 * k)).isoformat() for k in range(1, _HISTORY_WEEKS + 1)]
    history = [d for d in history if (0, d) in counts or (1, d) in counts]
    weekday = local.strftime("%A")
    base = {"weekday": weekday, "weeks": len(history), "hours": hours, "date": today.isoformat()}
    if len(history) < _MIN_WEEKS or hours < 1:
        why = (f"{len(history)} week(s) of {weekday} history; the check needs {_MIN_WEEKS}"
               if len(history) < _MIN_WEEKS else "no complete hour today yet")
        return {"state": "not_yet_measurable", "why": why, **base}
    zero = np.zeros(24)
    groups, usual_by_group, warn = [], [], False
    for gi, name in enumerate(design.groups):
        usual = usual_volume([counts.get((gi, d), zero) for d in history])
        usual_by_group.append(usual)
        today_counts = counts.get((gi, today.isoformat()), zero)[:hours]
        verdict = check_own_volume(today_counts, usual, starts=range(hours))
        warn |= verdict.warn
        groups.append({"group": name, "events": verdict.observed, "usual": verdict.expected,
                       "share_of_usual": verdict.share_of_usual,
                       "since": None if verdict.since_slot is None else f"{verdict.since_slot:02d}:00",
                       "warn": verdict.warn})
    daily = [(counts.get((0, d), zero).sum(), counts.get((1, d), zero).sum()) for d in history]
    shares = [a / (a + b) for a, b in daily if a + b > 0]
    total1, total = sum(a for a, _ in daily), sum(a + b for a, b in daily)
    if expected_share is None:
        expected_share = total1 / total if 0 < total1 < total else 0.5
    tolerance = max(2.326 * float(np.std(shares, ddof=1)), 0.02) if len(shares) >= 2 else 0.1
    e1 = float(counts.get((0, today.isoformat()), zero)[:hours].sum())
    e2 = float(counts.get((1, today.isoformat()), zero)[:hours].sum())
    share = check_share(e1, e2, expected_share, tolerance=tolerance,
                        dispersion=max(u.dispersion for u in usual_by_group))
    warn |= share.warn
    return {"state": "warning" if warn else "ok", **base, "groups": groups,
            "share": {"share": share.share, "expected": float(expected_share), "low": share.low,
                      "high": share.high, "warn": share.warn}}
