"""Read-only aggregate queries against an operational (source) database.

The monitor never pulls raw rows to decide. For every look it asks the
database, with one SQLAlchemy Core statement (``statements.py``; on SQLite a
first read runs one small statement per slot, ``sweep.py``), for per
(group, 15-minute UTC slot[, key]) counts and shifted sums of the valid rows
(for a ratio metric also the denominator's ``Σ(d − c_d)``, ``Σ(d − c_d)²`` and the
cross-product ``Σ(x − c)(d − c_d)``), and for per-reason counts of the bad ones. Only rows that are new since the
previous look are read. What differs between databases (read-only sessions,
time bucketing, text-time parsing, value checks) lives in ``dialects/``.

Requirements on the source table
--------------------------------
* Time column: a SQL timestamp (a timestamp without time zone is read as UTC,
  one with a time zone is exact), a date, epoch seconds (integer or real), or
  ISO-8601 text. ISO text is compared as text (that is what keeps the index
  usable), so **every row should share one layout and one UTC offset** — the
  layout is detected from the earliest readable row (e.g. ``2024-05-01 08:30:00``,
  ``2024-05-01T08:30:00.123Z``, ``2024-05-01T08:30:00+02:00``) and cutoffs are
  written in it; each row's instant is read from its own text, and ``check``
  reports rows in another layout (they are read at a later look than their
  time). In SQLite each stored time is read by its own storage class: text as
  ISO-8601, integers and reals as epoch seconds, so one number among text times
  hides nothing. A time that cannot be read (text that is not an ISO-8601
  date-time, an impossible date, an epoch beyond year 9999, an infinite
  timestamp) is ``bad_time``: counted when a read's time range reaches it, or —
  for words and ``infinity``, which sort after every date — once, on the first
  read or by its arrival.
* Arrival column (optional, e.g. an auto-increment id or an ``inserted_at``
  column): increases with insertion; used to find late events. On SQLite the
  implicit rowid serves when no arrival column is configured (a ``VACUUM`` may
  renumber the rowids of tables without an ``INTEGER PRIMARY KEY``). Elsewhere,
  without one, events arriving after their slot was read are missed. The values
  should follow commit order: with several concurrent writers a transaction
  that commits after a larger id was already read is missed unless its events
  are younger than the comparison's lateness allowance.
* Values: any numeric type (``double precision``, ``real``, ``numeric``,
  integers, ``boolean`` for rates); in SQLite also numeric text. SQLite stores a
  NaN as NULL, so there it is counted as ``null_value``.

Exclusion reasons (each bad row is counted once, under the first that applies,
in this order): ``null_time`` (no time), ``bad_time`` (a time that cannot be
read), ``unknown_group`` (group value not one of the two configured),
``null_value``, ``non_numeric`` (text that is not a number, or a blob),
``not_finite`` (NaN, ±infinity, also as text, or beyond the largest double),
``too_large`` (|value| above ``VALUE_LIMIT`` = 1e50, so no sum of squares can
overflow), ``not_binary`` (proportion metric, value not 0 or 1),
``out_of_range`` (outside the inclusive ``valid_range``), ``bad_denominator``
(ratio metric: a denominator that is NULL, not a number, not finite, above
``VALUE_LIMIT``, zero or negative — a row that did no work cannot carry a rate),
``before_start`` (a before/after comparison: dated before its start, arrived
after its baseline was read and frozen). In SQLite, numeric
text counts as a number when, once trimmed, it is a JSON number (``12``,
``-3.5``, ``1e3``); other text is ``non_numeric``.
"""

from __future__ import annotations

import threading
from datetime import date, datetime
from decimal import Decimal

import sqlalchemy as sa
from sqlalchemy import exc as sa_exc

from ..errors import InvalidArgumentError, SourceSchemaError, SourceUnavailableError
from .checking import reading_warnings, time_problems
from .columns import Columns, reflect
from .dialects import dialect_for
from .spec import (
    EXCLUSION_REASONS,
    FILTER_OPERATORS,
    SLOT_SECONDS,
    VALUE_LIMIT,
    Batch,
    SlotCell,
    SourceSpec,
    Watermark,
    utc,
)
from .statements import (cells_statement, count_before_statement, first_values_statement, row_parts, rows_statements,
                         sweep_statements, time_params)
