"""Logger time to seconds: timestamps (ISO, day-first, month-first), a date column with a clock column, a clock
alone, or elapsed time in a unit.

The day/month order of a date such as 03/04/2024 is read from the column itself (a first field above 12 means
day-first, a second field above 12 month-first); a column where no date says which gets an error naming a cell
and the map key ``[time] date_order``, because the wrong guess moves a run that crosses midnight by weeks.
"""

from __future__ import annotations

import datetime as dt
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np

from .errors import Choice, LoggerImportError

_DATE = r"(?P<a>\d{1,4})(?P<sep>[./-])(?P<b>\d{1,2})(?P=sep)(?P<c>\d{1,4})"
_TIME = (r"(?P<H>\d{1,2}):(?P<M>\d{2})(?::(?P<S>\d{2})(?:[.,](?P<F>\d{1,9}))?)?"
         r"(?:\s*(?P<P>[AaPp]\.?[Mm]\.?))?")
_ZONE = r"(?:\s*(?P<Z>Z|UTC|[+-]\d{2}(?::?\d{2})?))?"
STAMP = re.compile(rf"^{_DATE}(?:T|\s+){_TIME}{_ZONE}$")
DATE = re.compile(rf"^{_DATE}$")
CLOCK = re.compile(rf"^{_TIME}{_ZONE}$")
ORDERS = ("day-first", "month-first", "year-first")
ORDER_KEY = "[time] date_order"
STAMP_KIND, DATE_KIND, CLOCK_KIND = "timestamp", "date", "clock time"


def kind_of(cells: Sequence[str]) -> str | None:
    """"timestamp", "date" or "clock time" when most non-empty cells are one (a stray bad cell is named later, when
    every cell is read, rather than hiding the column); None otherwise."""
    filled = [c.strip() for c in cells if c.strip()]
    for kind, pattern in ((STAMP_KIND, STAMP), (DATE_KIND, DATE), (CLOCK_KIND, CLOCK)):
        if filled and mostly(pattern.match(c) is not None for c in filled):
            return kind
    return None


def mostly(hits: Iterable[bool]) -> bool:
    """Nine in ten or more."""
    flags = list(hits)
    return 10 * sum(flags) >= 9 * len(flags)


@dataclass(frozen=True)
class Where:
    """A cell of the logger file, for messages."""

    name: str
    line: int
    column: str
    text: str

    def __str__(self) -> str:
        return f"{self.name}: line {self.line}, column {self.column}: {self.text!r}"


def _match(pattern: re.Pattern[str], w: Where, what: str) -> re.Match[str]:
    m = pattern.match(w.text.strip())
    if m is None:
        raise LoggerImportError(f"{w}: not a {what} like the rows above it")
    return m


def _clock_seconds(m: re.Match[str], w: Where) -> tuple[int, float, int | None]:
    """Whole seconds since midnight, the fraction, and the zone offset in minutes (None: local time)."""
    h, mi, s = int(m["H"]), int(m["M"]), int(m["S"] or 0)
    if m["P"]:
        if not 1 <= h <= 12:
            raise LoggerImportError(f"{w}: hour {h} with AM/PM")
        h = h % 12 + (12 if m["P"][0] in "Pp" else 0)
    if h > 23 or mi > 59 or s > 59:
        raise LoggerImportError(f"{w}: not a time of day")
    frac = float("0." + m["F"]) if m["F"] else 0.0
    zone = None
    if m["Z"]:
        z = m["Z"]
        if z in ("Z", "UTC"):
            zone = 0
        else:
            digits = z[1:].replace(":", "")
            zone = (int(digits[:2]) * 60 + int(digits[2:4] or 0)) * (1 if z[0] == "+" else -1)
    return h * 3600 + mi * 60 + s, frac, zone


