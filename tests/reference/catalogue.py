"""The reference record set: every record's full parameters, as plain JSON-able dicts.

A record's parameters are the whole truth about it: the probe's layers with their numbers, the medium, the sample,
the grid, the time steps, the power history and the instrument defaults. `generate.py` turns each into files and
`--check` compares the stored parameters with these. Scenarios are invented; probe designs are our own.

Probe designs (dimensions in the names of the builders below):
- lab needle: 100 mm heated, outer radius 0.635 mm; constantan core r 0.10 mm, filler to r 0.435 mm (alumina-
  filled epoxy; neat epoxy for the low-conductivity variant), stainless sheath; 0.5 mm closed tip; 20 mm of
  unheated needle above the heater up to the hub at the sample's surface; thermocouple on the axis at mid-length.
- dual needle: two needles 40 mm × 1.0 mm diameter, 8 mm apart; each a constantan core r 0.10 mm (the heater wire
  in one, the thermocouple wires in the other), filled epoxy to r 0.40 mm, stainless sheath to 0.50 mm. Modelled in
  cross-section (infinitely long); two axisymmetric records of the 40 mm heater show the finite length.
- field rod: 1.5 m heated, 8 mm outer diameter stainless tube (wall 0.5 mm) with compacted MgO around a heater core
  of radius 1.0 mm; 5 mm solid tip; the rod reaches the ground surface 1.8 m above its tip; four thermocouple
  junctions on the axis at 300, 600, 900 and 1200 mm from the tip.
"""

from __future__ import annotations

import math
from typing import Any

from .materials import MEDIA, PARTS, Solid

__all__ = ["CATALOGUE", "PROFILES", "catalogue"]

Params = dict[str, Any]


def _mat(s: Solid) -> dict[str, Any]:
    return s.as_dict()


def _layer(r_out: float, key: str, cells: int) -> dict[str, Any]:
    return {"r_out_m": r_out, "material": _mat(PARTS[key]), "cells": cells}


# ---- probe designs -----------------------------------------------------------------------------------------

LN_A = 0.635e-3
LN_TIP = 0.5e-3
LN_HEATED = (LN_TIP, LN_TIP + 0.100)
LN_TOP = LN_HEATED[1] + 0.020
LN_MID = 0.5 * (LN_HEATED[0] + LN_HEATED[1])


def lab_needle(fill: str = "filled-epoxy", gap_m: float = 0.0) -> dict[str, Any]:
    gap = None if gap_m <= 0 else {"r_out_m": LN_A + gap_m, "material": _mat(PARTS["air"]), "cells": 1}
    return {"layers": [_layer(0.10e-3, "constantan", 2), _layer(0.435e-3, fill, 4),
                       _layer(LN_A, "stainless-304", 2)],
            "heated_z_m": list(LN_HEATED), "top_m": LN_TOP, "tip_cap_m": LN_TIP, "gap": gap}


ROD_A = 4.0e-3
ROD_TIP = 5e-3
ROD_HEATED = (ROD_TIP, ROD_TIP + 1.5)
ROD_TOP = 1.8
ROD_JUNCTIONS = (0.300, 0.600, 0.900, 1.200)


def field_rod(annulus: tuple[str, float] | None = None) -> dict[str, Any]:
    gap = None
    if annulus is not None:
        key, thick = annulus
        mat = MEDIA[key] if key in MEDIA else PARTS[key]
        gap = {"r_out_m": ROD_A + thick, "material": _mat(mat), "cells": 3}
    return {"layers": [_layer(1.0e-3, "constantan", 3), _layer(3.5e-3, "mgo-powder", 6),
                       _layer(ROD_A, "stainless-304", 2)],
            "heated_z_m": list(ROD_HEATED), "top_m": ROD_TOP, "tip_cap_m": ROD_TIP, "gap": gap}


DN_A = 0.5e-3
DN_S = 8.0e-3
DN_LENGTH = 0.040


def dual_needle_layers(gap_m: float = 0.0) -> list[dict[str, Any]]:
    lays = [_layer(0.10e-3, "constantan", 2), _layer(0.40e-3, "filled-epoxy", 4), _layer(DN_A, "stainless-304", 2)]
    if gap_m > 0:
        lays.append({"r_out_m": DN_A + gap_m, "material": _mat(PARTS["air"]), "cells": 1})
    return lays


# ---- grids and time steps ----------------------------------------------------------------------------------

