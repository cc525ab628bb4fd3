"""Running cells: a source batch's slot cells rolled into the stored cells, and the look's counts.

A cell is ``(n, Σ(x−shift), Σ(x−shift)²)`` keyed ``(kind, group_index, key)``: the total
(key ``""``), each local calendar day and hour, and each cluster or pair where the
comparison has them. A ratio comparison's cells carry three more sums, ``(…, Σ(d−c_d), Σ(d−c_d)²,
Σ(x−shift)(d−c_d))`` for its denominator ``d`` (``x`` is then the numerator). Merging cells
is addition, so many small looks add up to one big look.
"""

from __future__ import annotations

from dataclasses import dataclass

from ..calendar import bucket_key, bucket_keys
from ..stats.summaries import MomentSummary
from ..vocabulary import NULL_KEY

__all__ = ["RolledUp", "Counts", "roll_up", "roll_up_baseline", "merge", "summary", "of_kind", "counts",
           "BASELINE_READ"]

# Written once, with the baseline's cells, at the look that reads the baseline: tells later
# looks the baseline is frozen (even when it held no events).
BASELINE_READ = ("baseline_read", 0, "")


@dataclass(frozen=True)
class RolledUp:
    """A batch's slot cells rolled into changes of stored cells, keyed (kind, group_index, key)."""

    changes: dict
    null_key: int = 0        # events whose pair/cluster column is NULL: excluded, not rolled up
    null_key_late: int = 0   # of those, late events


def roll_up(design, batch) -> RolledUp:
    """Slot cells → changes to stored cells, by the frozen design's pairing and clustering.

    With a pair or cluster column, an event whose key is NULL belongs to no
    pair or cluster. Filing it under an empty key would invent a pair (or a
    cluster) of unrelated events, so it is left out of every cell, the total
    included (n then matches the paired or clustered statistic), and counted
    as excluded with reason ``null_key``.
    """
    zone = design.measure.zone
    pairing, clustering = design.pairing, design.clustering
    shift_starts = pairing.shift_starts if pairing is not None else ()
    changes: dict = {}
    needs_key = design.key_column is not None
    null_key = null_key_late = 0
    clustered, paired = clustering is not None, pairing is not None
    cluster_column, cluster_by = (clustering.cluster_column, clustering.cluster_by) if clustered else (None, None)
    pair_column, pair_by = (pairing.pair_column, pairing.pair_by) if paired else (None, None)
    # Each group's events per local day, and per local hour (the volume check's counts), and
    # the calendar buckets the design clusters or pairs by: every kind of one slot from one
    # conversion to local time (a first read of a big table brings tens of thousands of slots).
    kinds = ["day", "hour"]
    if clustered and not cluster_column:
        kinds.append(cluster_by)
    if paired and not pair_column:
        kinds.append(pair_by)
    memo: dict = {}
    width = 6 if design.metric == "ratio" else 3

    def add(kind, gi, key, cell):
        k = (kind, gi, key)
        entry = changes.get(k)
        if entry is None:
            entry = changes[k] = [0, 0.0, 0.0, 0.0, 0.0, 0.0][:width]
        entry[0] += cell.n
        entry[1] += cell.sum_dev
        entry[2] += cell.sum_dev2
        if width == 6:
            entry[3] += cell.sum_den
            entry[4] += cell.sum_den2
            entry[5] += cell.sum_cross

    for cell in batch.cells:
        if needs_key and cell.key is None:
            null_key += cell.n
            null_key_late += cell.late
            continue
        buckets = memo.get(cell.slot)
        if buckets is None:
            buckets = memo[cell.slot] = dict(zip(kinds, bucket_keys(cell.slot, kinds, zone, shift_starts)))
        gi = cell.group_index
        add("total", gi, "", cell)
        add("day", gi, buckets["day"], cell)
        add("hour", gi, buckets["hour"], cell)
        column_key = "" if cell.key is None else str(cell.key)
        if clustered:
            add("cluster", gi, column_key if cluster_column else buckets[cluster_by], cell)
        if paired:
            add("pair", gi, column_key if pair_column else buckets[pair_by], cell)
    return RolledUp(changes, null_key, null_key_late)


def roll_up_baseline(design, batch) -> dict:
    """The baseline's slot cells → ``baseline`` cells per local day and ``baseline_total``.

    Read once, at the first look after the baseline ends, and stored with that look; the
    marker cell says it was read. Events whose key column is NULL are left out as for
    the comparison's own cells.
    """
    zone = design.measure.zone
    changes: dict = {BASELINE_READ: [1, 0.0, 0.0]}
    memo: dict = {}
    for cell in batch.cells:
        if design.key_column is not None and cell.key is None:
            continue
        if cell.slot not in memo:
            memo[cell.slot] = bucket_key(cell.slot, "day", zone)
        for kind, key in (("baseline", memo[cell.slot]), ("baseline_total", "")):
            entry = changes.setdefault((kind, cell.group_index, key), [0, 0.0, 0.0])
            entry[0] += cell.n
            entry[1] += cell.sum_dev
            entry[2] += cell.sum_dev2
    return changes


def merge(stored: dict, changes: dict) -> dict:
    """The stored cells with this look's changes added (a new dict; ``stored`` is left as it is)."""
    merged = dict(stored)
    for k, change in changes.items():
        old = merged.get(k)
        merged[k] = tuple(change) if old is None else tuple(a + b for a, b in zip(old, change))
    return merged


def summary(cells, kind, gi, key, shift) -> MomentSummary:
    n, s1, s2 = cells.get((kind, gi, key), (0, 0.0, 0.0))[:3]
    return MomentSummary(int(n), float(shift), float(s1), float(s2))


def of_kind(cells, kind):
    """``(group_index, key, (n, sum_dev, sum_dev2[, sum_den, sum_den2, sum_cross]))`` of every cell of one kind."""
    return [(gi, key, v) for (k, gi, key), v in cells.items() if k == kind]


@dataclass(frozen=True)
class Counts:
    """The look's event counts: new and late events used, and exclusions by reason."""

    new_events: int
    late_events: int
    excluded_new: dict      # what this look excluded
    excluded: dict          # running totals since the version's first look


def counts(batch, rolled: RolledUp, last_excluded: dict) -> Counts:
    """New, late and excluded events of a look (NULL-key events move from used to excluded)."""
    excluded_new = {reason: int(count) for reason, count in batch.excluded.items()}
    if rolled.null_key:
        excluded_new[NULL_KEY] = rolled.null_key
    excluded = dict(last_excluded)
    for reason, count in excluded_new.items():
        excluded[reason] = excluded.get(reason, 0) + count
    return Counts(int(batch.new_events) - rolled.null_key, int(batch.late_events) - rolled.null_key_late,
                  excluded_new, excluded)
