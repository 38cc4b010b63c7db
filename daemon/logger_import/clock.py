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


@dataclass(frozen=True)
class Cells:
    """One column's cells (stripped) with their file lines; a Where is made only for a message."""

    name: str
    column: str
    lines: Sequence[int]
    texts: Sequence[str]

    def at(self, i: int) -> Where:
        return Where(self.name, self.lines[i], self.column, self.texts[i])

    def matches(self, pattern: re.Pattern[str], what: str) -> list[re.Match[str]]:
        found = [pattern.match(t) for t in self.texts]
        for i, m in enumerate(found):
            if m is None:
                raise LoggerImportError(f"{self.at(i)}: not a {what} like the rows above it")
        return found  # type: ignore[return-value]


def _clock_seconds(m: re.Match[str], cells: Cells, i: int) -> tuple[int, float, int | None]:
    """Whole seconds since midnight, the fraction, and the zone offset in minutes (None: local time)."""
    hh, mm, ss, ff, ampm, z = m.group("H", "M", "S", "F", "P", "Z")
    h, mi, s = int(hh), int(mm), int(ss or 0)
    if ampm:
        if not 1 <= h <= 12:
            raise LoggerImportError(f"{cells.at(i)}: hour {h} with AM/PM")
        h = h % 12 + (12 if ampm[0] in "Pp" else 0)
    if h > 23 or mi > 59 or s > 59:
        raise LoggerImportError(f"{cells.at(i)}: not a time of day")
    frac = float("0." + ff) if ff else 0.0
    zone = None
    if z:
        if z in ("Z", "UTC"):
            zone = 0
        else:
            digits = z[1:].replace(":", "")
            zone = (int(digits[:2]) * 60 + int(digits[2:4] or 0)) * (1 if z[0] == "+" else -1)
    return h * 3600 + mi * 60 + s, frac, zone


def date_order(cells: Cells, found: Sequence[re.Match[str]], given: str | None) -> tuple[str, Choice]:
    """Year-first, day-first or month-first for a whole column, from its own values where they decide it."""
    year_first = [len(m["a"]) == 4 for m in found]
    if any(year_first):
        first = year_first.index(True)
        if not all(year_first):
            raise LoggerImportError(f"{cells.at(year_first.index(False))}: the date is not year-first like "
                                    f"{cells.texts[first]!r} on line {cells.lines[first]}")
        if given not in (None, "year-first"):
            raise LoggerImportError(f"{cells.at(first)}: the date starts with the year, but {ORDER_KEY} = {given!r}")
        return "year-first", Choice("date order", "year-first", "the year comes first")
    day = next((i for i, m in enumerate(found) if int(m["a"]) > 12), None)
    month = next((i for i, m in enumerate(found) if int(m["b"]) > 12), None)
    if day is not None and month is not None:
        raise LoggerImportError(f"{cells.at(day)} puts the day first and line {cells.lines[month]}: "
                                f"{cells.texts[month]!r} the month; correct the file")
    told = "day-first" if day is not None else "month-first" if month is not None else None
    evidence = day if day is not None else month
    if given is not None:
        if told is not None and told != given:
            raise LoggerImportError(f"{cells.at(evidence)} is {told}, but {ORDER_KEY} = {given!r}")  # type: ignore[arg-type]
        return given, Choice("date order", given, "from the map")
    if told is None or evidence is None:
        m = found[0]
        raise LoggerImportError(
            f"{cells.at(0)}: the day/month order cannot be told (no day above 12 in the column): {m['a']}{m['sep']}"
            f"{m['b']} could be day {m['a']} of month {m['b']} or the reverse; set {ORDER_KEY} = \"day-first\" or "
            "\"month-first\" in the map")
    return told, Choice("date order", told, f"line {cells.lines[evidence]}: {cells.texts[evidence]!r} can only be "
                        "read so", ORDER_KEY)