LN_GRID = {"r_out_m": 0.5, "z_bottom_m": -0.5, "z_top_m": LN_TOP, "bc_outer": "fixed", "bc_bottom": "fixed",
           "bc_top": "adiabatic", "medium_ratio": 1.1, "gap_cells": 1, "dz_fine_m": 2.5e-4, "dz_growth": 1.2,
           "dz_max_m": 4e-3, "infinite_length": False, "scale": 1.0}
ROD_GRID = {"r_out_m": 2.0, "z_bottom_m": -2.0, "z_top_m": ROD_TOP, "bc_outer": "fixed", "bc_bottom": "fixed",
            "bc_top": "fixed", "medium_ratio": 1.06, "gap_cells": 3, "dz_fine_m": 2e-3, "dz_growth": 1.2,
            "dz_max_m": 0.05, "infinite_length": False, "scale": 1.0}
DN_GRID = {"h_fine_m": 5e-5, "band_m": 7e-4, "medium_ratio": 1.08, "dtheta_max": 0.08, "theta_growth": 1.15,
           "extent_m": 0.3, "bc_outer": "fixed", "scale": 1.0}

UNIT = 2.0**-10
LN_TIME = {"unit_s": UNIT, "first_units": 1, "ratio": 0.25, "max_s": 0.5, "store_s": 0.5, "refine_rel": 0.05}
DN_TIME = {"unit_s": UNIT, "first_units": 1, "ratio": 0.25, "max_s": 0.25, "store_s": 0.25, "refine_rel": 0.05}
ROD_TIME = {"unit_s": UNIT, "first_units": 2, "ratio": 0.25, "max_s": 2.0, "store_s": 2.0, "refine_rel": 0.05}

LN_INSTR = {"dt_s": 1.0, "baseline_s": 120.0, "noise_K": 0.003, "ar_K": 0.002, "ar_phi": 0.9, "quantum_K": 0.001,
            "drift_K_per_h": 0.0, "T0_C": 20.0, "t0_offset_samples": 0, "q_noise_rel": 0.0}
DN_INSTR = {**LN_INSTR, "dt_s": 0.5, "noise_K": 0.002, "ar_K": 0.001}
ROD_INSTR = {**LN_INSTR, "dt_s": 2.0, "baseline_s": 300.0, "noise_K": 0.005, "ar_K": 0.005, "ar_phi": 0.95}


def _steps(t: list[float], q: list[float]) -> dict[str, list[float]]:
    return {"t_s": [float(x) for x in t], "q_W_per_m": [float(x) for x in q]}


def _heat(q: float, t_heat: float) -> dict[str, list[float]]:
    return _steps([0.0, t_heat], [q, 0.0])


def _sag(q0: float, drop_rel: float, t_heat: float, every_s: float, tau_s: float | None = None) -> dict[str, Any]:
    """Battery sag as the logger would see it: a new level every `every_s` seconds (linear or exponential)."""
    n = round(t_heat / every_s)
    ts, qs = [], []
    for i in range(n):
        mid = (i + 0.5) * every_s
        f = (mid / t_heat) if tau_s is None else (1.0 - math.exp(-mid / tau_s)) / (1.0 - math.exp(-t_heat / tau_s))
        ts.append(i * every_s)
        qs.append(round(q0 * (1.0 - drop_rel * f), 6))
    return _steps([*ts, t_heat], [*qs, 0.0])


def _axi(name: str, family: str, description: str, probe: dict[str, Any], media: list[Solid],
         tops: list[float], sensors: list[tuple[str, float, float]], power: dict[str, Any], t_heat: float,
         t_end: float, grid: dict[str, Any], time: dict[str, Any], instrument: dict[str, Any], profile: str,
         twins: list[dict[str, Any]] | None = None, answer: str = "") -> Params:
    return {"name": name, "family": family, "description": description, "solver": "axisymmetric",
            "probe": probe, "medium": {"layers": [_mat(m) for m in media], "tops_m": tops},
            "sensors": [{"name": n, "r_m": r, "z_m": z} for n, r, z in sensors],
            "power": power, "t_heat_s": t_heat, "t_end_s": t_end, "grid": grid, "time": time,
            "instrument": instrument, "profile": profile, "twins": twins or [], "answer": answer}


