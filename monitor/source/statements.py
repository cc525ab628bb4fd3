"""The SQLAlchemy Core statements of a read: per-row parts, the cell aggregate, raw rows, first values.

One aggregate statement per look: per (group, 15-minute slot[, key], reason)
counts and shifted sums ``Σ(x − c)`` and ``Σ(x − c)²`` (for a ratio metric also the
denominator's ``Σ(d − c_d)``, ``Σ(d − c_d)²`` and the cross-product ``Σ(x − c)(d − c_d)``),
over the rows whose
event time lies in ``(previous cutoff, cutoff]`` plus late rows (event time at
or before the previous cutoff, arrival above the previous arrival watermark).
Every predicate compares the raw time or arrival column with a bound value, so
the database can use its index; slot and epoch expressions appear in the SELECT
list only.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime

import sqlalchemy as sa

from .binding import bind_like, bind_type, literal, literals
from .columns import Columns
from .spec import VALUE_LIMIT
from .times import TimeKind, bind_time
from ..vocabulary import as_utc

__all__ = ["RowParts", "row_parts", "time_params", "cells_select", "cells_statement", "rows_statements", "count_before_statement",
           "first_values_statement", "SweepStatements", "sweep_statements"]


@dataclass(frozen=True)
class RowParts:
    """The expressions one events row is read through."""

    kind: TimeKind
    time_raw: object
    epoch: object
    group_index: object
    value: object
    summand: object
    reason: object  # NULL for a valid row, else the exclusion reason
    value_reason: object  # the reason for a row whose time is readable and group known
    key: object
    arrival: object
    arrival_type: object
    filters: tuple
    denominator: object = None  # ratio metric: the denominator as summed; None otherwise


def row_parts(dialect, spec, cols: Columns, kind: TimeKind) -> RowParts:
    time_raw = cols.raw(spec.time_column)
    epoch = dialect.epoch(kind, time_raw)
    group_index = _group_index(spec, cols)
    raw_value = cols.raw(spec.value_column)
    value_type = cols.declared_type(spec.value_column)
    value, value_reason = dialect.value_parts(spec, raw_value, value_type)
    denominator = None
    if spec.denominator_column:
        denominator, den_reason = dialect.denominator_parts(
            cols.raw(spec.denominator_column), cols.declared_type(spec.denominator_column)
        )
        # The value's own reasons come first; a row with a usable value may still have a bad denominator.
        value_reason = sa.func.coalesce(value_reason, den_reason)
    reason = sa.case((time_raw.is_(None), "null_time"), (epoch.is_(None), "bad_time"),
                     (group_index.is_(None), "unknown_group"), else_=value_reason)
    key = sa.cast(cols.raw(spec.key_column), sa.String) if spec.key_column else sa.null()
    if spec.arrival_column:
        arrival, arrival_type = cols.raw(spec.arrival_column), cols.declared_type(spec.arrival_column)
    elif cols.implicit_arrival is not None:
        arrival, arrival_type = cols.implicit_arrival, sa.Integer()
    else:
        arrival, arrival_type = None, None
    return RowParts(
        kind=kind,
        time_raw=time_raw,
        epoch=epoch,
        group_index=group_index,
        value=value,
        summand=dialect.summand(raw_value, value, value_type),
        reason=reason,
        value_reason=value_reason,
        key=key,
        arrival=arrival,
        arrival_type=arrival_type,
        filters=tuple(_filters(spec, cols, kind)),
        denominator=denominator,
    )


def _group_index(spec, cols):
    column = cols.raw(spec.group_column)
    g0, g1 = (bind_like(cols.declared_type(spec.group_column), g) for g in spec.groups)
    return sa.case((column == literal(g0), 0), (column == literal(g1), 1), else_=None)


_COMPARISONS = {
    "=": lambda c, v: c == v,
    "!=": lambda c, v: c != v,
    "<": lambda c, v: c < v,
    "<=": lambda c, v: c <= v,
    ">": lambda c, v: c > v,
    ">=": lambda c, v: c >= v,
}


def _time_filter_value(kind: TimeKind, value):
    """A filter value on the time column, written the way the column stores times.

    ``[time_column, ">=", "2026-03-05T00:00:00Z"]`` starts a comparison at a date: the text is
    read by the one time rule (no zone: UTC) and bound as a timestamp, a date, epoch seconds or
    text in the column's own ISO layout, as a cutoff is (SQLite text times: in the layout of
    the stored text). A number, or text that is not an ISO date-time, is left as written.
    """
    if not isinstance(value, str):
        return value
    try:
        moment = as_utc(datetime.fromisoformat(value.strip()))
    except ValueError:
        return value
    if kind.kind == "stored":
        return kind.iso.format(moment) if kind.iso is not None else value
    return bind_time(kind, moment)


def _filters(spec, cols, kind: TimeKind):
    for column_name, op, value in spec.filters:
        column = cols.raw(column_name)
        column_type = cols.declared_type(column_name)
        if column_name == spec.time_column:
            value = ([_time_filter_value(kind, v) for v in value] if op in ("in", "not in")
                     else _time_filter_value(kind, value))
        if op in ("in", "not in"):
            values = literals([bind_like(column_type, v) for v in value])
            yield column.in_(values) if op == "in" else column.not_in(values)
            continue
        bound = bind_like(column_type, value)
        if bound is None and op in ("=", "!="):
            yield column.is_(None) if op == "=" else column.is_not(None)
            continue
        yield _COMPARISONS[op](column, literal(bound))


def time_params(name: str, values: tuple) -> dict:
    """One cutoff's bound values as named parameters: ``upper``, then ``upper_1`` … for further storages."""
    return {(name if i == 0 else f"{name}_{i}"): v for i, v in enumerate(values)}


