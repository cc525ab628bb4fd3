"""How a time column stores its events, and cutoffs written the same way.

Every read compares the raw time column with a bound value in the column's own
type or stored text layout, so the database can use its index. This module
knows the storage kinds (SQL timestamp, date, epoch seconds, ISO-8601 text)
and writes a cutoff in each; it issues no SQL.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from datetime import datetime, timedelta, timezone
from decimal import Decimal

__all__ = ["ISO_PATTERN", "IsoLayout", "TimeKind", "bind_time", "to_utc_timestamps"]

ISO_PATTERN = re.compile(
    r"^(?P<date>\d{4}-\d{2}-\d{2})"
    r"(?:(?P<sep>[T ])(?P<hm>\d{2}:\d{2})(?P<sec>:\d{2}(?P<frac>\.\d+)?)?)?"
    r"(?P<zone>Z|[+-]\d{2}:\d{2})?$"
)


@dataclass(frozen=True)
class IsoLayout:
    """The text layout of an ISO-8601 time column, detected from one stored value."""

    sep: str | None  # None: date only
    seconds: bool
    frac_digits: int
    zone: str  # "", "Z" or "+HH:MM"

    # Used while a table is still empty: any layout partitions no rows.
    @classmethod
    def default(cls) -> "IsoLayout":
        return cls(sep=" ", seconds=True, frac_digits=0, zone="")

    @classmethod
    def detect(cls, text: str) -> "IsoLayout | None":
        m = ISO_PATTERN.match(text.strip())
        if not m:
            return None
        frac = m.group("frac")
        return cls(
            sep=m.group("sep"),
            seconds=m.group("sec") is not None,
            frac_digits=len(frac) - 1 if frac else 0,
            zone=m.group("zone") or "",
        )

    @property
    def offset(self) -> timedelta:
        if self.zone in ("", "Z"):
            return timedelta(0)
        sign = -1 if self.zone[0] == "-" else 1
        return sign * timedelta(hours=int(self.zone[1:3]), minutes=int(self.zone[4:6]))

    def format(self, moment: datetime) -> str:
        """Write ``moment`` (aware) in this layout, truncating what the layout cannot hold.

        Truncation is monotone, so consecutive ``(previous, cutoff]`` ranges still
        partition the rows exactly.
        """
        local = moment.astimezone(timezone(self.offset)).replace(tzinfo=None)
        text = local.strftime("%Y-%m-%d")
        if self.sep is None:
            return text
        text += self.sep + local.strftime("%H:%M")
        if self.seconds:
            text += local.strftime(":%S")
            if self.frac_digits:
                micro = f"{local.microsecond:06d}"
                text += "." + (micro + "0" * self.frac_digits)[: self.frac_digits]
        return text + self.zone


@dataclass(frozen=True)
class TimeKind:
    """How the time column is stored: decides the bound cutoff and the epoch expression."""

    kind: str  # "timestamp" | "date" | "epoch" | "iso" | "stored" (each value by its storage class)
    timezone_aware: bool = False
    integer: bool = False
    decimal: bool = False
    iso: IsoLayout | None = None


def bind_time(kind: TimeKind, moment: datetime):
    """``moment`` (aware UTC) as a value of the time column's own type or stored format."""
    if kind.kind == "iso":
        return kind.iso.format(moment)
    if kind.kind == "epoch":
        seconds = moment.timestamp()
        if kind.integer:
            return math.floor(seconds)
        if kind.decimal:
            return Decimal(repr(seconds))
        return seconds
    if kind.kind == "date":
        return moment.date()
    if kind.timezone_aware:
        return moment
    return moment.replace(tzinfo=None)


def to_utc_timestamps(series, kind: TimeKind):
    """Stored times (as the driver returns them) as an aware-UTC pandas series; naive is UTC."""
    # lazy: only verification pulls raw rows; a look never loads pandas.
    import pandas as pd

    if series.empty:
        return pd.Series(pd.DatetimeIndex([], tz="UTC"), index=series.index)
    if kind.kind == "stored":
        # Text and numbers side by side (SQLite): each read by its own storage class.
        text = series.map(lambda v: isinstance(v, str))
        out = pd.Series(pd.NaT, index=series.index, dtype="datetime64[ns, UTC]")
        if text.any():
            out[text] = pd.to_datetime(series[text].astype(str), utc=True, format="ISO8601")
        if (~text).any():
            out[~text] = pd.to_datetime(series[~text].astype("float64"), unit="s", utc=True)
        return out
    if kind.kind == "epoch":
        return pd.to_datetime(series.astype("float64"), unit="s", utc=True)
    if kind.kind == "iso":
        return pd.to_datetime(series.astype(str), utc=True, format="ISO8601")
    return pd.to_datetime(series, utc=True)
