"""The demo scenario: Corvane Provisions, an invented regional grocery distributor.

Corvane runs two distribution centres (Hollin Cross and Saltmarsh Lane), two
customer-service desks (Heron and Wren), a packing plant with two packing lines
and a rice bagger with two filling heads, a van fleet out of both centres and
a returns room with two grading benches. None of it exists; every number
below is made up to look like the trade.

Each events table is generated one simulated **day** at a time from a seeded
random generator, so any day can be rebuilt on its own (the live feed asks for
days as the simulated clock reaches them) and the same seed always gives the
same rows. Every row carries two times: the event time written to the table
and the **arrival** time at which the feed inserts it. Most rows arrive
seconds after the event; a few arrive hours later (a handheld that synced at
the end of the shift, a ticket typed in from paper), which makes them late
for the monitor: their event time is already behind the previous look's
cutoff when they appear. A small share of rows is bad on purpose (NULL,
non-numeric text, out of range, an unknown group, a rate that is not 0/1,
a missing time) so that the data-quality counts are never empty.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from datetime import datetime, timedelta, timezone

import numpy as np

__all__ = [
    "COMPANY",
    "EPOCH",
    "LIVE_START",
    "DEFAULT_SEED",
    "TableSpec",
    "DemoEvent",
    "TABLES",
    "DATABASES",
    "table_spec",
    "day_events",
    "events_between",
    "first_day",
    "format_time",
    "parse_time",
]

COMPANY = "Corvane Provisions"

# The scenario's calendar: day 0 is Monday 2 March 2026 (UTC). The backlog
# covers days 0 and 1 and the early hours of day 2 (and, for the pick tasks,
# two weeks before that: the baseline of the before/after comparison); the
# live feed starts on day 2 at 06:00, when the new pick path goes live at
# Hollin Cross.
EPOCH = datetime(2026, 3, 2, tzinfo=timezone.utc)
LIVE_START = EPOCH + timedelta(days=2, hours=6)
DEFAULT_SEED = 20260302

TIME_FORMAT = "%Y-%m-%d %H:%M:%S"


def format_time(moment: datetime) -> str:
    """The text written to a time column: ISO-8601 UTC without offset, to the second."""
    return moment.astimezone(timezone.utc).strftime(TIME_FORMAT)


def parse_time(text: str) -> datetime:
    """Inverse of :func:`format_time` (aware UTC)."""
    return datetime.strptime(text, TIME_FORMAT).replace(tzinfo=timezone.utc)


@dataclass(frozen=True)
class TableSpec:
    """One events table of the scenario and the columns the monitor reads."""

    name: str
    database: str                  # file stem of the SQLite source database
    group_column: str
    groups: tuple[str, str]
    value_column: str
    time_column: str
    extra_columns: tuple[str, ...] = ()
    integer_value: bool = False    # counts and 0/1 outcomes
    description: str = ""


@dataclass(frozen=True)
class DemoEvent:
    """One generated row: what goes into the table and when the feed inserts it."""

    arrival: datetime              # simulated time at which the row is inserted
    time: datetime | None          # event time written to the table (None: a bad row)
    group: str
    value: object                  # float, int, None or text (bad rows)
    extra: dict = field(default_factory=dict)

    def row(self, spec: TableSpec) -> dict:
        values = {
            spec.group_column: self.group,
            spec.value_column: self.value,
            spec.time_column: None if self.time is None else format_time(self.time),
        }
        values.update(self.extra)
        return values


TABLES: tuple[TableSpec, ...] = (
    TableSpec(
        "pick_tasks", "warehouse", "site", ("hollin", "saltmarsh"), "seconds", "finished_at",
        ("picker", "aisle"),
        description="seconds to pick one order line, both distribution centres",
    ),
    TableSpec(
        "contacts", "service", "desk", ("heron", "wren"), "resolved", "closed_at",
        ("channel",), integer_value=True,
        description="customer contacts closed by each desk; resolved = 1 when solved on first contact",
    ),
    TableSpec(
        "line_output", "plant", "line", ("line-2", "line-5"), "cases", "hour_ending",
        ("shift",), integer_value=True,
        description="cases packed per hour on two packing lines fed by the same supply",
    ),
    TableSpec(
        "fill_checks", "plant", "head", ("head-1", "head-2"), "grams", "weighed_at",
        ("lot",),
        description="checkweigher samples of 1 kg rice bags from two filling heads",
    ),
    TableSpec(
        "deliveries", "warehouse", "depot", ("hollin", "saltmarsh"), "minutes_late", "delivered_at",
        ("route",),
        description="minutes after the promised window opened, per van drop (negative = early)",
    ),
    TableSpec(
        "returns_grading", "warehouse", "bench", ("bench-1", "bench-2"), "minutes", "graded_at",
        ("reason",),
        description="minutes to grade one returned item; bench 2 opens on Thursday",
    ),
    TableSpec(
        "packing_qc", "plant", "line", ("line-5", "line-2"), "defects", "packed_at",
        ("units", "batch"), integer_value=True,
        description="one row per packed batch: units packed and defects found at the end-of-line check",
    ),
)

DATABASES: tuple[str, ...] = tuple(dict.fromkeys(t.database for t in TABLES))


def table_spec(name: str) -> TableSpec:
    for spec in TABLES:
        if spec.name == name:
            return spec
    raise KeyError(name)


# --- effects of the story -----------------------------------------------------

PICK_PATH_DAY = 2             # the new pick path goes live at Hollin Cross on day 2 ...
PICK_PATH_HOUR = 6            # ... at 06:00
PICK_PATH_SPEEDUP = 0.86      # picks take 14 % less time on the new path
PICK_MEDIAN_SECONDS = 82.0
PICK_LOG_SD = 0.5             # right-skewed: mean about 93 s, sd about 50 s
PICK_HOLLIN_SLOWER = 1.09     # Hollin Cross is an older building: 9 % slower, long before the change
PICK_SITE_DAY_SD = 0.03       # each site's own day-to-day spread (staffing, stock), log scale
PICK_SHARED_DAY_SD = 0.04     # days both sites share (order mix, season), log scale
PICK_HISTORY_DAYS = 14        # pick tasks go back two weeks before day 0 (the baseline)
CONTACT_RECORDING_DAY = 1    # the desks' new ticket system records resolution from Tuesday
BENCH_TWO_OPENS_DAY = 3       # the second grading bench starts on Thursday
BENCH_TWO_OPENS_HOUR = 9
# Defects per unit packed: line 5's resealed jaws run a little cleaner than line 2.
QC_DEFECT_RATE = {"line-2": 0.0040, "line-5": 0.0036}


def _uniform_times(rng, day_start, count, first_hour, last_hour):
    offsets = np.sort(rng.uniform(first_hour * 3600.0, last_hour * 3600.0, size=count))
    return [day_start + timedelta(seconds=float(s)) for s in offsets]


def _arrivals(rng, times, *, typical_delay=30.0, late_share=0.02, late_hours=(1.5, 8.0)):
    """Arrival times: seconds after the event, but a few rows hours later."""
    delays = rng.exponential(typical_delay, size=len(times))
    late = rng.random(len(times)) < late_share
    delays[late] = rng.uniform(late_hours[0] * 3600.0, late_hours[1] * 3600.0, size=int(late.sum()))
    return [t + timedelta(seconds=float(d)) for t, d in zip(times, delays)]


class _Spoiler:
    """Turns a small share of generated rows into the kinds of bad rows real tables hold."""

    def __init__(self, rng, share, kinds):
        self.rng = rng
        self.share = share
        self.kinds = kinds

    def __call__(self, group, value, time):
        if self.rng.random() >= self.share:
            return group, value, time
        kind = self.kinds[int(self.rng.integers(len(self.kinds)))]
        return kind(self.rng, group, value, time)


def _null_value(rng, group, value, time):
    return group, None, time


def _text_value(rng, group, value, time):
    return group, ["n/a", "ERR", "--", "see note"][int(rng.integers(4))], time


def _unknown_group(rng, group, value, time):
    return group.upper() + "-TEMP", value, time


def _null_time(rng, group, value, time):
    return group, value, None


def _out_of_range(replacements):
    def spoil(rng, group, value, time):
        return group, replacements[int(rng.integers(len(replacements)))], time
    return spoil


def _not_binary(rng, group, value, time):
    return group, [2, -1, 7][int(rng.integers(3))], time


def _pick_day(rng, day, day_start):
    events = []
    spoil = _Spoiler(rng, 0.006, [_null_value, _text_value, _unknown_group, _null_time,
                                  _out_of_range([-4.0, 0.0, 86400.0, 7200.5])])
    switch = EPOCH + timedelta(days=PICK_PATH_DAY, hours=PICK_PATH_HOUR)
    # Drawn from their own generator so the day's rows keep their stream.
    shocks = np.random.default_rng([int(rng.integers(2**31)), 7])
    shared = math.exp(shocks.normal(0.0, PICK_SHARED_DAY_SD))
    level = {"hollin": PICK_HOLLIN_SLOWER * shared * math.exp(shocks.normal(0.0, PICK_SITE_DAY_SD)),
             "saltmarsh": shared * math.exp(shocks.normal(0.0, PICK_SITE_DAY_SD))}
    for site in ("hollin", "saltmarsh"):
        # Two shifts, 06:00-22:00, about 90 order lines an hour per site.
        count = int(rng.poisson(90 * 16))
        times = _uniform_times(rng, day_start, count, 6, 22)
        arrivals = _arrivals(rng, times, typical_delay=20.0, late_share=0.015)
        seconds = level[site] * rng.lognormal(math.log(PICK_MEDIAN_SECONDS), PICK_LOG_SD, size=count)
        pickers = rng.integers(1, 19, size=count)
        aisles = rng.integers(1, 41, size=count)
        for t, a, s, p, aisle in zip(times, arrivals, seconds, pickers, aisles):
            if site == "hollin" and t >= switch:
                s *= PICK_PATH_SPEEDUP
            group, value, time = spoil(site, round(float(s), 1), t)
            events.append(DemoEvent(a, time, group, value,
                                    {"picker": f"{site[:2].upper()}{int(p):02d}", "aisle": f"A{int(aisle):02d}"}))
    return events


def _contact_day(rng, day, day_start):
    events = []
    if day < CONTACT_RECORDING_DAY:
        return events
    spoil = _Spoiler(rng, 0.008, [_null_value, _not_binary, _unknown_group, _text_value])
    for desk in ("heron", "wren"):
        # 08:00-20:00, about 25 contacts an hour; both desks solve 74 % on first contact.
        count = int(rng.poisson(25 * 12))
        times = _uniform_times(rng, day_start, count, 8, 20)
        # Tickets taken on paper during a phone outage get typed in hours later.
        arrivals = _arrivals(rng, times, typical_delay=60.0, late_share=0.02)
        resolved = (rng.random(count) < 0.74).astype(int)
        # The ticket system also writes 2 for "resolved on a call back", a
        # code nobody told the monitor about: it is not a 0/1 outcome.
        resolved[rng.random(count) < 0.006] = 2
        channels = rng.choice(["phone", "chat", "email"], size=count, p=[0.5, 0.3, 0.2])
        for t, a, r, ch in zip(times, arrivals, resolved, channels):
            group, value, time = spoil(desk, int(r), t)
            events.append(DemoEvent(a, time, group, value, {"channel": str(ch)}))
    return events


def _line_day(rng, day, day_start):
    events = []
    spoil = _Spoiler(rng, 0.03, [_null_value, _text_value, _out_of_range([-12, 99999])])
    # Both lines share the day's supply and staffing: a common shock per day
    # and per hour, which pairing by day removes. Line 5 packs about 6 cases
    # an hour more since its changeover kit was fitted.
    day_shock = rng.normal(0.0, 35.0)
    hour_shock = rng.normal(0.0, 10.0, size=24)
    for line, edge in (("line-2", 0.0), ("line-5", 6.0)):
        noise = rng.normal(0.0, 14.0, size=24)
        for hour in range(24):
            ending = day_start + timedelta(hours=hour + 1)
            # The line controller posts the hour a few minutes after it ends;
            # now and then the posting fails and is replayed the next morning.
            delay = float(rng.uniform(60, 600))
            if rng.random() < 0.03:
                delay = float(rng.uniform(5 * 3600, 9 * 3600))
            cases = int(round(max(0.0, 420.0 + edge + day_shock + hour_shock[hour] + noise[hour])))
            shift = ("night", "early", "late")[(hour // 8)]
            group, value, time = spoil(line, cases, ending)
            events.append(DemoEvent(ending + timedelta(seconds=delay), time, group, value,
                                    {"shift": shift}))
    return events


def _fill_day(rng, day, day_start):
    events = []
    spoil = _Spoiler(rng, 0.006, [_null_value, _out_of_range([0.0, 2001.3]), _text_value])
    for head in ("head-1", "head-2"):
        # One bag in a few is pulled for the checkweigher: about 30 an hour per
        # head, round the clock. The heads fill to the same target; the
        # machine's fill sigma (2.4 g) is known from the acceptance test.
        count = int(rng.poisson(30 * 24))
        times = _uniform_times(rng, day_start, count, 0, 24)
        arrivals = _arrivals(rng, times, typical_delay=5.0, late_share=0.01)
        grams = rng.normal(1003.0, 2.4, size=count)
        for i, (t, a, g) in enumerate(zip(times, arrivals, grams)):
            group, value, time = spoil(head, round(float(g), 2), t)
            lot = f"R{day:03d}{'ABC'[min(2, int((t - day_start).total_seconds() // 28800))]}"
            events.append(DemoEvent(a, time, group, value, {"lot": lot}))
    return events


def _delivery_day(rng, day, day_start):
    events = []
    spoil = _Spoiler(rng, 0.008, [_null_value, _text_value, _out_of_range([-900.0, 1440.0]),
                                  _unknown_group])
    # Weather and traffic hit every van on the road that day: a day shock
    # shared by both depots, so deliveries on one day are not independent.
    weather = rng.normal(0.0, 9.0)
    for depot, edge in (("hollin", 0.0), ("saltmarsh", 1.5)):
        depot_day = rng.normal(0.0, 3.0)
        count = int(rng.poisson(70))
        times = _uniform_times(rng, day_start, count, 7, 19)
        arrivals = _arrivals(rng, times, typical_delay=120.0, late_share=0.02)
        minutes = rng.normal(4.0 + edge + weather + depot_day, 11.0, size=count)
        routes = rng.integers(1, 13, size=count)
        for t, a, m, r in zip(times, arrivals, minutes, routes):
            group, value, time = spoil(depot, round(float(m), 1), t)
            events.append(DemoEvent(a, time, group, value, {"route": f"{depot[:1].upper()}-{int(r):02d}"}))
    return events


def _returns_day(rng, day, day_start):
    events = []
    spoil = _Spoiler(rng, 0.008, [_null_value, _text_value, _out_of_range([-1.0, 600.0])])
    opens = EPOCH + timedelta(days=BENCH_TWO_OPENS_DAY, hours=BENCH_TWO_OPENS_HOUR)
    for bench in ("bench-1", "bench-2"):
        count = int(rng.poisson(18 * 9))
        times = _uniform_times(rng, day_start, count, 8, 17)
        arrivals = _arrivals(rng, times, typical_delay=40.0, late_share=0.01)
        minutes = rng.lognormal(math.log(4.5), 0.6, size=count)
        reasons = rng.choice(["damaged", "wrong item", "unwanted", "short dated"], size=count)
        for t, a, m, why in zip(times, arrivals, minutes, reasons):
            if bench == "bench-2" and t < opens:
                continue
            group, value, time = spoil(bench, round(float(m), 2), t)
            events.append(DemoEvent(a, time, group, value, {"reason": str(why)}))
    return events


def _qc_day(rng, day, day_start):
    events = []
    spoil = _Spoiler(rng, 0.006, [_null_value, _text_value, _unknown_group])
    # The shift's material lot moves both lines' defect rates a little (shared day shock).
    day_shock = float(np.exp(rng.normal(0.0, 0.08)))
    for line in ("line-2", "line-5"):
        count = int(rng.poisson(6 * 24))                  # a batch every ten minutes or so
        times = _uniform_times(rng, day_start, count, 0, 24)
        arrivals = _arrivals(rng, times, typical_delay=90.0, late_share=0.015)
        units = rng.gamma(4.0, 900.0 / 4.0, size=count).round() + 1
        defects = rng.poisson(QC_DEFECT_RATE[line] * day_shock * units)
        # A batch aborted at start-up is logged with no units (or none at all): no rate to count.
        aborted = rng.random(count) < 0.005
        for i, (t, a, u, d) in enumerate(zip(times, arrivals, units, defects)):
            group, value, time = spoil(line, int(d), t)
            unit_text = None if aborted[i] and i % 2 else (0 if aborted[i] else int(u))
            events.append(DemoEvent(a, time, group, value,
                                    {"units": unit_text, "batch": f"{line[-1]}-{day:03d}-{i:03d}"}))
    return events


_DAY_BUILDERS = {
    "pick_tasks": _pick_day,
    "contacts": _contact_day,
    "line_output": _line_day,
    "fill_checks": _fill_day,
    "deliveries": _delivery_day,
    "returns_grading": _returns_day,
    "packing_qc": _qc_day,
}


def first_day(table: str) -> int:
    """The scenario's first day of ``table`` (negative: history before day 0)."""
    return -PICK_HISTORY_DAYS if table == "pick_tasks" else 0