def _bounds(bound: dict, name: str) -> tuple | None:
    if name not in bound:
        return None
    values, i = [bound[name]], 1
    while f"{name}_{i}" in bound:
        values.append(bound[f"{name}_{i}"])
        i += 1
    return tuple(values)


def _window(dialect, kind, raw, start, end) -> list | None:
    """``start <= time < end`` as one predicate per storage (aligned with ``time_ranges``); None for no window.

    ``start`` and ``end`` are tuples of bound values (one per storage) or None.
    """
    if start is None and end is None:
        return None
    predicates = []
    for i, storage in enumerate(dialect.storages(kind, raw)):
        conditions = [storage]
        if start is not None:
            conditions.append(raw >= start[i])
        if end is not None:
            conditions.append(raw < end[i])
        predicates.append(sa.and_(*conditions))
    return predicates


def _windowed(ranges: list, window: list | None) -> list:
    """Each storage's time range narrowed to the window (unchanged without one)."""
    if window is None:
        return ranges
    return [sa.and_(r, w) for r, w in zip(ranges, window, strict=True)]


def cells_select(dialect, spec, parts: RowParts, where, late=False, why=None):
    """One branch of the cell aggregate: the rows ``where`` holds, per group, 15-minute slot, key and reason.

    Its columns are the reader's: group index, slot, key, reason (NULL for valid rows), count,
    late count, ``Σ(x − c)``, ``Σ(x − c)²``, largest arrival, and for a ratio metric the
    denominator's sums. ``late`` marks every row late; ``why`` gives every row that reason.
    """
    kind, time_raw, arrival = parts.kind, parts.time_raw, parts.arrival
    dev = parts.summand - float(spec.shift)
    ratio = parts.denominator is not None
    den_dev = parts.denominator - float(spec.shift_den) if ratio else None
    # Grouped by output position: the CASE expressions are evaluated once per row
    # (bound parameters make each repeated expression text distinct to the database).
    by_position = [sa.literal_column(str(i)) for i in (1, 2, 3, 4)]
    # Each row's time and deviation are computed once in an inner select (the dialect may
    # fence it so the database does not inline the expressions again); the outer select
    # buckets and sums them.
    rows = dialect.fence(
        sa.select(
            parts.group_index.label("gi"),
            dialect.row_time(kind, time_raw, parts.epoch).label("at"),
            time_raw.is_(None).label("no_time"),
            parts.key.label("key"),
            parts.value_reason.label("other"),
            dev.label("dev"),
            *([den_dev.label("den")] if ratio else []),
            (arrival if arrival is not None else sa.null()).label("arrival"),
        ).where(*where, *parts.filters)
    ).subquery("r")
    # The group is known from gi: the inner select tests it once, not again for the reason.
    reason = sa.case((rows.c.no_time, "null_time"), (rows.c.at.is_(None), "bad_time"),
                     (rows.c.gi.is_(None), "unknown_group"), else_=rows.c.other)
    if why is not None:
        reason = sa.literal(why, sa.Text)
    ratio_sums = []
    if ratio:
        ratio_sums = [
            sa.func.sum(rows.c.den).label("sum_den"),
            sa.func.sum(rows.c.den * rows.c.den).label("sum_den2"),
            sa.func.sum(rows.c.dev * rows.c.den).label("sum_cross"),
        ]
    return sa.select(
        rows.c.gi,
        dialect.slot(kind, rows.c.at).label("slot"),
        rows.c.key,
        reason.label("reason"),
        sa.func.count().label("n"),
        (sa.func.count() if late else sa.literal(0, sa.Integer)).label("late"),
        # Sums of bad groups are ignored; only valid groups' sums are used.
        sa.func.sum(rows.c.dev).label("sum_dev"),
        sa.func.sum(rows.c.dev * rows.c.dev).label("sum_dev2"),
        sa.func.max(rows.c.arrival).label("arrival"),
        *ratio_sums,
    ).group_by(*by_position)


