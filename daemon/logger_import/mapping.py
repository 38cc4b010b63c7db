"""The mapping file: what a logger export cannot say about itself, in a small TOML file.

::

    [file]                          # all optional: found in the file when not given
    encoding = "cp1252"
    delimiter = ";"                 # ",", ";", "\\t" (or "tab")
    decimal = ","                   # "." or ","
    header_line = 4                 # the line of column names (1 = first line of the file)
    units_line = 5                  # the line of units under it; 0 for none

    [columns]                       # a column by its header name, or by number (1 = first)
    time = "Timestamp"              # a timestamp, a clock time or an elapsed-time column
    date = "Date"                   # with time = a clock-time column, when the date has a column of its own
    temperatures = { probe = "Ch1" }   # sensor name = column
    voltage = "Heater V"            # with current; or power = "..." (W) or q = "..." (W/m)
    current = "Heater A"

    [units]                         # a column's unit when neither a units line nor its name gives it
    "Heater V" = "mV"

    [time]
    date_order = "day-first"        # or "month-first", "year-first"

    [heater]
    length_mm = 60                  # to turn W into W/m
    on_fraction = 0.5               # heater on: power at least this fraction of its heating plateau
"""

from __future__ import annotations

import math
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from linerig.daemon.config import key_line

from .clock import ORDERS
from .errors import MapError
from .units import SYMBOLS, parse_unit

ColumnRef = str | int
ON_FRACTION = 0.5
_SENSOR = re.compile(r"^[A-Za-z0-9_]+$")
_TABLES = {
    "file": ("encoding", "delimiter", "decimal", "header_line", "units_line"),
    "columns": ("time", "date", "temperatures", "voltage", "current", "power", "q"),
    "units": (),
    "time": ("date_order",),
    "heater": ("length_mm", "on_fraction"),
}
_DELIMITERS = {",": ",", ";": ";", "\t": "\t", "tab": "\t"}
POWER_KEYS = ("q", "power", "voltage")


@dataclass(frozen=True)
class LoggerMap:
    """What the map says; None (or empty) wherever the file is left to say it."""

    source: str = "no map"
    text: str = ""
    encoding: str | None = None
    delimiter: str | None = None
    decimal: str | None = None
    header_line: int | None = None
    units_line: int | None = None
    time: ColumnRef | None = None
    date: ColumnRef | None = None
    temperatures: dict[str, ColumnRef] = field(default_factory=dict)
    voltage: ColumnRef | None = None
    current: ColumnRef | None = None
    power: ColumnRef | None = None
    q: ColumnRef | None = None
    units: dict[str, str] = field(default_factory=dict)
    date_order: str | None = None
    length_mm: float | None = None
    on_fraction: float = ON_FRACTION

    def where(self, *dotted: str) -> str:
        """``map.toml line 7: [columns] time`` for a message (the line when it can be found)."""
        # the key itself, else the nearest table holding it (a key inside an inline table has no line of its own)
        line = next((n for i in range(len(dotted), 0, -1) if (n := key_line(self.text, list(dotted[:i])))), None)
        key = f"[{dotted[0]}] {'.'.join(dotted[1:])}" if len(dotted) > 1 else f"[{dotted[0]}]"
        return f"{self.source}{f' line {line}' if line else ''}: {key}"


def read_map(path: Path) -> LoggerMap:
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as e:
        raise MapError(f"{path}: cannot read the map ({e})") from e
    return parse_map(text, str(path))


