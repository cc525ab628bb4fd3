"""The first read of a big table, one 15-minute slot at a time (SQLite: ISO-text or epoch-number times).

A first read groups every row up to the cutoff by group, slot and reason. SQLite groups by
sorting, and sorting millions of rows in one statement, with the checks each row needs, cost
about four times the bare per-group aggregate. Where the dialect says so
(``sweeps_first_reads``) the first read instead walks the times slot by slot, on one
connection and inside one read transaction, so every statement sees the same rows. It walks
the ISO text when there is any, else the times stored as epoch seconds:

* a *screen* per slot counts, per group (and key), the rows and how many of them plainly pass:
  a time that reads to an instant inside this slot (a number between the slot's bounds is
  inside it already), a value stored as a number that no reason
  excludes (within the limits, the range, 0 or 1 for a rate), a usable denominator; with the
  shifted sums and the largest arrival;
* a slot whose rows all pass gives its cells straight from the screen; any other slot is read
  again by the full statement (``statements.cells_select``: every reason, numbers kept as
  text, dates that roll over into another slot), so the cells and counts are those of the
  one-statement read;
* an empty slot is followed by a seek on the time index to the next stored time;
* what comes before the first slot, the other storage and the rows without a time are read by
  one full statement (``rest``).

The sweep gives up (returns None, and the one-statement read runs) when none of the first
texts can be read in the layout the cutoffs are written in, or nothing is stored up to the
cutoff.
"""

from __future__ import annotations

import math
from datetime import datetime, timezone

from .spec import SLOT_SECONDS
from .statements import SweepStatements

__all__ = ["sweepable", "sweep"]

# How many unreadable texts at the start of the range the sweep steps over before it gives up.
_FIRST_TEXT_TRIES = 50


def sweepable(dialect, kind, spec) -> bool:
    """Whether a first read of this spec may sweep: a dialect that sweeps, times it stores per value, no baseline end."""
    return dialect.sweeps_first_reads and kind.kind == "stored" and spec.end is None


class _Raw:
    """One compiled statement run straight on the driver's cursor (thousands of runs per read).

    The read's own values are bound once; ``run`` fills in only what changes from chunk to chunk.
    """

    def __init__(self, conn, statement, params: dict):
        compiled = statement.compile(dialect=conn.dialect)
        self.sql = str(compiled)
        self.names = compiled.positiontup
        values = {**compiled.params, **params}
        self.values = [values.get(n) for n in self.names]

    def run(self, cursor, changing: dict) -> list:
        values = self.values[:]
        for i, name in enumerate(self.names):
            if name in changing:
                values[i] = changing[name]
        cursor.execute(self.sql, values)
        return cursor.fetchall()


def sweep(conn, statements_for, kind, params: dict, epoch_limits) -> list | None:
    """The first read's rows (as ``cells_statement`` gives them), or None where the sweep does not apply.

    ``statements_for(storage)`` gives the ``SweepStatements`` of ``"text"`` or ``"number"``;
    ``epoch_limits`` is the (least, greatest) epoch a stored number may hold to be a time.
    """
    layout = kind.iso
    driver = conn.connection.dbapi_connection
    if not driver.in_transaction:
        driver.execute("BEGIN")  # one snapshot for every statement below; returning the connection ends it
    cursor = driver.cursor()
    try:
        if layout is not None and layout.sep is not None:
            rows = _walk(conn, cursor, statements_for("text"), _SlotTexts(layout), params, "")
            if rows is not _NOTHING:
                return rows
        rows = _walk(conn, cursor, statements_for("number"), _NumberBounds(epoch_limits), params, epoch_limits[0])
        return None if rows is _NOTHING else rows
    finally:
        cursor.close()


# _walk's answer when the storage holds nothing up to the cutoff (the other one may).
_NOTHING = object()


class _NumberBounds:
    """Slot starts as epoch-second bounds, None past the greatest epoch a number may hold."""

    def __init__(self, limits):
        self.greatest = limits[1]

    def __call__(self, epoch: int) -> int | None:
        return epoch if epoch - 1 <= self.greatest else None


