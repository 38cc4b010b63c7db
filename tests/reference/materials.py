"""Thermal properties used by the reference records: the media and the parts of the probes.

The media carry the numbers of the simulator's demo materials (daemon/sim/materials.py), copied here by hand so
that the reference set does not import the code it is meant to check; `test_records.py` only compares the two
tables. The probe parts are handbook values quoted from memory (marked so); the records store the numbers they
were made with, so a later correction here changes new records, never the meaning of old ones.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["MEDIA", "PARTS", "Solid", "get"]


@dataclass(frozen=True)
class Solid:
    """A homogeneous material: conductivity k (W/(m·K)) and volumetric heat capacity ρc (J/(m³·K))."""

    key: str
    k: float
    rho_c: float
    source: str

    @property
    def alpha(self) -> float:
        return self.k / self.rho_c

    def as_dict(self) -> dict[str, float | str]:
        return {"key": self.key, "k_W_per_mK": self.k, "rho_c_J_per_m3K": self.rho_c}


_SIM = "daemon/sim/materials.py demo value (de Vries 1963 / Johansen 1975 / IAPWS as noted there)"

MEDIA: dict[str, Solid] = {s.key: s for s in [
    Solid("dry-sand", 0.30, 1.30e6, _SIM),
    Solid("moist-sand", 1.45, 1.57e6, _SIM),
    Solid("saturated-sand", 2.50, 2.96e6, _SIM),
    Solid("moist-clay", 1.15, 2.69e6, _SIM),
    Solid("dry-clay", 0.25, 1.50e6, _SIM),
    Solid("thermal-backfill", 1.80, 2.01e6, _SIM),
    Solid("agar-gel", 0.598, 4.177e6, _SIM),
    Solid("glycerol", 0.286, 3.06e6, _SIM),
    Solid("weathered-rock", 2.00, 2.20e6, _SIM),
    Solid("moist-peat", 0.30, 2.10e6, _SIM),
]}

PARTS: dict[str, Solid] = {s.key: s for s in [
    # Incropera & DeWitt, Fundamentals of Heat and Mass Transfer, Table A.1 at 300 K (from memory):
    # AISI 304 k 14.9, rho 7900, cp 477; constantan k 23, rho 8920, cp 384.
    Solid("stainless-304", 14.9, 7900.0 * 477.0, "Incropera & DeWitt Table A.1, 300 K (from memory)"),
    Solid("constantan", 23.0, 8920.0 * 384.0, "Incropera & DeWitt Table A.1, 300 K (from memory)"),
    # Air at 300 K: k 0.0263, rho 1.1614, cp 1007 (Incropera & DeWitt Table A.4, from memory).
    Solid("air", 0.0263, 1.1614 * 1007.0, "Incropera & DeWitt Table A.4, 300 K (from memory)"),
    # Cured epoxy without filler: k about 0.17-0.25, rho about 1200, cp about 1100 (typical handbook range, from
    # memory; no single source).
    Solid("epoxy", 0.20, 1200.0 * 1100.0, "typical unfilled epoxy (from memory, no single source)"),
    # Epoxy loaded with alumina powder for heat conduction: k about 0.8-1.5, rho about 2000, cp about 1000
    # (typical range, from memory; no single source).
    Solid("filled-epoxy", 1.0, 2000.0 * 1000.0, "typical alumina-filled epoxy (from memory, no single source)"),
    # Compacted magnesium-oxide powder as in sheathed heaters: k about 1.5-3, rho about 3000, cp about 900
    # (typical range, from memory; no single source).
    Solid("mgo-powder", 2.0, 3000.0 * 900.0, "compacted MgO powder (from memory, no single source)"),
]}


def get(key: str) -> Solid:
    """A medium or probe part by key."""
    if key in MEDIA:
        return MEDIA[key]
    if key in PARTS:
        return PARTS[key]
    raise KeyError(f"unknown material {key!r}; known: {', '.join([*MEDIA, *PARTS])}")