from .sweep import sweep, sweepable
from .times import IsoLayout, TimeKind, to_utc_timestamps

# The spec's names stay importable from here (older callers); the package lists them once.
__all__ = ["Source"]


class Source:
    """A read-only connection to one operational database.

    Parameters
    ----------
    url : str
        SQLAlchemy URL (``sqlite:///ops.sqlite``, ``postgresql+psycopg://…``).
    name : str
        The source's name in the configuration; used in error messages.

    SQLite files are opened with ``mode=ro`` (the file is never created or
    changed); other databases get a read-only session where their dialect
    knows how (see ``monitor.source.dialects``).
    """

    def __init__(self, url: str, *, name: str = "source"):
        try:
            self._url = sa.engine.make_url(url)
        except Exception as error:  # noqa: BLE001 - bad URL text, report without echoing secrets
            raise InvalidArgumentError(
                f"source {name!r}: url is not a valid SQLAlchemy URL ({type(error).__name__})"
            ) from None
        self.name = name
        self._safe_url = self._url.render_as_string(hide_password=True)
        self._dialect = dialect_for(self._url)
        # What is learnt from the table, kept until a read finds it changed.
        self._lock = threading.Lock()
        self._tables: dict = {}
        self._iso_layouts: dict = {}
        self._kinds: dict = {}
        self._statements: dict = {}
        try:
            self.engine = self._dialect.create_engine(source_name=name, safe_url=self._safe_url)
        except (ImportError, sa_exc.NoSuchModuleError) as error:
            raise InvalidArgumentError(
                f"source {name!r}: no driver for {self._url.drivername!r} is installed ({error}); "
                "see the README's Source databases for the package each database needs"
            ) from None
        self.dialect = self.engine.dialect.name

    def dispose(self):
        """Close every pooled connection."""
        self.engine.dispose()

    def _unavailable(self, spec, error) -> SourceUnavailableError:
        detail = str(getattr(error, "orig", None) or error).strip().splitlines()
        detail = detail[0] if detail else type(error).__name__
        password = self._url.password
        if password:
            detail = detail.replace(str(password), "***")
        table = f" table {spec.table!r}" if spec is not None else ""
        return SourceUnavailableError(
            f"source {self.name!r} ({self._safe_url}){table}: {type(error).__name__}: {detail}"
        )

    def _connect(self, spec, work):
        """Run ``work(conn)`` on a pooled connection; database errors become SourceUnavailableError."""
        try:
            with self.engine.connect() as conn:
                return work(conn)
        except (SourceSchemaError, InvalidArgumentError):
            raise
        except sa_exc.SQLAlchemyError as error:
            raise self._unavailable(spec, error) from None

    def _describe(self, spec, role="time_column") -> str:
        return f"source {self.name!r}: table {spec.table!r} {role} {getattr(spec, role)!r}"

    # ------------------------------------------------------------------ what the table is

    def _columns(self, conn, spec, *, refresh=False) -> Columns:
        key = (spec.schema, spec.table)
        with self._lock:
            if refresh:
                # The table may have changed: forget everything learnt from it.
                self._tables.pop(key, None)
                self._kinds.clear()
                self._iso_layouts.clear()
                self._statements.clear()
            cached = self._tables.get(key)
        if cached is not None:
            return cached
        found = reflect(conn, self._dialect, spec, source_name=self.name)
        with self._lock:
            self._tables[key] = found
        return found

    def _resolve(self, conn, spec) -> Columns:
        cols = self._columns(conn, spec)
        if cols.missing(spec):
            cols = self._columns(conn, spec, refresh=True)
        missing = cols.missing(spec)
        if missing:
            names = ", ".join(f"{role} {c!r}" for role, c in missing)
            raise SourceSchemaError(f"source {self.name!r}: table {spec.table!r} has no column {names}")
        for role, column in _numeric_roles(spec):
            problem = self._dialect.value_type_problem(cols.declared_type(column))
            if problem:
                raise SourceSchemaError(f"{self._describe(spec, role)} {problem}")
        return cols

    def _time_kind(self, conn, spec, cols: Columns) -> TimeKind:
        key = (spec.schema, spec.table, spec.time_column, spec.time_format)
        with self._lock:
            known = self._kinds.get(key)
        if known is not None:
            return known
        kind, settled = self._detect_time_kind(conn, spec, cols)
        if settled:
            with self._lock:
                self._kinds[key] = kind
        return kind

    def _detect_time_kind(self, conn, spec, cols: Columns):
        """(kind, settled): settled is False until a text column shows a readable ISO-8601 time."""
        kind = self._dialect.time_kind(
            spec.time_format, cols.declared_type(spec.time_column), describe=self._describe(spec)
        )
        if kind.kind not in ("iso", "stored"):
            return kind, True
        layout = self._iso_layout(conn, spec, cols)
        return TimeKind(kind.kind, iso=layout or IsoLayout.default()), layout is not None

    def _iso_layout(self, conn, spec, cols) -> IsoLayout | None:
        """The layout of the earliest readable ISO-8601 text; None while there is none."""
        key = (spec.schema, spec.table, spec.time_column)
        with self._lock:
            cached = self._iso_layouts.get(key)
        if cached is not None:
            return cached
        # Unreadable rows (counted as bad_time) do not decide the layout of the readable ones.
        for text in self._dialect.iso_samples(conn, cols.raw(spec.time_column)):
            found = IsoLayout.detect(str(text))
            if found is not None:
                with self._lock:
                    self._iso_layouts[key] = found
                return found
        return None

    def _row_parts(self, conn, spec):
        cols = self._resolve(conn, spec)
        return cols, row_parts(self._dialect, spec, cols, self._time_kind(conn, spec, cols))

    def _window_bounds(self, kind, spec) -> tuple:
        """The spec's event-time window (start inclusive, end exclusive) as bound values, or Nones."""
        return tuple(None if moment is None else self._dialect.time_bounds(kind, moment)
                     for moment in (spec.start, spec.end))

    # ------------------------------------------------------------------ reads

    def first_value(self, spec: SourceSpec) -> float | None:
        """The median of up to 25 valid values at the earliest times: a shift near the data."""

        def work(conn):
            _cols, parts = self._row_parts(conn, spec)
            return sorted(float(v) for v in conn.execute(first_values_statement(parts)).scalars())

        values = self._connect(spec, work)
        if not values:
            return None
        mid = len(values) // 2
        return values[mid] if len(values) % 2 else 0.5 * (values[mid - 1] + values[mid])

    def read_cells(self, spec: SourceSpec, since: Watermark | None, cutoff: datetime) -> Batch:
        """Aggregate the rows that are new since ``since``, up to event time ``cutoff``."""
        if not isinstance(spec, SourceSpec):
            raise InvalidArgumentError(f"spec must be a SourceSpec, got {type(spec).__name__}")
        cutoff = utc(cutoff, "cutoff")
        if since is not None:
            if not isinstance(since, Watermark):
                raise InvalidArgumentError(f"since must be a Watermark or None, got {since!r}")
            previous = utc(since.cutoff, "since.cutoff")
            if cutoff < previous:
                raise InvalidArgumentError(
                    f"cutoff {cutoff.isoformat()} is before the previous cutoff {previous.isoformat()}"
                )

        def work(conn):
            statement, params = self._cells_statement(conn, spec, since, cutoff)
            if since is None:
                swept = self._sweep(conn, spec, params)
                if swept is not None:
                    return swept
            return conn.execute(statement, params).all()

        return self._batch(self._connect(spec, work), since, cutoff)

    def _cells_statement(self, conn, spec, since, cutoff):
        """The aggregate statement (built once per spec and shape) and its bound values."""
        self._dialect.learn(conn)
        cols = self._resolve(conn, spec)
        kind = self._time_kind(conn, spec, cols)
        params = time_params("upper", self._dialect.time_bounds(kind, cutoff))
        start, end = self._window_bounds(kind, spec)
        if start is not None:
            params.update(time_params("start", start))
        if end is not None:
            params.update(time_params("end", end))
        if since is not None:
            params.update(time_params("lower", self._dialect.time_bounds(kind, utc(since.cutoff, "since.cutoff"))))
        shape_key = (spec, kind, since is None)
        with self._lock:
            cached = self._statements.get(shape_key)
        if cached is None:
            parts = row_parts(self._dialect, spec, cols, kind)
            cached = (parts, {})
            with self._lock:
                self._statements[shape_key] = cached
        parts, by_params = cached
        if since is not None and parts.arrival is not None and since.arrival is not None:
            params["seen"] = self._dialect.bind_arrival(parts.arrival_type, since.arrival)
        shape = tuple((k, type(v)) for k, v in sorted(params.items()))
        with self._lock:
            statement = by_params.get(shape)
        if statement is None:
            statement = cells_statement(self._dialect, spec, parts, params)
            with self._lock:
                by_params[shape] = statement
        return statement, params

    def _sweep(self, conn, spec, params):
        """A first read swept one slot at a time where the dialect and the time column allow it, else None."""
        cols = self._resolve(conn, spec)
        kind = self._time_kind(conn, spec, cols)
        if not sweepable(self._dialect, kind, spec):
            return None

        def statements_for(storage):
            key = (spec, kind, "sweep", storage, tuple(sorted(params)))
            with self._lock:
                statements = self._statements.get(key)
            if statements is None:
                parts = row_parts(self._dialect, spec, cols, kind)
                statements = sweep_statements(self._dialect, spec, cols, parts, params, storage)
                with self._lock:
                    self._statements[key] = statements
            return statements

        return sweep(conn, statements_for, kind, params, self._dialect.epoch_limits)

    def _batch(self, rows, since, cutoff) -> Batch:
        excluded = {}
        arrival_max = None
        merged = {}
        slot_seconds = self._dialect.slot_seconds
        # A first read of a big table returns tens of thousands of cells: one plain pass.
        for gi, slot, key, reason, count, late, sum_dev, sum_dev2, row_arrival, *ratio_sums in rows:
            if row_arrival is not None and (arrival_max is None or row_arrival > arrival_max):
                arrival_max = row_arrival
            if reason is not None:
                excluded[reason] = excluded.get(reason, 0) + int(count)
                continue
            # Each sum as if added to a zero, as the cell's running sums start.
            sums = (int(count), int(late or 0), float(sum_dev) + 0.0, float(sum_dev2) + 0.0,
                    *[float(x) + 0.0 for x in ratio_sums])
            cell = (int(gi), slot_seconds(slot), key)
            old = merged.get(cell)
            # The same cell can come from the new-range and the late branch: add them up.
            merged[cell] = sums if old is None else tuple(a + b for a, b in zip(old, sums))
        order = sorted(merged, key=lambda cell: (cell[0], cell[1], "" if cell[2] is None else cell[2]))
        cells = [SlotCell(gi, slot, key, sums[0], sums[2], sums[3], sums[1], *sums[4:])
                 for gi, slot, key in order for sums in (merged[(gi, slot, key)],)]
        arrival = since.arrival if since is not None else None
        arrival_max = _arrival_out(arrival_max)
        if arrival_max is not None and (arrival is None or _arrival_greater(arrival_max, arrival)):
            arrival = arrival_max
        return Batch(
            cells=tuple(cells),
            excluded={r: excluded[r] for r in EXCLUSION_REASONS if r in excluded},
            new_events=sum(c.n for c in cells),
            late_events=sum(c.late for c in cells),
            watermark=Watermark(cutoff=cutoff, arrival=arrival),
        )

    def count_before(self, spec: SourceSpec, moment: datetime, arrival_max) -> int:
        """Rows (valid or not) dated before ``moment`` that had arrived by ``arrival_max``.

        For verification: a before/after look counts rows dated before its start that
        arrive after the baseline was read (``before_start``); the difference of two
        counts replays that without pulling the rows.
        """

        def work(conn):
            _cols, parts = self._row_parts(conn, spec)
            if parts.arrival is None:
                raise InvalidArgumentError(f"table {spec.table!r} has no arrival column to count by")
            before = self._dialect.time_bounds(parts.kind, utc(moment, "moment"))
            bound_arrival = self._dialect.bind_arrival(parts.arrival_type, arrival_max)
            return int(conn.execute(count_before_statement(self._dialect, parts, before, bound_arrival)).scalar())

        return self._connect(spec, work)

    def read_rows(self, spec: SourceSpec, cutoff: datetime, arrival_max=None):
        """Valid rows with time <= ``cutoff`` (and arrival <= ``arrival_max``), for verification.

        Returns a pandas DataFrame with columns ``group_index``, ``value``,
        ``time`` (aware UTC) and ``key`` (and ``denominator`` for a ratio metric);
        ``.attrs["excluded"]`` counts the bad
        rows by reason. Raw rows are pulled here only to re-check a look.
        """
        # lazy: only verification pulls raw rows; a look never loads pandas.
        import pandas as pd

        cutoff = utc(cutoff, "cutoff")

        def work(conn):
            _cols, parts = self._row_parts(conn, spec)
            bound_arrival = None
            if arrival_max is not None:
                if parts.arrival is None:
                    raise InvalidArgumentError(f"arrival_max given but table {spec.table!r} has no arrival column")
                bound_arrival = self._dialect.bind_arrival(parts.arrival_type, arrival_max)
            upper = self._dialect.time_bounds(parts.kind, cutoff)
            rows, counts = rows_statements(self._dialect, parts, upper, bound_arrival,
                                           window=self._window_bounds(parts.kind, spec))
            return parts.kind, conn.execute(rows).all(), conn.execute(counts).all()

        kind, rows, counts = self._connect(spec, work)
        columns = ["group_index", "value", "time", "key"] + (["denominator"] if spec.denominator_column else [])
        frame = pd.DataFrame(rows, columns=columns)
        frame["group_index"] = frame["group_index"].astype("int64")
        frame["value"] = frame["value"].astype("float64")
        if spec.denominator_column:
            frame["denominator"] = frame["denominator"].astype("float64")
        frame["time"] = to_utc_timestamps(frame["time"], kind)
        frame["key"] = frame["key"].astype(object).where(frame["key"].notna(), None)
        frame = frame.sort_values(["time", "group_index"], kind="stable").reset_index(drop=True)
        excluded = dict(counts)
        frame.attrs["excluded"] = {r: int(excluded[r]) for r in EXCLUSION_REASONS if r in excluded}
        return frame

    # ------------------------------------------------------------------ check

    def check(self, spec: SourceSpec) -> list[str]:
        """Problems that would stop or weaken the reads; warnings start with ``"warning:"``.

        Raises SourceUnavailableError when the source cannot be reached.
        """
        return self._connect(spec, lambda conn: self._problems(conn, spec))

    def _problems(self, conn, spec) -> list[str]:
        try:
            cols = self._columns(conn, spec, refresh=True)
        except SourceSchemaError as error:
            return [str(error)]
        problems = [f"table {spec.table!r} has no column {column!r} ({role})" for role, column in cols.missing(spec)]
        if problems:
            return problems
        for role, column in _numeric_roles(spec):
            value_problem = self._dialect.value_type_problem(cols.declared_type(column))
            if value_problem:
                problems.append(f"{role} {column!r} {value_problem}")
        try:
            kind, _settled = self._detect_time_kind(conn, spec, cols)
        except SourceSchemaError as error:
            problems.append(str(error))
            kind = None
        if kind is not None:
            problems.extend(time_problems(conn, self._dialect, spec, row_parts(self._dialect, spec, cols, kind)))
        problems.extend(reading_warnings(conn, self._dialect, spec, cols))
        return problems


def _numeric_roles(spec) -> list[tuple[str, str]]:
    """(role, column) of the columns that must hold numbers."""
    roles = [("value_column", spec.value_column)]
    if spec.denominator_column:
        roles.append(("denominator_column", spec.denominator_column))
    return roles


def _arrival_greater(a, b) -> bool:
    try:
        return a > b
    except TypeError:
        return str(a) > str(b)


def _arrival_out(value):
    """An arrival value as the contract's int | float | str."""
    if value is None or isinstance(value, (int, str)) and not isinstance(value, bool):
        return value
    if isinstance(value, datetime):
        return utc(value, "arrival").isoformat()
    if isinstance(value, Decimal):
        return int(value) if value == value.to_integral_value() else float(value)
    if isinstance(value, float):
        return int(value) if value.is_integer() else value
    if isinstance(value, date):
        return value.isoformat()
    return str(value)
