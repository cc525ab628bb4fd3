"""Local calendar buckets: which hour, day, week or shift a moment belongs to, and when it closes;
and the grid interval schedules tick on.

Shared meaning for the source reader, the look and verify: a slot (epoch seconds) is filed
under the local bucket holding it, so every layer groups events by the same calendar. The
scheduler ticks on the grid and the status readers predict the next tick by the same rule.
"""

from __future__ import annotations

import math
from datetime import date, datetime, time as clock_time, timedelta

from .errors import InvalidArgumentError
from .vocabulary import UTC

__all__ = ["BUCKET_KINDS", "bucket_key", "bucket_keys", "bucket_end", "GRID_EPOCH", "SPREAD_FROM", "grid_tick",
           "next_grid_tick", "schedule_places"]

BUCKET_KINDS = ("hour", "day", "week", "shift")


def _local(slot: int, zone) -> datetime:
    return datetime.fromtimestamp(slot, tz=UTC).astimezone(zone)


def _midnight(day: date, zone) -> datetime:
    return datetime.combine(day, clock_time(0, 0), tzinfo=zone)


def _shift_times(shift_starts):
    return sorted(clock_time(int(s[:2]), int(s[3:5])) for s in shift_starts)


def _unknown_kind(kind) -> InvalidArgumentError:
    return InvalidArgumentError(f"bucket kind must be hour, day, week or shift; got {kind!r}")


def bucket_key(slot: int, kind: str, zone, shift_starts=()) -> str:
    """The local calendar bucket holding a slot: ``hour``, ``day``, ``week`` or ``shift``.

    Days and weeks are keyed by their local date (weeks by their Monday); hours
    and shifts by their local start with its UTC offset (unambiguous across a
    daylight-saving change).
    """
    return _bucket(_local(slot, zone), kind, zone, shift_starts)


def bucket_keys(slot: int, kinds, zone, shift_starts=()) -> tuple:
    """``bucket_key`` of one slot for several kinds, converting the slot to local time once."""
    local = _local(slot, zone)
    return tuple(_bucket(local, kind, zone, shift_starts) for kind in kinds)


def _bucket(local: datetime, kind: str, zone, shift_starts) -> str:
    if kind == "day":
        return local.date().isoformat()
    if kind == "week":
        return (local.date() - timedelta(days=local.weekday())).isoformat()
    if kind == "hour":
        return local.replace(minute=0, second=0, microsecond=0).isoformat(timespec="minutes")
    if kind == "shift":
        starts = _shift_times(shift_starts)
        today = local.date()
        begun = [s for s in starts if s <= local.time()]
        if begun:
            start = datetime.combine(today, begun[-1], tzinfo=zone)
        else:
            start = datetime.combine(today - timedelta(days=1), starts[-1], tzinfo=zone)
        return start.isoformat(timespec="minutes")
    raise _unknown_kind(kind)


def bucket_end(key: str, kind: str, zone, shift_starts=()) -> datetime:
    """When the bucket keyed ``key`` closes (aware UTC)."""
    if kind == "day":
        end = _midnight(date.fromisoformat(key) + timedelta(days=1), zone)
    elif kind == "week":
        end = _midnight(date.fromisoformat(key) + timedelta(days=7), zone)
    elif kind == "hour":
        end = datetime.fromisoformat(key) + timedelta(hours=1)
    elif kind == "shift":
        start = datetime.fromisoformat(key).astimezone(zone)
        starts = _shift_times(shift_starts)
        later = [s for s in starts if s > start.time()]
        if later:
            end = datetime.combine(start.date(), later[0], tzinfo=zone)
        else:
            end = datetime.combine(start.date() + timedelta(days=1), starts[0], tzinfo=zone)
    else:
        raise _unknown_kind(kind)
    return end.astimezone(UTC)


# --------------------------------------------------------------------------- the schedule grid

# Interval ticks fall on a grid counted from this moment, plus the comparison's place (below), so
# every worker ticks at the same times whenever it started.
GRID_EPOCH = datetime(2000, 1, 1, tzinfo=UTC)
# From this many interval comparisons on one schedule, their places are spread evenly over the
# interval, so a large configuration does not fall due in one second.
SPREAD_FROM = 20


def grid_tick(every: float, offset: float, moment: datetime) -> datetime:
    """The latest tick of an interval grid (``every`` seconds, shifted by ``offset``) at or before ``moment``."""
    origin = GRID_EPOCH + timedelta(seconds=offset)
    count = math.floor((moment - origin).total_seconds() / every)
    return origin + timedelta(seconds=count * every)


def next_grid_tick(every: float, offset: float, moment: datetime) -> datetime:
    """The first tick of the grid at or after ``moment``."""
    tick = grid_tick(every, offset, moment)
    return tick if tick >= moment else tick + timedelta(seconds=every)


def schedule_places(schedules) -> dict:
    """Each interval comparison's place on its schedule's grid, seconds: 0 unless many share it.

    ``schedules`` maps comparison names to interval seconds (a cron expression, a string, has
    no place). Comparisons on the same interval are ranked by name; with at least
    :data:`SPREAD_FROM` of them the k-th of n ticks ``k · interval / n`` after the grid's tick.
    """
    by_interval = {}
    for name, schedule in schedules.items():
        if isinstance(schedule, (int, float)):
            by_interval.setdefault(float(schedule), []).append(name)
    places = {}
    for interval, names in by_interval.items():
        names.sort()
        spread = len(names) >= SPREAD_FROM
        for rank, name in enumerate(names):
            places[name] = rank * interval / len(names) if spread else 0.0
    return places