def _first_slot(cursor, seek, bound_of, start):
    """(bound where the sweep begins, its slot), _NOTHING when nothing is stored, or (None, None).

    The slot is that of the first readable time: texts before it (a number kept as text, a
    word-like date) are left to the full statement. (None, None) when none of the first few
    texts can be read in the cutoffs' layout.
    """
    for _attempt in range(_FIRST_TEXT_TRIES):
        found, epoch = seek.run(cursor, {"chunk_from": start})[0]
        if found is None:
            return _NOTHING if _attempt == 0 else (None, None)
        if epoch is not None:
            slot = _slot_of(epoch)
            begin = bound_of(slot)
            if begin is not None and begin <= found:
                return begin, slot
        if not isinstance(found, str):
            return None, None
        start = found + "\x00"  # the least text after this one
    return None, None


def _slot_of(epoch) -> int:
    return math.floor(epoch) // SLOT_SECONDS * SLOT_SECONDS


def _walk(conn, cursor, statements, bound_of, params, least):
    """Sweep one storage from ``least`` (its least bound): its rows, None to give up, or _NOTHING
    when it holds nothing up to the cutoff."""
    upper = params[statements.upper]
    seek, screen, screen_last = (_Raw(conn, s, params)
                                 for s in (statements.seek, statements.screen, statements.screen_last))
    first = _first_slot(cursor, seek, bound_of, params.get(statements.start, least))
    if first is _NOTHING:
        return _NOTHING
    begin, slot = first
    if begin is None:
        return None
    rows = list(conn.execute(statements.rest, {**params, "sweep_from": begin}))
    low = begin
    while True:
        high = bound_of(slot + SLOT_SECONDS)
        last = high is None or high > upper
        chunk = {"chunk_from": low, "chunk_to": upper if last else high,
                 "slot_first": slot, "slot_last": slot + SLOT_SECONDS - 1}
        found = (screen_last if last else screen).run(cursor, chunk)
        if all(row[3] == row[2] for row in found):  # passed == count: every row plainly passed
            # Screen row (gi, key, count, passed, sums…) as a cell row (gi, slot, key, reason, count, late, sums…).
            rows.extend((row[0], slot, row[1], None if row[0] is not None else "unknown_group", row[2], 0) + row[4:]
                        for row in found)
        else:
            rows.extend(conn.execute(statements.chunk_last if last else statements.chunk, {**params, **chunk}))
        if last:
            return rows
        low = high
        if found:
            slot += SLOT_SECONDS
            continue
        # An empty slot: jump to the slot of the next stored time (the chunk still starts at
        # ``low``, so the times between are read, and there are none).
        found_next, epoch = seek.run(cursor, {"chunk_from": high})[0]
        if found_next is None:
            return rows
        if epoch is None or _slot_of(epoch) <= slot:
            # Unreadable, or earlier than its place in the stored order: read the rest in one go.
            rows.extend(conn.execute(statements.chunk_last, {**params, "chunk_from": high, "chunk_to": upper}))
            return rows
        slot = _slot_of(epoch)


def _text(layout, epoch: int) -> str | None:
    """The moment ``epoch`` in the cutoffs' layout; None beyond the years a text can hold."""
    try:
        return layout.format(datetime.fromtimestamp(epoch, tz=timezone.utc))
    except (ValueError, OverflowError, OSError):
        return None


class _SlotTexts:
    """Slot starts in the cutoffs' layout, as ``_text`` writes them, without a datetime per slot.

    A slot starts on a whole minute of local time (offsets are whole minutes), so only the date
    needs the calendar: it is taken from ``_text`` once per local day, the clock is arithmetic.
    """

    def __init__(self, layout):
        self.layout = layout
        self.offset = int(layout.offset.total_seconds())
        seconds = (":00" + ("." + "0" * layout.frac_digits if layout.frac_digits else "")) if layout.seconds else ""
        self.tail = seconds + layout.zone
        self.dates: dict = {}

    def __call__(self, epoch: int) -> str | None:
        day, second = divmod(epoch + self.offset, 86400)
        date = self.dates.get(day)
        if date is None:
            midnight = _text(self.layout, epoch - second)
            if midnight is None:
                return None
            date = self.dates[day] = midnight.split(self.layout.sep, 1)[0]
        return f"{date}{self.layout.sep}{second // 3600:02d}:{second % 3600 // 60:02d}{self.tail}"