def _ln(name: str, family: str, description: str, medium: str, q: float | dict[str, Any], t_heat: float,
        t_rec: float, *, fill: str = "filled-epoxy", gap_m: float = 0.0, sensor_r: float = 0.0,
        sensor_z: float = LN_MID, grid: dict[str, Any] | None = None, twins: list[dict[str, Any]] | None = None,
        profile: str = "ref-lab-needle.toml", answer: str = "") -> Params:
    power = _heat(q, t_heat) if isinstance(q, float | int) else q
    return _axi(name, family, description, lab_needle(fill, gap_m), [MEDIA[medium]], [],
                [("heater", sensor_r, sensor_z)], power, t_heat, t_heat + t_rec, grid or LN_GRID, LN_TIME,
                LN_INSTR, profile, twins, answer or f"k, α, ρc of {medium} (homogeneous, effectively infinite)")


_LN_Q = {"dry-sand": 1.2, "moist-sand": 6.0, "saturated-sand": 10.0, "moist-clay": 4.5, "dry-clay": 1.0,
         "thermal-backfill": 7.0, "agar-gel": 2.4, "glycerol": 1.2, "weathered-rock": 8.0, "moist-peat": 1.2}
_LN_LONG = {"dry-sand": 600, "moist-sand": 600, "saturated-sand": 600, "moist-clay": 900, "dry-clay": 900,
            "thermal-backfill": 600, "agar-gel": 900, "glycerol": 1200, "weathered-rock": 600, "moist-peat": 1200}
_LN_SHORT = {"dry-sand": 120, "moist-sand": 60, "saturated-sand": 90, "moist-clay": 90, "dry-clay": 150,
             "thermal-backfill": 60, "agar-gel": 120, "glycerol": 150, "weathered-rock": 90, "moist-peat": 150}


def _lab_needle_records() -> list[Params]:
    out: list[Params] = []
    for m in MEDIA:
        th = _LN_LONG[m]
        out.append(_ln(f"ln-{m}-{th}s", "lab-needle-long", f"Lab needle in {m}, {th} s heating, equal recovery.",
                       m, _LN_Q[m], th, th))
    for m in MEDIA:
        th = _LN_SHORT[m]
        out.append(_ln(f"ln-{m}-{th}s", "lab-needle-short",
                       f"Lab needle in {m}, short {th} s heating, {2 * th} s recovery.", m, _LN_Q[m], th, 2 * th))
    for m, gap, tag in (("moist-sand", 5e-6, "small"), ("moist-sand", 25e-6, "large"), ("dry-sand", 5e-6, "small"),
                        ("dry-sand", 25e-6, "large"), ("saturated-sand", 25e-6, "large")):
        out.append(_ln(f"ln-{m}-gap{round(gap * 1e6)}um", "lab-needle-contact",
                       f"Lab needle in {m} behind a {gap * 1e6:.0f} µm air gap ({tag} contact resistance), "
                       "600 s heating.", m, _LN_Q[m], 600, 600, gap_m=gap))
    for m in ("moist-sand", "saturated-sand", "dry-sand", "glycerol"):
        out.append(_ln(f"ln-epoxy-{m}", "lab-needle-low-k-fill",
                       f"Lab needle with unfilled epoxy (k 0.20) between heater and sheath in {m}; thermocouple "
                       "on the axis, so the probe's own resistance is in the reading; 600 s heating.",
                       m, _LN_Q[m], 600, 600, fill="epoxy", profile="ref-lab-needle-epoxy.toml"))
    out.append(_ln("ln-epoxy-wall-moist-sand", "lab-needle-low-k-fill",
                   "As ln-epoxy-moist-sand but the junction sits in the filler at r = 0.40 mm, near the sheath.",
                   "moist-sand", _LN_Q["moist-sand"], 600, 600, fill="epoxy", sensor_r=0.40e-3,
                   profile="ref-lab-needle-epoxy.toml"))
    for m in ("saturated-sand", "weathered-rock"):
        out.append(_ln(f"ln-{m}-1200s-axial", "lab-needle-axial",
                       f"Lab needle in {m} (high diffusivity), 1200 s heating: axial loss bends the line after "
                       "about L²/(53α) ≈ 200 s.", m, _LN_Q[m], 1200, 1200,
                       answer=f"k, α, ρc of {m}; the late heating is bent by axial loss (a window must end early)"))
    out.append(_ln("ln-moist-sand-z25", "lab-needle-axial",
                   "Lab needle in moist sand, thermocouple 25 mm from the heater's lower end; 900 s heating.",
                   "moist-sand", _LN_Q["moist-sand"], 900, 900, sensor_z=LN_HEATED[0] + 0.025,
                   profile="ref-lab-needle-z25.toml",
                   answer="k, α, ρc of moist-sand; the sensor off mid-length sees axial loss earlier"))
    # finite samples in a bath: cylinder of radius R around the needle, bath at the side, bottom and top
    for m, radius, th in (("moist-sand", 25.4e-3, 600), ("agar-gel", 25.4e-3, 1200), ("dry-sand", 20e-3, 600)):
        grid = {**LN_GRID, "r_out_m": radius, "z_bottom_m": -0.05, "bc_top": "fixed", "medium_ratio": 1.1}
        out.append(_ln(f"ln-{m}-bath-r{radius * 1e3:.1f}mm", "lab-needle-finite-sample",
                       f"Lab needle on the axis of a sample of {m}, radius {radius * 1e3:.1f} mm, 50 mm below the "
                       f"tip, held at the bath temperature on every face; {th} s heating; the boundary is reached "
                       "before the planned end.", m, _LN_Q[m], th, th, grid=grid,
                       twins=[{"label": "infinite", "grid": LN_GRID}],
                       answer=f"k, α, ρc of {m}; after t_departure_1pct_s the bath bends the line (flag it, "
                              "window before it)"))
    out.append(_ln("ln-moist-sand-sag", "lab-needle-power",
                   "Lab needle in moist sand; the supply sags linearly by 10 % over the 600 s heating (a new "
                   "level each second, as logged).", "moist-sand", _sag(6.0, 0.10, 600, 1.0), 600, 600))
    out.append(_ln("ln-dry-clay-sag", "lab-needle-power",
                   "Lab needle in dry clay; battery sag of 15 % with a 200 s time constant over a 900 s heating, "
                   "logged every 2 s.", "dry-clay", _sag(1.0, 0.15, 900, 2.0, tau_s=200.0), 900, 900))
    out.append(_ln("ln-moist-clay-step", "lab-needle-power",
                   "Lab needle in moist clay; power raised from 3.0 to 4.5 W/m at 300 s, off at 900 s.",
                   "moist-clay", _steps([0, 300, 900], [3.0, 4.5, 0.0]), 900, 900))
    return out