def cells_statement(dialect, spec, parts: RowParts, params: dict, first_ranges=None):
    """The aggregate over new and late rows, with bound parameters named like ``params``.

    ``params`` holds ``upper`` (this cutoff), and on later reads ``lower`` (the previous
    cutoff) and ``seen`` (the previous arrival watermark) when there is an arrival column
    (see ``time_params`` for cutoffs compared in more than one storage). A spec with an
    event-time window adds ``start`` (inclusive) and/or ``end`` (exclusive). ``first_ranges``
    (first read only), given the bound parameters, returns time ranges to read instead of the
    dialect's: a sweep reads most of the text range itself (``sweep.py``).
    """
    bound = {name: sa.bindparam(name, type_=bind_type(v)) for name, v in params.items()}
    kind, time_raw, arrival = parts.kind, parts.time_raw, parts.arrival

    def part(where, late, why=None):
        return cells_select(dialect, spec, parts, where, late, why)

    upper, lower = _bounds(bound, "upper"), _bounds(bound, "lower")
    start, end = _bounds(bound, "start"), _bounds(bound, "end")
    # A start keeps earlier events out; an end (a baseline's) keeps the change's out.
    window = _window(dialect, kind, time_raw, start, end)
    if lower is None:
        # The first read scans the most: one branch per disjoint time range, each a plain index
        # range scan (cells that two branches share are added up by the reader).
        ranges = dialect.time_ranges(kind, time_raw, None, upper) if first_ranges is None else first_ranges(bound)
        branches = [part([r], 0) for r in _windowed(ranges, window)]
        if end is None:
            # NULL times (and words) never fall in a time range: count them once, on the first
            # read (of the comparison, not of its baseline), one branch each (an OR of the two
            # would scan the whole table on SQLite).
            branches.extend(part([where], 0) for where in dialect.unplaced_parts(kind, time_raw, above=upper))
    else:
        branches = [part([sa.or_(*_windowed(dialect.time_ranges(kind, time_raw, lower, upper), window))], 0)]
        if arrival is not None:
            # Late rows are only those at or before the previous cutoff, so rows read
            # earlier through the time range can never come back through this branch.
            newer = arrival > bound["seen"] if "seen" in bound else arrival.is_not(None)
            # One OR here: the arrival index finds these rows, the time test only filters them.
            earlier = sa.or_(*_windowed(dialect.time_ranges(kind, time_raw, None, lower), window))
            branches.append(part([earlier, newer], 1))
            branches.append(part([dialect.unplaced(kind, time_raw), newer], 0))
            if start is not None and "seen" in bound:
                # Rows dated before the start that arrive late: the baseline was read once and
                # frozen, so they are counted, never used. (Without an arrival watermark yet
                # nothing has been read, the baseline included.)
                before = sa.or_(*_window(dialect, kind, time_raw, None, start))
                branches.append(part([before, newer], 0, "before_start"))
    return sa.union_all(*branches)