def parse_map(text: str, source: str) -> LoggerMap:
    """Check every key and value; a mistake is named with its line, never ignored."""
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise MapError(f"{source}: not valid TOML: {e}") from e
    blank = LoggerMap(source, text)
    for table, value in doc.items():
        if table not in _TABLES:
            raise MapError(f"{blank.where(table)}: unknown table; expected {', '.join(f'[{t}]' for t in _TABLES)}")
        if not isinstance(value, dict):
            raise MapError(f"{blank.where(table)}: expected a table [{table}]")
        for key in value:
            if _TABLES[table] and key not in _TABLES[table]:
                raise MapError(f"{blank.where(table, key)}: unknown key; expected one of "
                               f"{', '.join(_TABLES[table])}")
    f, c, h = doc.get("file", {}), doc.get("columns", {}), doc.get("heater", {})
    kw: dict[str, Any] = {}
    if "encoding" in f:
        kw["encoding"] = _text(blank, ("file", "encoding"), f["encoding"])
    if "delimiter" in f:
        d = f["delimiter"]
        if d not in _DELIMITERS:
            raise MapError(f"{blank.where('file', 'delimiter')}: expected \",\", \";\" or \"\\t\" (or \"tab\"), "
                           f"got {d!r}")
        kw["delimiter"] = _DELIMITERS[d]
    if "decimal" in f:
        if f["decimal"] not in (".", ","):
            raise MapError(f"{blank.where('file', 'decimal')}: expected \".\" or \",\", got {f['decimal']!r}")
        kw["decimal"] = f["decimal"]
    if kw.get("delimiter") == "," and kw.get("decimal") == ",":
        raise MapError(f"{blank.where('file', 'decimal')}: the comma cannot be both the separator and the decimal "
                       "mark; export the file with semicolons or tabs")
    for key, low in (("header_line", 1), ("units_line", 0)):
        if key in f:
            kw[key] = _whole(blank, ("file", key), f[key], low)
    for key in ("time", "date", "voltage", "current", "power", "q"):
        if key in c:
            kw[key] = _column(blank, ("columns", key), c[key])
    if "temperatures" in c:
        temps = c["temperatures"]
        if not isinstance(temps, dict) or not temps:
            raise MapError(f"{blank.where('columns', 'temperatures')}: expected a table of sensor = column, e.g. "
                           "temperatures = { probe = \"Ch1\" }")
        for sensor in temps:
            if not _SENSOR.match(sensor):
                raise MapError(f"{blank.where('columns', 'temperatures', sensor)}: a sensor name is letters, digits "
                               f"and _ only (it becomes the run CSV column T_<sensor>_C), got {sensor!r}")
        kw["temperatures"] = {s: _column(blank, ("columns", "temperatures", s), v) for s, v in temps.items()}
    _check_power(blank, c)
    units = doc.get("units", {})
    for col, unit in units.items():
        if not isinstance(unit, str) or parse_unit(unit) is None:
            raise MapError(f"{blank.where('units', col)}: {unit!r} is not a unit linerig reads; one of "
                           f"{', '.join(SYMBOLS)}")
    kw["units"] = dict(units)
    order = doc.get("time", {}).get("date_order")
    if order is not None:
        if order not in ORDERS:
            raise MapError(f"{blank.where('time', 'date_order')}: expected one of {', '.join(ORDERS)}, got {order!r}")
        kw["date_order"] = order
    if "length_mm" in h:
        kw["length_mm"] = _positive(blank, ("heater", "length_mm"), h["length_mm"])
    if "on_fraction" in h:
        v = _positive(blank, ("heater", "on_fraction"), h["on_fraction"])
        if v >= 1:
            raise MapError(f"{blank.where('heater', 'on_fraction')}: expected a fraction between 0 and 1, got {v}")
        kw["on_fraction"] = v
    return LoggerMap(source, text, **kw)


def _check_power(blank: LoggerMap, c: dict[str, Any]) -> None:
    if ("voltage" in c) != ("current" in c):
        have, missing = ("voltage", "current") if "voltage" in c else ("current", "voltage")
        raise MapError(f"{blank.where('columns', have)}: {have} without {missing}: power is voltage × current; "
                       "give both, or power = (W) or q = (W/m)")
    given = [k for k in POWER_KEYS if k in c]
    if len(given) > 1:
        raise MapError(f"{blank.where('columns', given[1])}: the heater power is given twice ({' and '.join(given)}); "
                       "keep one")


def _text(blank: LoggerMap, dotted: tuple[str, ...], v: object) -> str:
    if not isinstance(v, str) or not v.strip():
        raise MapError(f"{blank.where(*dotted)}: expected text, got {v!r}")
    return v.strip()


def _column(blank: LoggerMap, dotted: tuple[str, ...], v: object) -> ColumnRef:
    if isinstance(v, bool) or not isinstance(v, str | int) or (isinstance(v, int) and v < 1) or v == "":
        raise MapError(f"{blank.where(*dotted)}: expected a column name as in the header, or its number "
                       f"(1 = first), got {v!r}")
    return v.strip() if isinstance(v, str) else v


def _whole(blank: LoggerMap, dotted: tuple[str, ...], v: object, low: int) -> int:
    if isinstance(v, bool) or not isinstance(v, int) or v < low:
        raise MapError(f"{blank.where(*dotted)}: expected a whole number >= {low}, got {v!r}")
    return v


def _positive(blank: LoggerMap, dotted: tuple[str, ...], v: object) -> float:
    if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v) or v <= 0:
        raise MapError(f"{blank.where(*dotted)}: expected a number > 0, got {v!r}")
    return float(v)
