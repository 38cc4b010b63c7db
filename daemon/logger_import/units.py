"""Units a logger writes, and the conversion of each to the run CSV's: °C, V, A, W, W/m and s.

A unit comes from a units row, from the column name ("Ch1 (°C)", "Heater [V]", "Ch1 / °C") or from the map.
A single bare letter at the end of a name ("Heater V", "Sensor A") is not read as a unit: it is as often a label.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

TEMPERATURE, VOLTAGE, CURRENT, POWER, Q, TIME = "temperature", "voltage", "current", "power", "q", "time"


@dataclass(frozen=True)
class Unit:
    """``value_in_run_units = raw * scale + offset``."""

    quantity: str
    symbol: str
    scale: float = 1.0
    offset: float = 0.0

    def convert(self, x: np.ndarray) -> np.ndarray:
        return x * self.scale + self.offset


_C = Unit(TEMPERATURE, "°C")
_K = Unit(TEMPERATURE, "K", 1.0, -273.15)
_F = Unit(TEMPERATURE, "°F", 5.0 / 9.0, -32.0 * 5.0 / 9.0)
_SPELLINGS: dict[Unit, tuple[str, ...]] = {
    _C: ("°C", "ºC", "℃", "degC", "deg C", "C", "oC", "Celsius", "deg.C", "DegC"),
    _K: ("K", "kelvin", "Kelvin"),
    _F: ("°F", "ºF", "℉", "degF", "deg F", "F", "oF", "Fahrenheit"),
    Unit(VOLTAGE, "V"): ("V", "volt", "volts", "Volt", "VDC", "Vdc"),
    Unit(VOLTAGE, "mV", 1e-3): ("mV", "millivolt"),
    Unit(CURRENT, "A"): ("A", "amp", "amps", "Amp", "ampere", "ADC", "Adc"),
    Unit(CURRENT, "mA", 1e-3): ("mA", "milliamp"),
    Unit(POWER, "W"): ("W", "watt", "watts", "Watt"),
    Unit(POWER, "mW", 1e-3): ("mW",),
    Unit(Q, "W/m"): ("W/m", "W m-1", "W·m-1", "W.m-1", "W m^-1", "W·m⁻¹", "W m⁻¹", "Wpm", "W per m"),
    Unit(TIME, "s"): ("s", "sec", "secs", "second", "seconds", "S"),
    Unit(TIME, "ms", 1e-3): ("ms", "msec", "millisecond", "milliseconds"),
    Unit(TIME, "min", 60.0): ("min", "mins", "minute", "minutes"),
    Unit(TIME, "h", 3600.0): ("h", "hr", "hrs", "hour", "hours"),
}
_BY_SPELLING = {s: u for u, spellings in _SPELLINGS.items() for s in spellings}
_BRACKETED = re.compile(r"^(?P<base>.*?)\s*[(\[](?P<unit>[^()\[\]]+)[)\]]\s*$")
_SLASHED = re.compile(r"^(?P<base>.+?)\s+/\s*(?P<unit>\S.*)$")
_TRAILING = re.compile(r"^(?P<base>.+?)\s+(?P<unit>\S{2,})$")
SYMBOLS = sorted({u.symbol for u in _SPELLINGS})


def parse_unit(text: str) -> Unit | None:
    """The unit a token names, or None. Surrounding brackets and spaces are ignored."""
    t = text.strip().strip("()[]").strip()
    if not t:
        return None
    return _BY_SPELLING.get(t) or _BY_SPELLING.get(t.replace("°", "").strip())


def split_name(name: str) -> tuple[str, str | None]:
    """``"Ch1 (°C)"`` → ``("Ch1", "°C")``; a name without a recognised unit keeps its text and gives None.

    Brackets always hold a unit when one is recognised there; a trailing word or a ``/ unit`` only when it is a
    known unit of two or more characters.
    """
    name = name.strip()
    for pattern in (_BRACKETED, _SLASHED, _TRAILING):
        m = pattern.match(name)
        if m and m.group("base").strip() and parse_unit(m.group("unit")) is not None:
            return m.group("base").strip(), m.group("unit").strip()
    return name, None


def looks_like_units_row(cells: list[str]) -> bool:
    """True for a row of unit symbols (known ones, or short words without digits such as ``%RH``)."""
    filled = [c.strip() for c in cells if c.strip()]
    if not filled:
        return False
    known = sum(parse_unit(c) is not None for c in filled)
    short = all(len(c) <= 10 and not any(ch.isdigit() for ch in c.strip("()[]").replace("-1", "").replace("⁻¹", ""))
                for c in filled)
    return short and 2 * known >= len(filled)