def rows_statements(dialect, parts: RowParts, upper: tuple, arrival_max, window=(None, None)):
    """(valid rows, per-reason counts) of the rows with time <= ``upper`` and arrival <= ``arrival_max``.

    The valid rows' columns are group_index, value, time, key, and for a ratio metric denominator.
    ``window`` is (start, end) bound values (either None): start inclusive, end exclusive.
    Rows without a readable time are counted only without an end (not in a baseline).
    """
    time_raw, arrival = parts.time_raw, parts.arrival
    upper = tuple(literal(v) for v in upper)
    start, end = (None if w is None else tuple(literal(v) for v in w) for w in window)
    in_time = _windowed(dialect.time_ranges(parts.kind, time_raw, None, upper),
                        _window(dialect, parts.kind, time_raw, start, end))
    unplaced = [] if end is not None else [dialect.unplaced(parts.kind, time_raw)]
    where = [sa.or_(*in_time, *unplaced)]
    if arrival_max is not None:
        where.append(sa.or_(arrival <= literal(arrival_max), arrival.is_(None)))
    where.extend(parts.filters)
    labelled = sa.select(
        parts.group_index.label("group_index"), parts.value.label("value"), time_raw.label("time"),
        parts.key.label("key"), parts.reason.label("reason"),
        *([parts.denominator.label("denominator")] if parts.denominator is not None else []),
    ).where(*where).subquery("checked")
    columns = [labelled.c.group_index, labelled.c.value, labelled.c.time, labelled.c.key]
    if parts.denominator is not None:
        columns.append(labelled.c.denominator)
    rows = sa.select(*columns).where(labelled.c.reason.is_(None))
    counts = (
        sa.select(labelled.c.reason, sa.func.count())
        .where(labelled.c.reason.is_not(None))
        .group_by(labelled.c.reason)
    )
    return rows, counts


def count_before_statement(dialect, parts: RowParts, before: tuple, arrival_max):
    """How many rows (valid or not) are dated before ``before`` and arrived by ``arrival_max``."""
    earlier = _window(dialect, parts.kind, parts.time_raw, None, tuple(literal(v) for v in before))
    return (
        sa.select(sa.func.count())
        .select_from(parts.time_raw.table)
        .where(sa.or_(*earlier), parts.arrival <= literal(arrival_max), *parts.filters)
    )


def first_values_statement(parts: RowParts, limit: int = 25):
    """Up to ``limit`` valid values at the earliest times (straight off the time index)."""
    return (
        sa.select(parts.value)
        .where(parts.time_raw.is_not(None), parts.reason.is_(None), *parts.filters)
        .order_by(parts.time_raw)
        .limit(limit)
    )


@dataclass(frozen=True)
class SweepStatements:
    """The statements of a first read that sweeps one storage of the times one slot at a time (``sweep.py``).

    The storage is ISO text (bounds written in its layout) or numbers (epoch seconds, bounds as
    numbers). Bound names besides the read's own (``upper``, ``upper_1``,
    ``start`` …): ``sweep_from`` (where the swept part begins; ``rest`` reads everything of this
    storage before it, the other storage and the unplaced rows), ``chunk_from`` and
    ``chunk_to`` (one chunk: from inclusive, to exclusive, or inclusive in the ``…_last``
    variants), ``slot_first`` and ``slot_last`` (the chunk's slot, epoch seconds, both inclusive).
    ``upper`` and ``start`` name the read's bounds in this storage.
    """

    upper: str
    start: str
    rest: object
    screen: object
    screen_last: object
    chunk: object
    chunk_last: object
    seek: object


