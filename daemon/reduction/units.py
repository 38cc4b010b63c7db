"""Trade units at the edges: resistivity, diffusivity, volumetric and specific heat. SI everywhere else.

1 K·m/W = 100 °C·cm/W (a temperature difference of 1 K equals 1 °C; 1 m = 100 cm).
"""

from __future__ import annotations


def resistivity_mK_per_W(k_W_per_mK: float) -> float:
    return 1.0 / k_W_per_mK


def resistivity_Ccm_per_W(k_W_per_mK: float) -> float:
    return 100.0 / k_W_per_mK


def mK_per_W_to_Ccm_per_W(rho_mK_per_W: float) -> float:
    return 100.0 * rho_mK_per_W


def Ccm_per_W_to_mK_per_W(rho_Ccm_per_W: float) -> float:
    return rho_Ccm_per_W / 100.0


def m2_per_s_to_mm2_per_s(alpha_m2_per_s: float) -> float:
    return alpha_m2_per_s * 1e6


def mm2_per_s_to_m2_per_s(alpha_mm2_per_s: float) -> float:
    return alpha_mm2_per_s * 1e-6


def J_per_m3K_to_MJ_per_m3K(rho_c: float) -> float:
    return rho_c * 1e-6


def MJ_per_m3K_to_J_per_m3K(rho_c_MJ: float) -> float:
    return rho_c_MJ * 1e6


def specific_heat_J_per_kgK(rho_c_J_per_m3K: float, bulk_density_kg_per_m3: float) -> float:
    """c = ρc/ρ: needs the bulk density of the sample as tested."""
    if bulk_density_kg_per_m3 <= 0:
        raise ValueError(f"bulk density must be > 0 kg/m³, got {bulk_density_kg_per_m3}")
    return rho_c_J_per_m3K / bulk_density_kg_per_m3


def resistivity_u(k: float, k_u: float) -> float:
    """Standard uncertainty of 1/k from that of k (first order)."""
    return k_u / (k * k)