def day_events(table: str, day: int, *, seed: int = DEFAULT_SEED) -> list[DemoEvent]:
    """Every row of ``table`` whose event falls on scenario day ``day``, in arrival order.

    The generator of a (seed, table, day) triple is independent of every other
    day's, so a day can be rebuilt alone and always comes out the same.
    """
    if day < first_day(table):
        raise ValueError(f"day must be >= {first_day(table)} for {table}, got {day!r}")
    index = [t.name for t in TABLES].index(table)
    # Days before day 0 get their own range of seed words (seed words are never negative).
    rng = np.random.default_rng([int(seed), index, int(day) if day >= 0 else 1_000_000 - int(day)])
    day_start = EPOCH + timedelta(days=day)
    events = _DAY_BUILDERS[table](rng, day, day_start)
    events.sort(key=lambda e: e.arrival)
    return events


# Rows can arrive up to this long after their event time (see _arrivals).
MAX_ARRIVAL_DELAY = timedelta(hours=10)


def events_between(table: str, after: datetime, until: datetime, *, seed: int = DEFAULT_SEED,
                   cache: dict | None = None) -> list[DemoEvent]:
    """Rows of ``table`` arriving in ``(after, until]``, in arrival order.

    ``cache`` (optional, a dict the caller keeps) saves rebuilding a day on
    every call of the live feed.
    """
    start_day = max(first_day(table), (after - MAX_ARRIVAL_DELAY - EPOCH).days)
    last_day = (until - EPOCH).days
    selected = []
    for day in range(start_day, last_day + 1):
        key = (table, day)
        if cache is not None and key in cache:
            events = cache[key]
        else:
            events = day_events(table, day, seed=seed)
            if cache is not None:
                cache[key] = events
        selected.extend(e for e in events if after < e.arrival <= until)
    if cache is not None:
        for key in [k for k in cache if k[0] == table and k[1] < start_day]:
            del cache[key]
    selected.sort(key=lambda e: e.arrival)
    return selected