def _dual_records() -> list[Params]:
    out: list[Params] = []
    for m, mat in MEDIA.items():
        t_peak = DN_S**2 / (4 * mat.alpha) + 4.0
        t_end = max(150.0, 30.0 * math.ceil(6.0 * t_peak / 30.0))
        out.append(_dual(f"dn-pulse-{m}", "dual-needle-pulse",
                         f"Dual needle in {m}: 8 s pulse at 50 W/m, logged to about 6 peak times.", m,
                         _heat(50.0, 8.0), 8.0, t_end))
    out.append(_dual("dn-pulse-moist-sand-gap", "dual-needle-pulse",
                     "Dual needle in moist sand, both needles behind a 10 µm air gap; 8 s pulse at 50 W/m.",
                     "moist-sand", _heat(50.0, 8.0), 8.0, 150.0, gap_m=10e-6))
    out.append(_dual("dn-pulse-dry-sand-long", "dual-needle-pulse",
                     "Dual needle in dry sand, 16 s pulse at 30 W/m.", "dry-sand", _heat(30.0, 16.0), 16.0, 480.0))
    out.append(_dual("dn-heat-moist-clay-120s", "dual-needle-heating",
                     "Dual needle in moist clay: continuous heating 120 s at 20 W/m, 240 s recovery.",
                     "moist-clay", _heat(20.0, 120.0), 120.0, 360.0))
    # the finite length of the 40 mm heater, axisymmetric, the sensor a point in the medium (no second needle)
    for m, t_end in (("moist-sand", 150.0), ("dry-sand", 450.0)):
        probe = {"layers": dual_needle_layers(),
                 "heated_z_m": [0.5e-3, 0.5e-3 + DN_LENGTH], "top_m": DN_LENGTH + 10.5e-3, "tip_cap_m": 0.5e-3,
                 "gap": None}
        mid = 0.5e-3 + DN_LENGTH / 2
        grid = {**LN_GRID, "z_top_m": probe["top_m"], "dz_max_m": 1e-3, "medium_ratio": 1.04}
        out.append(_axi(f"dn-length-{m}", "dual-needle-length",
                        f"The 40 mm heater needle alone in {m}, axisymmetric: 8 s pulse at 50 W/m read in the "
                        "medium 8 mm from the axis at mid-length (no second needle). Compare with the planar "
                        f"dn-pulse-{m} for the effect of the finite length.",
                        probe, [MEDIA[m]], [], [("heater", 0.0, mid), ("needle", DN_S, mid)], _heat(50.0, 8.0),
                        8.0, t_end, grid, DN_TIME, DN_INSTR, "ref-dual-needle.toml",
                        answer=f"k, α, ρc of {m}; 'needle' is a point in the medium at 8 mm (no needle there)"))
    return out


