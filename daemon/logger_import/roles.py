"""Which column is what: the time, the temperatures, the heater power.

Taken from the map where it names them, otherwise found:
- time: a timestamp column, a date column with a clock-time column, a clock-time column, or a number column
  whose unit is a time unit or whose name says time ("Time", "Elapsed", "t", "Seconds" ...); exactly one must be
  found, else ``[columns] time`` decides;
- temperatures: every number column in °C, K or °F (by its units line or its name); sensor names come from the
  column names;
- power: a column in W/m, else one in W, else one in V with one in A; two of a kind need the map.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass

from .clock import CLOCK_KIND, DATE_KIND, STAMP_KIND, kind_of, mostly
from .errors import Choice, LoggerImportError, MapError
from .mapping import ColumnRef, LoggerMap
from .numbers import looks_numeric
from .units import CURRENT, POWER, TEMPERATURE, TIME, VOLTAGE, Q, Unit, parse_unit, split_name

NUMBER, TEXT, EMPTY = "number", "text", "empty"
SAMPLE_ROWS = 200
_TIME_NAME = re.compile(r"^(t|time|elapsed|elapsed[ _]time|time[ _]elapsed|seconds|secs?|rel(ative)?[ _.]time|"
                        r"run[ _]?time|time[ _]since[ _]start|sec(ond)?s?[ _]elapsed)$", re.IGNORECASE)
_DEFAULT_UNIT = {TEMPERATURE: "°C", VOLTAGE: "V", CURRENT: "A", POWER: "W", Q: "W/m", TIME: "s"}


@dataclass(frozen=True)
class Column:
    index: int
    name: str
    base: str
    unit: Unit | None
    unit_text: str | None
    unit_from: str
    kind: str

    @property
    def label(self) -> str:
        return repr(self.name) if self.name else f"{self.index + 1}"

    def unit_for(self, quantity: str, name: str, key: str) -> tuple[Unit, str]:
        """The unit to read this column in, and how it was found; an error when it is not a ``quantity`` unit."""
        if self.unit is None:
            if self.unit_text is not None:
                raise LoggerImportError(f"{name}: column {self.label}: unit {self.unit_text!r} ({self.unit_from}) "
                                        f"is not one linerig reads; set [units] {self._key()} = the {quantity} unit")
            default = _DEFAULT_UNIT[quantity]
            return parse_unit(default) or Unit(quantity, default), "none given, so the usual one"
        if self.unit.quantity != quantity:
            raise LoggerImportError(f"{name}: column {self.label} is in {self.unit.symbol} ({self.unit_from}), not a "
                                    f"{quantity}; check {key}, or set [units] {self._key()}")
        return self.unit, f"from {self.unit_from}"

    def _key(self) -> str:
        return f'"{self.name}"' if self.name else f'"{self.index + 1}"'


@dataclass(frozen=True)
class Roles:
    time: tuple[Column, ...]  # one column, or (date, clock)
    temperatures: dict[str, Column]
    power_kind: str  # "q", "power" or "voltage" (volts and amps)
    power: tuple[Column, ...]  # one column, or (volts, amps)
    choices: list[Choice]


def describe_columns(names: Sequence[str], units_row: Sequence[str] | None, units_line: int | None,
                     rows: Sequence[tuple[int, list[str]]], m: LoggerMap) -> list[Column]:
    """Each column's name, unit (the map's, else the units line's, else its name's) and kind of content."""
    sample = [cells for _, cells in rows[:SAMPLE_ROWS]]
    cols = []
    for i, name in enumerate(names):
        base, from_name = split_name(name)
        unit_text, unit_from = None, ""
        if units_row is not None and i < len(units_row) and units_row[i].strip():
            unit_text, unit_from = units_row[i].strip(), f"units line {units_line}"
        elif from_name is not None:
            unit_text, unit_from = from_name, "its name"
        filled = [c for r in sample if (c := r[i].strip())]
        kind = kind_of(filled) or (NUMBER if mostly(looks_numeric(c) for c in filled) else TEXT)
        if not filled:
            kind = EMPTY
        cols.append(Column(i, name, base or name, parse_unit(unit_text) if unit_text else None, unit_text,
                           unit_from, kind))
    for ref, text in m.units.items():
        col = find_column(cols, ref, m, ("units", ref))
        cols[col.index] = Column(col.index, col.name, col.base, parse_unit(text), text,
                                 f"the map{f', the file says {col.unit_text}' if col.unit_text else ''}", col.kind)
    return cols


def find_column(cols: Sequence[Column], ref: ColumnRef, m: LoggerMap, dotted: tuple[str, ...]) -> Column:
    """A column by number, by its whole name, by its name without the unit, then ignoring case."""
    if isinstance(ref, int):
        if ref > len(cols):
            raise MapError(f"{m.where(*dotted)}: column {ref}, but the file has {len(cols)}")
        return cols[ref - 1]
    for same in (lambda c: c.name == ref, lambda c: c.base == ref,
                 lambda c: ref.casefold() in (c.name.casefold(), c.base.casefold())):
        hits = [c for c in cols if same(c)]
        if len(hits) > 1:
            raise MapError(f"{m.where(*dotted)}: {ref!r} names columns {', '.join(str(c.index + 1) for c in hits)}; "
                           "give the column's number instead")
        if hits:
            return hits[0]
    raise MapError(f"{m.where(*dotted)}: no column {ref!r}; the header has {', '.join(repr(c.name) for c in cols)}")


def assign_roles(cols: list[Column], m: LoggerMap, name: str) -> Roles:
    choices: list[Choice] = []
    time = _time(cols, m, name, choices)
    power_kind, power = _power(cols, m, name, choices)
    used = {c.index for c in (*time, *power)}
    temps = _temperatures(cols, m, name, used, choices)
    return Roles(time, temps, power_kind, power, choices)


def _time(cols: list[Column], m: LoggerMap, name: str, choices: list[Choice]) -> tuple[Column, ...]:
    if m.date is not None and m.time is None:
        raise MapError(f"{m.where('columns', 'date')}: give the clock-time column as [columns] time too")
    if m.time is not None:
        col = find_column(cols, m.time, m, ("columns", "time"))
        if m.date is not None:
            date = find_column(cols, m.date, m, ("columns", "date"))
            if date.kind != DATE_KIND or col.kind != CLOCK_KIND:
                raise MapError(f"{m.where('columns', 'date')}: expected a date column ({date.label} holds "
                               f"{date.kind}) and [columns] time a clock-time column ({col.label} holds {col.kind})")
            choices.append(Choice("time", f"columns {date.label} and {col.label}", "from the map"))
            return date, col
        if col.kind == DATE_KIND:
            raise MapError(f"{m.where('columns', 'time')}: {col.label} holds dates only; name the clock-time column "
                           "as time and this one as [columns] date")
        if col.kind not in (STAMP_KIND, CLOCK_KIND, NUMBER):
            raise MapError(f"{m.where('columns', 'time')}: {col.label} holds {col.kind}, not times")
        choices.append(Choice("time", f"column {col.label} ({col.kind})", "from the map"))
        return (col,)
    found: list[tuple[Column, ...]] = [(c,) for c in cols if c.kind == STAMP_KIND]
    dates = [c for c in cols if c.kind == DATE_KIND]
    clocks = [c for c in cols if c.kind == CLOCK_KIND]
    if len(dates) == 1 and len(clocks) == 1:
        found.append((dates[0], clocks[0]))
    else:
        found += [(c,) for c in clocks]
    found += [(c,) for c in cols if c.kind == NUMBER and ((c.unit is not None and c.unit.quantity == TIME)
                                                          or (c.unit is None and _TIME_NAME.match(c.base.strip())))]
    if not found:
        raise LoggerImportError(f"{name}: no time column found (a timestamp, a clock time, or a number column named "
                                "or in units of time); set [columns] time in the map")
    if len(found) > 1:
        listed = "; ".join(" with ".join(f"column {c.index + 1} {c.label} ({c.kind})" for c in f) for f in found)
        raise LoggerImportError(f"{name}: more than one column could be the time: {listed}; set [columns] time "
                                "(and [columns] date for a date column of its own) in the map")
    pick = found[0]
    choices.append(Choice("time", " and ".join(f"column {c.label}" for c in pick),
                          " with ".join(c.kind for c in pick) + ", the only time column", "[columns] time"))
    return pick


def _power(cols: list[Column], m: LoggerMap, name: str, choices: list[Choice]) -> tuple[str, tuple[Column, ...]]:
    for key in ("q", "power"):
        ref = getattr(m, key)
        if ref is not None:
            col = find_column(cols, ref, m, ("columns", key))
            choices.append(Choice("heater power", f"column {col.label} ({'W/m' if key == 'q' else 'W'})",
                                  "from the map"))
            return key, (col,)
    if m.voltage is not None and m.current is not None:
        v = find_column(cols, m.voltage, m, ("columns", "voltage"))
        a = find_column(cols, m.current, m, ("columns", "current"))
        choices.append(Choice("heater power", f"column {v.label} × column {a.label}", "from the map"))
        return "voltage", (v, a)
    numbers = [c for c in cols if c.kind == NUMBER and c.unit is not None]
    for quantity, key, label in ((Q, "q", "W/m"), (POWER, "power", "W")):
        hits = [c for c in numbers if c.unit is not None and c.unit.quantity == quantity]
        if len(hits) > 1:
            raise LoggerImportError(f"{name}: columns {', '.join(c.label for c in hits)} are all in {label}; set "
                                    f"[columns] {key} in the map")
        if hits:
            choices.append(Choice("heater power", f"column {hits[0].label}", f"the only column in {label}",
                                  f"[columns] {key}"))
            return key, (hits[0],)
    volts = [c for c in numbers if c.unit is not None and c.unit.quantity == VOLTAGE]
    amps = [c for c in numbers if c.unit is not None and c.unit.quantity == CURRENT]
    for hits, label in ((volts, "volts"), (amps, "amps")):
        if len(hits) > 1:
            raise LoggerImportError(f"{name}: columns {', '.join(c.label for c in hits)} are all in {label}; set "
                                    "[columns] voltage and [columns] current in the map")
    if volts and amps:
        choices.append(Choice("heater power", f"column {volts[0].label} × column {amps[0].label}",
                              "the only columns in volts and amps", "[columns] voltage, current"))
        return "voltage", (volts[0], amps[0])
    raise LoggerImportError(f"{name}: no heater power found (a column in W/m, one in W, or one in V with one in A); "
                            "set [columns] q, power, or voltage and current in the map")


def sensor_name(base: str, taken: set[str], index: int) -> str:
    """A run CSV sensor name (letters, digits, _) from a column name, unique in the run."""
    s = re.sub(r"[^A-Za-z0-9_]+", "_", base).strip("_") or f"ch{index + 1}"
    out, n = s, 2
    while out in taken:
        out, n = f"{s}_{n}", n + 1
    taken.add(out)
    return out


def _temperatures(cols: list[Column], m: LoggerMap, name: str, used: set[int],
                  choices: list[Choice]) -> dict[str, Column]:
    if m.temperatures:
        temps = {s: find_column(cols, ref, m, ("columns", "temperatures", s)) for s, ref in m.temperatures.items()}
        for s, c in temps.items():
            if c.index in used:
                raise MapError(f"{m.where('columns', 'temperatures', s)}: column {c.label} is already the time or "
                               "the power")
        choices.append(Choice("temperatures", ", ".join(f"{s} = column {c.label}" for s, c in temps.items()),
                              "from the map"))
        return temps
    found = [c for c in cols if c.kind == NUMBER and c.index not in used and c.unit is not None
             and c.unit.quantity == TEMPERATURE]
    if not found:
        raise LoggerImportError(f"{name}: no temperature column found (none in °C, K or °F by a units line or its "
                                "name); set [columns] temperatures = { sensor = \"column\" } in the map")
    taken: set[str] = set()
    temps = {sensor_name(c.base, taken, c.index): c for c in found}
    choices.append(Choice("temperatures", ", ".join(f"{s} = column {c.label}" for s, c in temps.items()),
                          "every column in a temperature unit", "[columns] temperatures"))
    return temps
