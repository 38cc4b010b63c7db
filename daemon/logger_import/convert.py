"""A logger export to a run: every step in order, each decision kept as a Choice the user can check."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from linerig.daemon.reduction.data import RunData

from . import clock
from .errors import Choice, LoggerImportError
from .heater import RULE, Heating, find_heating, per_metre
from .layout import Layout, find_layout
from .mapping import LoggerMap
from .numbers import decimal_mark, parse_column, parse_number
from .roles import NUMBER, Column, Roles, assign_roles, describe_columns
from .source import decode, lines_of
from .units import CURRENT, POWER, TEMPERATURE, TIME, VOLTAGE, Q


@dataclass(frozen=True)
class Imported:
    """The run, ready for the reduction or ``write_run_csv``, and what was decided to get it."""

    data: RunData
    source: str
    choices: list[Choice] = field(default_factory=list)

    def comments(self) -> list[str]:
        """Header comments for the run CSV: where it came from and every choice made (as "- " items, so that no
        choice reads as a ``key: value`` metadata line of the run CSV)."""
        return [f"imported from {self.source} by linerig import; its choices:",
                *(f"- {c.text()}" for c in self.choices)]


def import_file(path: Path, m: LoggerMap | None = None, *, length_mm: float | None = None,
                length_from: str = "") -> Imported:
    try:
        raw = path.read_bytes()
    except OSError as e:
        raise LoggerImportError(f"{path}: cannot read ({e.strerror or e})") from e
    return import_logger(raw, str(path), m or LoggerMap(), length_mm=length_mm, length_from=length_from)


def import_logger(raw: bytes, name: str, m: LoggerMap, *, length_mm: float | None = None,
                  length_from: str = "") -> Imported:
    """The run in a logger export. ``length_mm`` (said to come from ``length_from``) is the heater length when the
    map gives none. Raises LoggerImportError (MapError for the map's own mistakes)."""
    text, encoding = decode(raw, name, m.encoding)
    layout = find_layout(lines_of(text), name, delimiter=m.delimiter, header_line=m.header_line,
                         units_line=m.units_line)
    cols = describe_columns(layout.names, layout.units, layout.units_line, layout.rows, m)
    roles = assign_roles(cols, m, name)
    choices = [encoding, *layout.choices, *roles.choices]
    numeric = sorted({c.index: c for c in (*roles.temperatures.values(), *roles.power,
                                            *(roles.time if roles.time[0].kind == NUMBER else ()))}.values(),
                     key=lambda c: c.index)
    decimal, how = decimal_mark([_cells(layout, c, name) for c in numeric], layout.delimiter, name, m.decimal)
    choices.append(how)
    lines = [i for i, _ in layout.rows]
    seconds = _seconds(layout, roles, decimal, m, name, choices)
    temps = {}
    for sensor, col in roles.temperatures.items():
        unit, said = col.unit_for(TEMPERATURE, name, f"[columns] temperatures.{sensor}")
        temps[sensor] = unit.convert(_numbers(layout, col, decimal, name))
        choices.append(Choice(f"unit of {sensor}", unit.symbol, said, f"[units] \"{col.name}\""))
    power, where = _power(layout, roles, decimal, name, choices)
    heating = find_heating(power, m.on_fraction, lines, where, name)
    if roles.power_kind == "q":
        q = heating.held(power)
    else:
        length, said = _length(m, length_mm, length_from, name)
        choices.append(Choice("heater length", f"{length:g} mm", said))
        q = per_metre(heating.held(power), length)
    t = seconds - seconds[heating.on]
    choices += _heating_choices(heating, layout, roles, t, q, m)
    return Imported(RunData(t, q, temps), name, choices)


def _numbers(layout: Layout, col: Column, decimal: str, name: str) -> np.ndarray:
    values = parse_column([cells[col.index].strip() for _, cells in layout.rows], decimal)
    if values is not None:
        return values
    for i, cells in layout.rows:  # the first cell that is not a number, for the message
        text = cells[col.index].strip()
        if parse_number(text, decimal) is None:
            what = "is empty" if not text else f"{text!r} is not a number (decimal mark {decimal!r})"
            raise LoggerImportError(f"{name}: line {i}, column {col.label}: {what}; every row needs a value: "
                                    "correct the cell or remove the row")
    raise AssertionError("parse_column and parse_number disagree")  # pragma: no cover


def _cells(layout: Layout, col: Column, name: str) -> clock.Cells:
    return clock.Cells(name, col.label, [i for i, _ in layout.rows],
                       [cells[col.index].strip() for _, cells in layout.rows])


def _seconds(layout: Layout, roles: Roles, decimal: str, m: LoggerMap, name: str,
             choices: list[Choice]) -> np.ndarray:
    time = roles.time
    if len(time) == 2:
        wall, how = clock.from_date_and_clock(_cells(layout, time[0], name), _cells(layout, time[1], name),
                                              m.date_order)
        choices.append(how)
    elif time[0].kind == clock.STAMP_KIND:
        wall, how = clock.from_timestamps(_cells(layout, time[0], name), m.date_order)
        choices.append(how)
    elif time[0].kind == clock.CLOCK_KIND:
        wall = clock.from_clock(_cells(layout, time[0], name))
    else:
        unit, said = time[0].unit_for(TIME, name, "[columns] time")
        choices.append(Choice("unit of the time", unit.symbol, said, f"[units] \"{time[0].name}\""))
        wall = clock.WallTime(clock.from_elapsed(_numbers(layout, time[0], decimal, name), unit.scale), [])
    choices += wall.notes
    s = wall.seconds
    bad = np.flatnonzero(np.diff(s) <= 0)
    if bad.size:
        k = int(bad[0]) + 1
        (prev, _), (line, cells) = layout.rows[k - 1], layout.rows[k]
        col = time[-1]
        raise LoggerImportError(
            f"{name}: line {line}, column {col.label}: {cells[col.index].strip()!r} is not later than line {prev}'s; "
            "time must increase from row to row (timestamps too coarse for the logging rate? export them with "
            "fractions of a second, or use an elapsed-time column)")
    return s


def _power(layout: Layout, roles: Roles, decimal: str, name: str,
           choices: list[Choice]) -> tuple[np.ndarray, str]:
    """The heater power in W (W/m for a q column) and the column(s) it came from, for messages."""
    if roles.power_kind == "voltage":
        v_col, a_col = roles.power
        v_unit, v_said = v_col.unit_for(VOLTAGE, name, "[columns] voltage")
        a_unit, a_said = a_col.unit_for(CURRENT, name, "[columns] current")
        choices.append(Choice("unit of the volts", v_unit.symbol, v_said, f"[units] \"{v_col.name}\""))
        choices.append(Choice("unit of the amps", a_unit.symbol, a_said, f"[units] \"{a_col.name}\""))
        volts = v_unit.convert(_numbers(layout, v_col, decimal, name))
        amps = a_unit.convert(_numbers(layout, a_col, decimal, name))
        return volts * amps, f"{v_col.label} × {a_col.label}"
    col = roles.power[0]
    quantity, key = (Q, "[columns] q") if roles.power_kind == "q" else (POWER, "[columns] power")
    unit, said = col.unit_for(quantity, name, key)
    choices.append(Choice("unit of the power", unit.symbol, said, f"[units] \"{col.name}\""))
    return unit.convert(_numbers(layout, col, decimal, name)), col.label


def _length(m: LoggerMap, length_mm: float | None, length_from: str, name: str) -> tuple[float, str]:
    if m.length_mm is not None:
        if length_mm is not None and abs(length_mm - m.length_mm) > 1e-6 * m.length_mm:
            raise LoggerImportError(f"{m.where('heater', 'length_mm')} = {m.length_mm:g} mm, but {length_from} "
                                    f"says {length_mm:g} mm; remove one")
        return m.length_mm, "from the map"
    if length_mm is not None:
        return length_mm, f"from {length_from}" if length_from else "given"
    raise LoggerImportError(f"{name}: the heater power is in W; set [heater] length_mm in the map (the heated "
                            "length) to turn it into W/m")


def _heating_choices(h: Heating, layout: Layout, roles: Roles, t: np.ndarray, q: np.ndarray,
                     m: LoggerMap) -> list[Choice]:
    unit = "W/m" if roles.power_kind == "q" else "W"
    on_line, on_cells = layout.rows[h.on]
    stamp = " ".join(on_cells[c.index].strip() for c in roles.time)
    out = [Choice("heater on", f"line {on_line} (logger time {stamp}), taken as t = 0",
                  RULE.format(f=m.on_fraction, plateau=f"{h.plateau:.4g} {unit}"), "[heater] on_fraction"),
           Choice("baseline", f"{h.on} rows, {-t[0]:g} s before heating", "the rows before the heater came on")]
    heating_rows = q[h.on:h.off]
    if h.off is not None:
        off_line = layout.rows[h.off][0]
        out.append(Choice("heater off", f"line {off_line}, t = {t[h.off]:g} s",
                          f"the first row after t = 0 below {m.on_fraction:.0%} of the plateau"))
    else:
        out.append(Choice("heater off", "never in the file", "the power stays on to the last row"))
    out.append(Choice("heating power", f"{float(np.mean(heating_rows)):.4g} W/m mean "
                      f"({float(np.min(heating_rows)):.4g} to {float(np.max(heating_rows)):.4g})",
                      "the readings of the rows with the heater on"))
    if h.largest_off > 0:
        out.append(Choice("off readings", f"up to {h.largest_off:.3g} {unit}, written as 0",
                          "readings while the heater is off are offsets and noise"))
    return out