def _day_numbers(cells: Cells, found: Sequence[re.Match[str]], order: str) -> list[int]:
    """Date ordinals (each distinct date worked out once)."""
    known: dict[tuple[str, str, str], int] = {}
    out = []
    for i, m in enumerate(found):
        key = (m["a"], m["b"], m["c"])
        if key not in known:
            known[key] = _day_number(key, order, cells, i)
        out.append(known[key])
    return out


def _day_number(abc: tuple[str, str, str], order: str, cells: Cells, i: int) -> int:
    a, b, c = (int(x) for x in abc)
    if order == "year-first":
        y, mo, d = a, b, c
    else:
        if len(abc[2]) not in (2, 4):
            raise LoggerImportError(f"{cells.at(i)}: the year must have two or four digits")
        y = c + 2000 if len(abc[2]) == 2 else c
        d, mo = (a, b) if order == "day-first" else (b, a)
    try:
        return dt.date(y, mo, d).toordinal()
    except ValueError as e:
        raise LoggerImportError(f"{cells.at(i)}: not a date ({e}) when read {order}") from e


@dataclass(frozen=True)
class WallTime:
    """Seconds of each row from the first, and anything worth saying about how they were read."""

    seconds: np.ndarray
    notes: list[Choice]


def from_timestamps(stamps: Cells, given_order: str | None) -> tuple[WallTime, Choice]:
    """A timestamp column (date and time in one cell), and how its date order was settled."""
    found = stamps.matches(STAMP, "timestamp")
    order, how = date_order(stamps, found, given_order)
    return _wall(stamps, _day_numbers(stamps, found, order), found), how


def from_date_and_clock(dates: Cells, clocks: Cells, given_order: str | None) -> tuple[WallTime, Choice]:
    """A date column and a clock column read together."""
    found = dates.matches(DATE, "date")
    order, how = date_order(dates, found, given_order)
    return _wall(clocks, _day_numbers(dates, found, order), clocks.matches(CLOCK, "clock time")), how


def from_clock(clocks: Cells) -> WallTime:
    """Clock times alone; a step back of more than 12 h is taken as midnight passing (and said)."""
    found = clocks.matches(CLOCK, "clock time")
    days, day, prev = [], 0, None
    notes: list[Choice] = []
    for i, m in enumerate(found):
        sod = _clock_seconds(m, clocks, i)[0]
        if prev is not None and sod < prev:
            if prev - sod <= 12 * 3600:
                raise LoggerImportError(f"{clocks.at(i)}: the clock goes back from line {clocks.lines[i - 1]}'s; "
                                        "rows must be in time order")
            day += 1
            notes.append(Choice("midnight", f"passed before line {clocks.lines[i]}",
                                "the clock time went back by over 12 h"))
        prev = sod
        days.append(day)
    return WallTime(_wall(clocks, days, found).seconds, notes)


def _wall(cells: Cells, days: Sequence[int], found: Sequence[re.Match[str]]) -> WallTime:
    """``days``: date ordinals, or whole days since the first row for clock times alone."""
    whole: list[int] = []
    fracs: list[float] = []
    zoned: set[bool] = set()
    for i, (day, m) in enumerate(zip(days, found, strict=True)):
        sod, frac, zone = _clock_seconds(m, cells, i)
        zoned.add(zone is not None)
        if len(zoned) > 1:
            raise LoggerImportError(f"{cells.at(i)}: some times carry a time zone and others do not")
        whole.append(day * 86400 + sod - (zone or 0) * 60)
        fracs.append(frac)
    seconds = (np.asarray(whole, dtype=np.int64) - whole[0]).astype(float) + (np.asarray(fracs) - fracs[0])
    return WallTime(seconds, [])


def from_elapsed(values: np.ndarray, scale: float) -> np.ndarray:
    """Elapsed time in the logger's unit to seconds from the first row."""
    s = np.asarray(values, dtype=float) * scale
    return s - s[0]
