"""Display conversions for the operator's chosen unit: the only place the UI leaves SI.

Inside, conductivity is k in W/(m·K). Operators in the cable trade think in thermal resistivity, either in
m·K/W (SI) or in °C·cm/W (1 m·K/W = 100 °C·cm/W, since 1 m = 100 cm and a kelvin step equals a °C step).
Resistivity ρ = 1/k, so its standard uncertainty to first order is u_ρ = u_k / k².
"""

from __future__ import annotations

import enum
import math
from dataclasses import dataclass


class DisplayUnit(enum.StrEnum):
    """What the operator wants the big number to be."""

    CONDUCTIVITY = "W/(m·K)"
    """Thermal conductivity k."""
    RESISTIVITY = "m·K/W"
    """Thermal resistivity ρ = 1/k, SI."""
    RESISTIVITY_TRADE = "°C·cm/W"
    """Thermal resistivity in the cable trade's unit (×100 of m·K/W)."""

    @property
    def quantity(self) -> str:
        return "conductivity" if self is DisplayUnit.CONDUCTIVITY else "resistivity"

    @property
    def symbol(self) -> str:
        return "k" if self is DisplayUnit.CONDUCTIVITY else "ρ"

    def next(self) -> DisplayUnit:
        members = list(DisplayUnit)
        return members[(members.index(self) + 1) % len(members)]


COVERAGE = 2.0
PM_LABEL = "± U (k = 2)"   # every ± on a screen is the expanded uncertainty, as in the reports


@dataclass(frozen=True)
class Shown:
    """One value with its expanded uncertainty U = 2u (``u`` holds U), ready to print."""

    value: float
    u: float | None
    unit: DisplayUnit
    digits: int

    def text(self) -> str:
        if not math.isfinite(self.value):
            return f"— {self.unit}"
        body = f"{self.value:.{self.digits}f}"
        if self.u is not None and math.isfinite(self.u):
            body += f" ± {self.u:.{self.digits}f}"
        return f"{body} {self.unit}"

    @property
    def rel_u(self) -> float | None:
        """U relative to the value."""
        if self.u is None or not self.value:
            return None
        return abs(self.u / self.value)


def convert(k_W_per_mK: float, k_u_W_per_mK: float | None, unit: DisplayUnit) -> tuple[float, float | None]:
    """k (and its standard uncertainty) expressed in ``unit``. k ≤ 0 gives NaN (no physical resistivity)."""
    if unit is DisplayUnit.CONDUCTIVITY:
        return k_W_per_mK, k_u_W_per_mK
    if not (k_W_per_mK > 0 and math.isfinite(k_W_per_mK)):
        return math.nan, None
    scale = 100.0 if unit is DisplayUnit.RESISTIVITY_TRADE else 1.0
    rho = scale / k_W_per_mK
    u = None if k_u_W_per_mK is None else scale * k_u_W_per_mK / (k_W_per_mK * k_W_per_mK)
    return rho, u


def _digits(value: float, u: float | None, unit: DisplayUnit) -> int:
    """Decimals that show the uncertainty to two significant figures, within sensible bounds for the unit."""
    floor, ceiling = (0, 1) if unit is DisplayUnit.RESISTIVITY_TRADE else (2, 4)
    if u is None or not (u > 0 and math.isfinite(u)):
        return floor + 1 if unit is DisplayUnit.RESISTIVITY_TRADE else 3
    d = 1 - math.floor(math.log10(u))
    return max(floor, min(ceiling, d))


def show(k_W_per_mK: float | None, k_u_W_per_mK: float | None, unit: DisplayUnit) -> Shown:
    """The estimate in ``unit`` ± U (k = 2) from its standard uncertainty, decimals matched to U."""
    if k_W_per_mK is None:
        return Shown(math.nan, None, unit, 3)
    value, u = convert(k_W_per_mK, None if k_u_W_per_mK is None else COVERAGE * k_u_W_per_mK, unit)
    return Shown(value, u, unit, _digits(value, u, unit))


def companion(unit: DisplayUnit) -> DisplayUnit:
    """The unit of the second line: resistivity beside conductivity and the other way round."""
    return DisplayUnit.RESISTIVITY if unit is DisplayUnit.CONDUCTIVITY else DisplayUnit.CONDUCTIVITY


def parse_unit(text: str | None) -> DisplayUnit:
    """A unit from a short name (``k``, ``rho``, ``trade``) or its symbol; conductivity when empty."""
    if not text:
        return DisplayUnit.CONDUCTIVITY
    key = text.strip().lower()
    aliases = {"k": DisplayUnit.CONDUCTIVITY, "conductivity": DisplayUnit.CONDUCTIVITY,
               "rho": DisplayUnit.RESISTIVITY, "resistivity": DisplayUnit.RESISTIVITY,
               "trade": DisplayUnit.RESISTIVITY_TRADE, "ccm": DisplayUnit.RESISTIVITY_TRADE}
    if key in aliases:
        return aliases[key]
    for u in DisplayUnit:
        if key == u.value.lower():
            return u
    raise ValueError(f"unknown display unit {text!r}: use k, rho or trade")


def duration(seconds: float | None) -> str:
    """A run duration as m:ss or h:mm:ss; '—' when unknown."""
    if seconds is None or not math.isfinite(seconds):
        return "—"
    s = max(0, round(seconds))
    h, rem = divmod(s, 3600)
    m, sec = divmod(rem, 60)
    return f"{h}:{m:02d}:{sec:02d}" if h else f"{m}:{sec:02d}"