def _dual(name: str, family: str, description: str, medium: str, power: dict[str, Any], t_heat: float,
          t_end: float, gap_m: float = 0.0) -> Params:
    lays = dual_needle_layers(gap_m)
    return {"name": name, "family": family, "description": description, "solver": "planar",
            "heater": {"layers": lays}, "sensor_needle": {"layers": lays}, "spacing_m": DN_S,
            "medium": _mat(MEDIA[medium]), "sensors": [{"name": "heater"}, {"name": "needle"}],
            "power": power, "t_heat_s": t_heat, "t_end_s": t_end, "grid": DN_GRID, "time": DN_TIME,
            "instrument": DN_INSTR, "profile": "ref-dual-needle.toml", "twins": [],
            "answer": f"k, α, ρc of {medium} (needles infinitely long; spacing 8 mm centre to centre)"}


def _rod(name: str, description: str, media: list[str], tops: list[float], power: dict[str, Any], t_heat: float,
         t_end: float, annulus: tuple[str, float] | None = None, twins: bool = False, answer: str = "") -> Params:
    sensors = [(f"j{round(z * 1000)}", 0.0, z) for z in ROD_JUNCTIONS]
    tw = []
    if twins:
        for m in dict.fromkeys(media):
            tw.append({"label": f"homogeneous {m}", "medium": {"layers": [_mat(MEDIA[m])], "tops_m": []}})
    return _axi(name, "field-rod", description, field_rod(annulus), [MEDIA[m] for m in media], tops, sensors,
                power, t_heat, t_end, ROD_GRID, ROD_TIME, ROD_INSTR, "ref-field-rod.toml", tw,
                answer or f"k, α, ρc of {media[0]} at every junction")


def _rod_records() -> list[Params]:
    return [
        _rod("rod-moist-clay-1800s", "Field rod in moist clay, 20 W/m for 1800 s, 1800 s recovery.", ["moist-clay"],
             [], _heat(20.0, 1800), 1800, 3600),
        _rod("rod-weathered-rock-1800s", "Field rod in weathered sandstone, 30 W/m for 1800 s, 1800 s recovery.",
             ["weathered-rock"], [], _heat(30.0, 1800), 1800, 3600),
        _rod("rod-saturated-sand-600s", "Field rod in saturated sand, a short 600 s heating at 30 W/m.",
             ["saturated-sand"], [], _heat(30.0, 600), 600, 1200),
        _rod("rod-layered-sand-over-clay", "Field rod across a layer boundary 750 mm above the tip: moist clay "
             "below, moist sand above; 20 W/m for 3600 s, 3600 s recovery.", ["moist-clay", "moist-sand"], [0.75],
             _heat(20.0, 3600), 3600, 7200, twins=True,
             answer="j300 and j600: moist-clay; j900 and j1200: moist-sand (each junction ≥ 150 mm from the "
                    "boundary); t_departure_1pct_s says when the other layer bends each junction's line"),
        _rod("rod-layered-three", "Field rod through three layers: moist clay below 0.45 m, thermal backfill to "
             "1.05 m, moist peat above; 20 W/m for 1800 s.", ["moist-clay", "thermal-backfill", "moist-peat"],
             [0.45, 1.05], _heat(20.0, 1800), 1800, 3600, twins=True,
             answer="j300: moist-clay; j600 and j900: thermal-backfill; j1200: moist-peat"),
        _rod("rod-layered-near-boundary", "Field rod with a layer boundary 50 mm above the 600 mm junction: moist "
             "clay below 0.65 m, weathered sandstone above; 20 W/m for 3600 s, 3600 s recovery.",
             ["moist-clay", "weathered-rock"], [0.65], _heat(20.0, 3600), 3600, 7200, twins=True,
             answer="j300, j600: moist-clay; j900, j1200: weathered-rock. j600 sits 50 mm below the boundary: "
                    "its line leaves the clay's after t_departure_1pct_s (a depth-weighted value, no single k)"),
        _rod("rod-moist-clay-annulus", "Field rod in an augered hole in moist clay, the 2 mm annulus around the "
             "tube backfilled with dry sand; 20 W/m for 1800 s.", ["moist-clay"], [], _heat(20.0, 1800), 1800,
             3600, annulus=("dry-sand", 2e-3),
             answer="k, α, ρc of moist-clay (the dry-sand annulus acts as a thick contact layer)"),
        _rod("rod-dry-clay-gap", "Field rod in dry clay behind a 0.1 mm air gap; 8 W/m for 1800 s.",
             ["dry-clay"], [], _heat(8.0, 1800), 1800, 3600, annulus=("air", 0.1e-3)),
        _rod("rod-moist-sand-sag", "Field rod in moist sand on a battery: 25 W/m sagging 12 % (time constant "
             "600 s) over a 2400 s heating, logged every 10 s.", ["moist-sand"], [],
             _sag(25.0, 0.12, 2400, 10.0, tau_s=600.0), 2400, 4800),
    ]


