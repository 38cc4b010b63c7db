"""Logger exports written from a known run, in the dialects linerig import must read (tests only).

Each dialect is an invented logger layout described generically (separator, decimal mark, units line, encoding,
how time and heater power are written); none copies a vendor's format. The writer puts the logger's clock at an
arbitrary start before the baseline, so time zero has to be found again from the power column.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from linerig.daemon.reduction.data import RunData

HEATER_OHM = 40.0
LOGGER_START = dt.datetime(2024, 4, 23, 10, 14, 23)  # the logger's clock at its first row (day 23: day-first shows)
LEAD_S = 37.0  # the logger ran this long before the run's first row
CLOCK_START = dt.datetime(2024, 4, 22, 23, 50, 0)  # a run that passes midnight, for the clock-only dialect


@dataclass(frozen=True)
class Dialect:
    name: str
    delimiter: str
    decimal: str
    encoding: str
    time: str  # how time is written: see _time_cells
    power: str  # "vi" volts and amps, "mvi" millivolts and milliamps, "w" watts, "q" W/m
    units_line: bool
    temp_unit: str = "°C"  # "°C" or "°F"
    preamble: tuple[str, ...] = ()
    extras: bool = False  # channels that are neither time, temperature nor heater power
    map_toml: str = ""
    names: dict[str, str] = field(default_factory=dict)


DIALECTS = (
    Dialect("semicolon, decimal comma, units line, BOM, day-first dotted timestamps, volts and amps, extra channels",
            ";", ",", "utf-8-sig", "dotted-day-first", "vi", True, extras=True,
            preamble=("Bench logger export", "Channels;6"),
            map_toml='[columns]\nvoltage = "Heater U"\ncurrent = "Heater I"\n[heater]\nlength_mm = {length_mm}\n'),
    Dialect("tab-separated, elapsed seconds from the logger's start, watts, units in the names", "\t", ".", "utf-8",
            "elapsed-s", "w", False, extras=True, preamble=("Logger file", "Interval\t1 s", ""),
            map_toml="[heater]\nlength_mm = {length_mm}\n"),
    Dialect("comma-separated, ISO timestamps in UTC, W/m, no map", ",", ".", "utf-8", "iso-z", "q", False),
    Dialect("semicolon, decimal comma, Windows-1252, date and clock columns day-first with slashes, mV and mA",
            ";", ",", "cp1252", "date+clock-day-first", "mvi", True,
            map_toml='[columns]\nvoltage = "U heater"\ncurrent = "I heater"\n[heater]\nlength_mm = {length_mm}\n'),
    Dialect("comma-separated, month-first timestamps with AM/PM, watts, °F", ",", ".", "utf-8", "month-first-ampm",
            "w", True, temp_unit="°F", map_toml="[heater]\nlength_mm = {length_mm}\n"),
    Dialect("tab-separated UTF-16 with BOM, clock times alone across midnight, elapsed minutes beside them", "\t",
            ".", "utf-16", "clock", "q", True, extras=True,
            map_toml='[columns]\ntime = "Clock"\n'),
)


def _num(x: float, decimals: int, mark: str) -> str:
    s = f"{x:.{decimals}f}"
    return s.replace(".", ",") if mark == "," else s


def _time_cells(d: Dialect, logger_s: np.ndarray) -> tuple[list[str], list[str], list[list[str]]]:
    """Header names, units and the cells of the time column(s)."""
    if d.time == "elapsed-s":
        return ["Elapsed (s)"], ["s"], [[_num(s, 1, d.decimal)] for s in logger_s]
    if d.time == "clock":
        rows = [[(CLOCK_START + dt.timedelta(seconds=float(s))).strftime("%H:%M:%S"), _num(s / 60, 4, d.decimal)]
                for s in logger_s]
        return ["Clock", "Run time"], ["", "min"], rows
    stamps = [LOGGER_START + dt.timedelta(seconds=float(s)) for s in logger_s]
    if d.time == "dotted-day-first":
        return ["Timestamp"], [""], [[t.strftime("%d.%m.%Y %H:%M:%S")] for t in stamps]
    if d.time == "iso-z":
        return ["time_utc"], [""], [[t.strftime("%Y-%m-%dT%H:%M:%SZ")] for t in stamps]
    if d.time == "date+clock-day-first":
        return ["Date", "Time"], ["", ""], [[t.strftime("%d/%m/%Y"), t.strftime("%H:%M:%S")] for t in stamps]
    if d.time == "month-first-ampm":
        return ["Date Time"], [""], [[t.strftime("%m/%d/%Y %I:%M:%S %p")] for t in stamps]
    raise ValueError(d.time)


def _power_cells(d: Dialect, q: np.ndarray, length_mm: float) -> tuple[list[str], list[str], list[list[str]]]:
    watts = q * length_mm * 1e-3
    if d.power == "q":
        return ["q (W/m)"], [""], [[_num(x, 5, d.decimal)] for x in q]
    if d.power == "w":
        name = "Heater power" if d.units_line else "Heater power (W)"
        return [name], ["W"], [[_num(x, 6, d.decimal)] for x in watts]
    amps = np.sqrt(watts / HEATER_OHM)
    # an off heater reads a small offset, as real shunts do: the importer writes it as 0
    amps = np.where(amps > 0, amps, 0.0004 * (-1.0) ** np.arange(amps.size))
    volts = np.where(watts > 0, amps * HEATER_OHM, 0.002)
    scale = 1e3 if d.power == "mvi" else 1.0
    names = ["U heater", "I heater"] if d.power == "mvi" else ["Heater U", "Heater I"]
    units = ["mV", "mA"] if d.power == "mvi" else ["V", "A"]
    digits = (7, 8) if scale == 1 else (4, 5)
    return names, units, [[_num(v * scale, digits[0], d.decimal), _num(a * scale, digits[1], d.decimal)]
                          for v, a in zip(volts, amps, strict=True)]


def _temp_cells(d: Dialect, data: RunData) -> tuple[list[str], list[str], list[list[str]]]:
    names, units, cols = [], [], []
    for sensor, T in data.temps_C.items():
        if d.units_line:
            names.append(f"{sensor}")
        elif d.delimiter == ",":
            names.append(f"{sensor} [degC]")
        else:
            names.append(f"{sensor} ({d.temp_unit})")
        units.append(d.temp_unit)
        cols.append(T * 9 / 5 + 32 if d.temp_unit == "°F" else T)
    rows = [[_num(float(c[i]), 5, d.decimal) for c in cols] for i in range(data.time_s.size)]
    return names, units, rows


def _extra_cells(d: Dialect, n: int) -> tuple[list[str], list[str], list[list[str]]]:
    if not d.extras:
        return [], [], [[] for _ in range(n)]
    names = ["Battery", "Humidity"] if d.units_line else ["Box RH (%)", "Scan"]
    units = ["V", "%RH"] if d.units_line else ["", ""]
    rows = [[_num(12.6 - 1e-4 * i, 3, d.decimal), _num(41.0 + 0.5 * math.sin(i / 30), 1, d.decimal)]
            if d.units_line else [_num(41.0 + 0.5 * math.sin(i / 30), 1, d.decimal), str(i + 1)] for i in range(n)]
    return names, units, rows


def export_text(data: RunData, d: Dialect, length_mm: float) -> str:
    """The export as text (before encoding)."""
    logger_s = data.time_s - data.time_s[0] + LEAD_S
    parts: list[Callable[[], tuple[list[str], list[str], list[list[str]]]]] = [
        lambda: _time_cells(d, logger_s), lambda: _temp_cells(d, data),
        lambda: _power_cells(d, data.q_W_per_m, length_mm), lambda: _extra_cells(d, data.time_s.size)]
    names: list[str] = []
    units: list[str] = []
    rows: list[list[str]] = [[] for _ in range(data.time_s.size)]
    for make in parts:
        n, u, r = make()
        names += n
        units += u
        for row, cells in zip(rows, r, strict=True):
            row += cells
    q = d.delimiter
    lines = [line.replace(";", q) if q != ";" else line for line in d.preamble]
    lines.append(q.join(names))
    if d.units_line:
        lines.append(q.join(units))
    lines += [q.join(r) for r in rows]
    return "\r\n".join(lines) + "\r\n"


def write_export(data: RunData, d: Dialect, path: Path, length_mm: float) -> Path:
    path.write_bytes(export_text(data, d, length_mm).encode(d.encoding))
    return path


def write_map(d: Dialect, path: Path, length_mm: float) -> Path | None:
    if not d.map_toml:
        return None
    path.write_text(d.map_toml.format(length_mm=length_mm), encoding="utf-8")
    return path