def sweep_statements(dialect, spec, cols: Columns, parts: RowParts, params: dict, storage: str) -> SweepStatements:
    """The rest, screen, chunk and seek statements of a swept first read of one storage of the times."""
    raw = parts.time_raw
    text = storage == "text"
    upper_name, start_name = ("upper", "start") if text else ("upper_1", "start_1")
    sample = "" if text else 0.0
    bound = {name: sa.bindparam(name, type_=bind_type(value)) for name, value in params.items()}
    bound.update({name: sa.bindparam(name, type_=bind_type(sample)) for name in ("sweep_from", "chunk_from", "chunk_to")})
    bound.update(slot_first=sa.bindparam("slot_first", type_=sa.BigInteger()),
                 slot_last=sa.bindparam("slot_last", type_=sa.BigInteger()))
    after_start = [raw >= bound[start_name]] if start_name in bound else []

    def first_ranges(read_bound):
        # This storage before the swept part (normally nothing), the other storage as usual.
        text_range, number_range = dialect.time_ranges(parts.kind, raw, None, _bounds(read_bound, "upper"))
        if text:
            return [sa.and_(raw >= sa.literal(""), raw < read_bound["sweep_from"]), number_range]
        # A number bound keeps text out (text sorts after every number).
        return [text_range, raw < read_bound["sweep_from"]]

    rest = cells_statement(dialect, spec, parts, {**params, "sweep_from": sample}, first_ranges=first_ranges)
    within = [raw >= bound["chunk_from"], raw < bound["chunk_to"], *after_start]
    within_last = [raw >= bound["chunk_from"], raw <= bound["chunk_to"], *after_start]
    # For text, each time must read into the slot; a number inside the chunk's bounds is in it already.
    in_slot = [dialect.plain_epoch(raw).between(bound["slot_first"], bound["slot_last"])] if text else []
    screen = _screen_select(dialect, spec, cols, parts, in_slot)
    least = sa.func.min(raw)
    return SweepStatements(
        upper=upper_name,
        start=start_name,
        rest=rest,
        screen=screen.where(*within),
        screen_last=screen.where(*within_last),
        chunk=cells_select(dialect, spec, parts, within),
        chunk_last=cells_select(dialect, spec, parts, within_last),
        seek=sa.select(least, dialect.plain_epoch(least) if text else least)
        .where(raw >= bound["chunk_from"], raw <= bound[upper_name]),
    )


def _screen_select(dialect, spec, cols: Columns, parts: RowParts, in_slot: list):
    """Per group (and key) of one slot's rows: count, how many pass plainly, shifted sums, largest arrival.

    A row passes when its time is inside the slot (``in_slot``, the conditions that prove it)
    and its value (and denominator) is a stored number that no reason could exclude. Where
    every row passes, the counts and sums equal those of ``cells_select`` over the same rows.
    """
    value = dialect.plain_number(cols.raw(spec.value_column))
    low, high = -VALUE_LIMIT, VALUE_LIMIT
    if spec.valid_range is not None:
        range_low, range_high = spec.valid_range
        low = low if range_low is None else max(low, float(range_low))
        high = high if range_high is None else min(high, float(range_high))
    passes = [*in_slot, value.between(literal(low), literal(high))]
    if spec.metric == "proportion":
        passes.append(value.in_(literals((0, 1))))
    dev = value - float(spec.shift)
    ratio_sums = []
    if spec.denominator_column:
        den = dialect.plain_number(cols.raw(spec.denominator_column))
        passes.extend([den > literal(0), den <= literal(VALUE_LIMIT)])
        den_dev = den - float(spec.shift_den)
        ratio_sums = [sa.func.sum(den_dev), sa.func.sum(den_dev * den_dev), sa.func.sum(dev * den_dev)]
    arrival = parts.arrival if parts.arrival is not None else sa.null()
    return sa.select(
        parts.group_index,
        parts.key,
        sa.func.count(),
        sa.func.sum(sa.and_(*passes)),
        sa.func.sum(dev),
        sa.func.sum(dev * dev),
        sa.func.max(arrival),
        *ratio_sums,
    ).where(*parts.filters).group_by(*(sa.literal_column(str(i)) for i in ((1, 2) if spec.key_column else (1,))))