def catalogue() -> list[Params]:
    """Every record's parameters, in a stable order."""
    recs = [*_lab_needle_records(), *_dual_records(), *_rod_records()]
    names = [r["name"] for r in recs]
    if len(set(names)) != len(names):
        raise ValueError("duplicate record names")
    return recs


CATALOGUE: dict[str, Params] = {r["name"]: r for r in catalogue()}


def _lumped(layers: list[dict[str, Any]]) -> tuple[float, float]:
    """Outer radius and the volumetric heat capacity of the whole cross-section (what a user would estimate)."""
    s, r_in = 0.0, 0.0
    for lay in layers:
        s += math.pi * (lay["r_out_m"] ** 2 - r_in**2) * lay["material"]["rho_c_J_per_m3K"]
        r_in = lay["r_out_m"]
    return r_in, s / (math.pi * r_in**2)


def _profile(name: str, serial: str, kind: str, length_m: float, layers: list[dict[str, Any]],
             sensors: list[tuple[str, float, float]], note: str) -> str:
    a, c = _lumped(layers)
    lines = [f"# {note}", "# Written by tests/reference/generate.py from tests/reference/catalogue.py.", "[probe]",
             f'name = "{name}"', f'serial = "{serial}"', f'kind = "{kind}"',
             f"heater_length_mm = {length_m * 1e3:.1f}", f"radius_mm = {a * 1e3:.4g}",
             f"heat_capacity_MJ_per_m3K = {c / 1e6:.3f}     # whole cross-section, lumped", 'thermocouple = "T"']
    for sname, radial, axial in sensors:
        lines += ["[[sensor]]", f'name = "{sname}"', f"radial_mm = {radial * 1e3:.4g}",
                  f"axial_mm = {axial * 1e3:.4g}             # from the tip"]
    return "\n".join(lines) + "\n"


def _profiles() -> dict[str, str]:
    ln = lab_needle()["layers"]
    lne = lab_needle("epoxy")["layers"]
    rod = field_rod()["layers"]
    dn = dual_needle_layers()
    return {
        "ref-lab-needle.toml": _profile("Reference lab needle, 100 mm", "REF-LN-01", "single", 0.1, ln,
                                        [("heater", 0.0, LN_MID)],
                                        "Lab needle of the reference records: filled-epoxy fill, junction on the "
                                        "axis at mid-length."),
        "ref-lab-needle-epoxy.toml": _profile("Reference lab needle, 100 mm, unfilled epoxy", "REF-LN-02",
                                              "single", 0.1, lne, [("heater", 0.0, LN_MID)],
                                              "Lab needle of the reference records with unfilled epoxy fill."),
        "ref-lab-needle-z25.toml": _profile("Reference lab needle, 100 mm, junction at 25 mm", "REF-LN-03",
                                            "single", 0.1, ln, [("heater", 0.0, LN_HEATED[0] + 0.025)],
                                            "Lab needle of the reference records, junction 25 mm above the "
                                            "heater's lower end."),
        "ref-dual-needle.toml": _profile("Reference dual needle, 40 mm, 8 mm spacing", "REF-DN-01", "dual",
                                         DN_LENGTH, dn, [("heater", 0.0, DN_LENGTH / 2),
                                                         ("needle", DN_S, DN_LENGTH / 2)],
                                         "Dual needle of the reference records: 1.0 mm needles 8 mm apart."),
        "ref-field-rod.toml": _profile("Reference field rod, 1.5 m", "REF-FR-01", "rod", 1.5, rod,
                                       [(f"j{round(z * 1000)}", 0.0, z) for z in ROD_JUNCTIONS],
                                       "Field rod of the reference records: 8 mm steel tube, four junctions."),
    }


PROFILES: dict[str, str] = _profiles()
