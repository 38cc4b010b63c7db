"""Invented demo media for the simulator, with properties typical of what they stand for.

Each `note` says where the numbers come from. The soils follow de Vries (1963) as tabulated by Moene & van Dam
(2014, Table 2.2) and the Johansen (1975) Kersten-number model; volumetric heat capacity follows the de Vries
linear mix C ≈ 1.92·x_mineral + 2.51·x_organic + 4.18·θ MJ/(m³·K). Water is IAPWS 2011 at 20 °C.
These are demo media, not certified reference values.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["DEFAULT_MATERIAL_KEY", "MATERIALS", "SOIL_TEXTURES", "Material", "get_material", "soil_at_moisture"]


@dataclass(frozen=True)
class Material:
    """A homogeneous medium. `bulk_density_kg_per_m3`: dry bulk density for soils, density for liquids."""

    key: str
    name: str
    k_W_per_mK: float
    rho_c_J_per_m3K: float
    bulk_density_kg_per_m3: float | None
    note: str

    @property
    def diffusivity_m2_per_s(self) -> float:
        return self.k_W_per_mK / self.rho_c_J_per_m3K

    @property
    def resistivity_mK_per_W(self) -> float:
        return 1.0 / self.k_W_per_mK


_ALL = [
    Material(
        "dry-sand", "Dry quartz sand", 0.30, 1.30e6, 1600.0,
        "Oven-dry sand, porosity about 0.4. de Vries (1963): dry sand 0.24-0.29 W/(m K), "
        "C 1.28-1.42 MJ/(m3 K) for n = 0.4-0.33; a slightly denser packing than n = 0.4 gives 0.30.",
    ),
    Material(
        "moist-sand", "Moist sand", 1.45, 1.57e6, 1590.0,
        "Quartz-rich sand, n = 0.40, water content theta = 0.10 (Sr = 0.25). Johansen (1975) "
        "coarse-soil model with quartz fraction 0.8 gives 1.32 at Sr 0.2 and 1.58 at Sr 0.3; "
        "C = 1.92*0.60 + 4.18*0.10 = 1.57 "
        "MJ/(m3 K) (de Vries 1963 mix).",
    ),
    Material(
        "saturated-sand", "Water-saturated sand", 2.50, 2.96e6, 1590.0,
        "Sand, n = 0.40, all pores water-filled: de Vries (1963) gives 2.5 W/(m K) and C 2.96 MJ/(m3 K).",
    ),
    Material(
        "moist-clay", "Moist clay", 1.15, 2.69e6, 1500.0,
        "Clay, n = 0.4, theta about 0.3: midway between de Vries (1963) clay at theta 0.2 (0.9 W/(m K), "
        "C 2.27) and theta 0.4 (1.4, C 3.10).",
    ),
    Material(
        "dry-clay", "Air-dry clay", 0.25, 1.50e6, 1450.0,
        "Air-dry compacted clay holding a little water. de Vries (1963) gives 0.15 W/(m K), C 1.43 for "
        "oven-dry clay at n = 0.4; a few per cent water lifts k to roughly 0.2-0.3 (from memory, typical "
        "field values).",
    ),
    Material(
        "thermal-backfill", "Flowable cement-sand backfill (moist)", 1.80, 2.01e6, 1900.0,
        "A lean mix of sand, fine aggregate and a little cement placed as a slurry around buried cables: "
        "typically 50-75 C cm/W when moist "
        "(k 1.3-2.0; value from memory, unconfirmed); 1.8 W/(m K) = 56 C cm/W. C = 1.92*0.72 + 4.18*0.15 = "
        "2.01 MJ/(m3 K) (de Vries 1963 mix at porosity 0.28, theta 0.15).",
    ),
    Material(
        "agar-gel", "Agar-gelled water (0.5 % agar)", 0.598, 4.177e6, 1000.0,
        "Water at 20 C (IAPWS 2011 conductivity, Huber et al. 2012: 0.598 W/(m K); IAPWS-95 rho c 4.177 "
        "MJ/(m3 K)). A little agar stops free convection and changes k by about 1-2 % (unconfirmed).",
    ),
    Material(
        "glycerol", "Glycerol (reference liquid)", 0.286, 3.06e6, 1261.0,
        "Anhydrous glycerol near 20 C: k 0.285-0.292 W/(m K) in handbook tables (from memory, within 2 %); "
        "density 1261 kg/m3, cp about 2.43 kJ/(kg K), so rho c about 3.06 MJ/(m3 K). Very viscous, so free "
        "convection stays small.",
    ),
    Material(
        "weathered-rock", "Weathered sandstone", 2.00, 2.20e6, 2300.0,
        "Fractured, partly weathered sandstone near the water table: typical sedimentary rock "
        "1.5-3.5 W/(m K), C 2.0-2.5 MJ/(m3 K) (from memory, typical handbook range).",
    ),
    Material(
        "moist-peat", "Moist peat", 0.30, 2.10e6, 250.0,
        "Peat, n = 0.9, half saturated: de Vries (1963) gives 0.27 W/(m K) at theta 0.45. C = 2.51*0.10 + "
        "4.18*0.45 = 2.13 MJ/(m3 K) (de Vries mix).",
    ),
]

MATERIALS: dict[str, Material] = {m.key: m for m in _ALL}
DEFAULT_MATERIAL_KEY = "moist-sand"


def get_material(key: str) -> Material:
    """The demo material called `key`; KeyError naming the valid keys otherwise."""
    try:
        return MATERIALS[key]
    except KeyError:
        raise KeyError(f"unknown material {key!r}; choose one of: {', '.join(MATERIALS)}") from None


# ---- soils at any moisture content, for simulated dry-out curves ----

WATER_K_W_PER_MK = 0.60
"""Johansen (1975) takes about 0.57-0.60 for pore water; 0.60 is water near 20 C (IAPWS 2011: 0.598)."""

SOIL_TEXTURES: dict[str, tuple[float, str]] = {
    # texture: (Côté & Konrad 2005 unfrozen kappa, Johansen 1975 Kersten-number branch)
    "coarse": (4.60, "coarse"),  # gravel and coarse sand
    "sand": (3.55, "coarse"),  # medium and fine sand
    "fine": (1.90, "fine"),  # silty and clayey soils
}


def soil_at_moisture(
    water_content: float,
    *,
    porosity: float = 0.40,
    dry_density_kg_per_m3: float | None = None,
    quartz_fraction: float = 0.8,
    texture: str = "sand",
    model: str = "cote-konrad",
    particle_density_kg_per_m3: float = 2650.0,
) -> Material:
    """An unfrozen mineral soil at volumetric water content θ (m³/m³), for dry-out curves.

    Conductivity follows the Kersten-number framework k = k_dry + Ke·(k_sat − k_dry) (Johansen 1975, as
    summarised by Farouki 1981): k_sat = k_s^(1−n)·k_w^n with k_s = 7.7^q·k_o^(1−q) (k_o = 2.0 for q > 0.2,
    else 3.0). `model` "johansen": k_dry = (0.135ρd + 64.7)/(2700 − 0.947ρd), Ke = 0.7·log10(Sr) + 1 (coarse)
    or log10(Sr) + 1 (fine); "cote-konrad" (Côté & Konrad 2005): k_dry = 0.75·10^(−1.2n),
    Ke = κ·Sr/(1 + (κ − 1)·Sr). Heat capacity is the de Vries (1963) mix 1.92·(1 − n) + 4.18·θ MJ/(m³·K).
    The model constants are quoted from memory of those papers; good enough for demo soils.
    """
    if texture not in SOIL_TEXTURES:
        raise ValueError(f"texture must be one of {', '.join(SOIL_TEXTURES)}, got {texture!r}")
    if model not in ("johansen", "cote-konrad"):
        raise ValueError(f"model must be 'johansen' or 'cote-konrad', got {model!r}")
    rho_s = float(particle_density_kg_per_m3)
    if dry_density_kg_per_m3 is not None:
        porosity = 1.0 - float(dry_density_kg_per_m3) / rho_s
    n = float(porosity)
    if not 0.05 < n < 0.95:
        raise ValueError(f"porosity must lie between 0.05 and 0.95, got {n:.3f} (check the dry density)")
    theta = float(water_content)
    if not 0.0 <= theta <= n + 1e-12:
        raise ValueError(f"water_content must lie between 0 and the porosity {n:.3f}, got {theta}")
    q = float(quartz_fraction)
    if not 0.0 <= q <= 1.0:
        raise ValueError(f"quartz_fraction must lie between 0 and 1, got {q}")
    rho_d = (1.0 - n) * rho_s
    sr = min(theta / n, 1.0)
    k_solids = 7.7**q * (2.0 if q > 0.2 else 3.0) ** (1.0 - q)
    k_sat = k_solids ** (1.0 - n) * WATER_K_W_PER_MK**n
    kappa, branch = SOIL_TEXTURES[texture]
    if model == "johansen":
        k_dry = (0.135 * rho_d + 64.7) / (2700.0 - 0.947 * rho_d)
        if branch == "coarse":
            ke = 0.7 * math.log10(sr) + 1.0 if sr > 0.05 else 0.0
        else:
            ke = math.log10(sr) + 1.0 if sr > 0.1 else 0.0
        ke = max(ke, 0.0)
    else:
        k_dry = 0.75 * 10.0 ** (-1.2 * n)
        ke = kappa * sr / (1.0 + (kappa - 1.0) * sr)
    k = k_dry + ke * (k_sat - k_dry)
    rho_c = (1.92 * (1.0 - n) + 4.18 * theta) * 1e6
    return Material(
        key=f"{texture}-soil-theta-{round(theta * 1000):03d}",
        name=f"{texture.capitalize()} soil, water content {theta:.3f} m3/m3",
        k_W_per_mK=k,
        rho_c_J_per_m3K=rho_c,
        bulk_density_kg_per_m3=rho_d,
        note=f"Generated: porosity {n:.3f}, quartz fraction {q:.2f}, Sr {sr:.3f}, {model} Kersten model.",
    )