def date_order(cells: Sequence[Where], pattern: re.Pattern[str], given: str | None) -> tuple[str, Choice]:
    """Year-first, day-first or month-first for a whole column, from its own values where they decide it."""
    found = [(w, _match(pattern, w, "date")) for w in cells]
    year_first = [w for w, m in found if len(m["a"]) == 4]
    if year_first:
        other = next((w for w, m in found if len(m["a"]) != 4), None)
        if other is not None:
            raise LoggerImportError(f"{other}: the date is not year-first like {year_first[0].text!r} on line "
                                    f"{year_first[0].line}")
        if given not in (None, "year-first"):
            raise LoggerImportError(f"{year_first[0]}: the date starts with the year, but {ORDER_KEY} = {given!r}")
        return "year-first", Choice("date order", "year-first", "the year comes first")
    day = next((w for w, m in found if int(m["a"]) > 12), None)
    month = next((w for w, m in found if int(m["b"]) > 12), None)
    if day and month:
        raise LoggerImportError(f"{day} puts the day first and line {month.line}: {month.text!r} the month; "
                                "correct the file")
    told = "day-first" if day else "month-first" if month else None
    if given is not None:
        if told is not None and told != given:
            raise LoggerImportError(f"{day or month} is {told}, but {ORDER_KEY} = {given!r}")
        return given, Choice("date order", given, "from the map")
    if told is None:
        w, m = found[0]
        raise LoggerImportError(
            f"{w}: the day/month order cannot be told (no day above 12 in the column): {m['a']}{m['sep']}{m['b']} "
            f"could be day {m['a']} of month {m['b']} or the reverse; set {ORDER_KEY} = \"day-first\" or "
            "\"month-first\" in the map")
    evidence = day or month
    assert evidence is not None
    return told, Choice("date order", told, f"line {evidence.line}: {evidence.text!r} can only be read so",
                        ORDER_KEY)


def _day_number(m: re.Match[str], order: str, w: Where) -> int:
    a, b, c = int(m["a"]), int(m["b"]), int(m["c"])
    if order == "year-first":
        y, mo, d = a, b, c
    else:
        if len(m["c"]) not in (2, 4):
            raise LoggerImportError(f"{w}: the year must have two or four digits")
        y = c + 2000 if len(m["c"]) == 2 else c
        d, mo = (a, b) if order == "day-first" else (b, a)
    try:
        return dt.date(y, mo, d).toordinal()
    except ValueError as e:
        raise LoggerImportError(f"{w}: not a date ({e}) when read {order}") from e


@dataclass(frozen=True)
class WallTime:
    """Seconds of each row from the first, and anything worth saying about how they were read."""

    seconds: np.ndarray
    notes: list[Choice]


def from_timestamps(stamps: Sequence[Where], order: str) -> WallTime:
    """A timestamp column (date and time in one cell)."""
    matches = [_match(STAMP, w, "timestamp") for w in stamps]
    return _wall(stamps, [_day_number(m, order, w) for w, m in zip(stamps, matches, strict=True)], matches)


def from_date_and_clock(dates: Sequence[Where], clocks: Sequence[Where], order: str) -> WallTime:
    """A date column and a clock column read together."""
    days = [_day_number(_match(DATE, w, "date"), order, w) for w in dates]
    return _wall(clocks, days, [_match(CLOCK, w, "clock time") for w in clocks])


def from_clock(clocks: Sequence[Where]) -> WallTime:
    """Clock times alone; a step back of more than 12 h is taken as midnight passing (and said)."""
    matches = [_match(CLOCK, w, "clock time") for w in clocks]
    days, day, prev = [], 0, None
    notes: list[Choice] = []
    for w, m in zip(clocks, matches, strict=True):
        sod = _clock_seconds(m, w)[0]
        if prev is not None and sod < prev:
            if prev - sod <= 12 * 3600:
                raise LoggerImportError(f"{w}: the clock goes back from line {w.line - 1}'s; rows must be in time "
                                        "order")
            day += 1
            notes.append(Choice("midnight", f"passed before line {w.line}", "the clock time went back by over 12 h"))
        prev = sod
        days.append(day)
    wall = _wall(clocks, days, matches)
    return WallTime(wall.seconds, notes)


def _wall(cells: Sequence[Where], days: Sequence[int], matches: Sequence[re.Match[str]]) -> WallTime:
    """``days``: date ordinals, or whole days since the first row for clock times alone."""
    whole: list[int] = []
    fracs: list[float] = []
    zoned: set[bool] = set()
    for w, day, m in zip(cells, days, matches, strict=True):
        sod, frac, zone = _clock_seconds(m, w)
        zoned.add(zone is not None)
        if len(zoned) > 1:
            raise LoggerImportError(f"{w}: some times carry a time zone and others do not")
        whole.append(day * 86400 + sod - (zone or 0) * 60)
        fracs.append(frac)
    seconds = (np.asarray(whole, dtype=np.int64) - whole[0]).astype(float) + (np.asarray(fracs) - fracs[0])
    return WallTime(seconds, [])


def from_elapsed(values: np.ndarray, scale: float) -> np.ndarray:
    """Elapsed time in the logger's unit to seconds from the first row."""
    s = np.asarray(values, dtype=float) * scale
    return s - s[0]
