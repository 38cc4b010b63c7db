"""Sensors at a known distance r from the heater: diffusivity and volumetric heat capacity.

A long heating is fitted with the probe model evaluated in the medium at r (``probe_model``; for a thin heater
this is the line source, ΔT = q/(4πk)·E1(r²/4αt), Carslaw & Jaeger 1959 §10.4). A short pulse is also checked
with the finite-pulse peak relations of Kluitenberg, Ham & Bristow (1993) and Bristow et al. (1994):
κ = (r²/4)·[1/(t_m − t0) − 1/t_m] / ln[t_m/(t_m − t0)] and
ρc = q/(4π·κ·ΔT_m)·[E1(r²/4κt_m) − E1(r²/4κ(t_m − t0))], k = κ·ρc.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.interpolate import CubicSpline
from scipy.special import exp1


@dataclass(frozen=True)
class PulseCheck:
    t_peak_s: float
    rise_peak_K: float
    alpha_m2_per_s: float
    rho_c_J_per_m3K: float
    k_W_per_mK: float

    def to_dict(self) -> dict[str, float]:
        return {"t_peak_s": self.t_peak_s, "rise_peak_K": self.rise_peak_K,
                "alpha_mm2_per_s": self.alpha_m2_per_s * 1e6, "rho_c_MJ_per_m3K": self.rho_c_J_per_m3K / 1e6,
                "k_W_per_mK": self.k_W_per_mK}


def peak(t: np.ndarray, dT: np.ndarray) -> tuple[float, float]:
    """Time and height of the maximum: a cubic spline through the points above 80 % of it, at its zero slope."""
    i = int(np.argmax(dT))
    m = float(dT[i])
    if i in (0, dT.size - 1):
        return float(t[i]), m
    lo, hi = i, i
    while lo > 0 and dT[lo - 1] >= 0.8 * m and i - lo < 200:
        lo -= 1
    while hi < dT.size - 1 and dT[hi + 1] >= 0.8 * m and hi - i < 200:
        hi += 1
    lo, hi = max(min(lo, i - 2), 0), min(max(hi, i + 2), dT.size - 1)
    if hi - lo < 4:
        return float(t[i]), m
    sp = CubicSpline(t[lo:hi + 1], dT[lo:hi + 1])
    roots = [float(r) for r in sp.derivative().roots(extrapolate=False) if t[max(i - 1, lo)] <= r <= t[min(i + 1, hi)]]
    if not roots:
        return float(t[i]), m
    best = max(roots, key=lambda r: float(sp(r)))
    return best, float(sp(best))


def pulse_inverse(r_m: float, q_W_per_m: float, t0_s: float, t_peak_s: float, rise_peak_K: float
                  ) -> tuple[float, float, float]:
    """(κ, ρc, k) from the peak of a finite heat pulse of length t0 (Kluitenberg et al. 1993)."""
    if t_peak_s <= t0_s:
        raise ValueError("the peak must come after the end of the pulse")
    kappa = (r_m**2 / 4.0) * (1.0 / (t_peak_s - t0_s) - 1.0 / t_peak_s) / math.log(t_peak_s / (t_peak_s - t0_s))
    e = float(exp1(r_m**2 / (4 * kappa * t_peak_s)) - exp1(r_m**2 / (4 * kappa * (t_peak_s - t0_s))))
    rho_c = q_W_per_m / (4.0 * math.pi * kappa * rise_peak_K) * e
    return kappa, rho_c, kappa * rho_c


def pulse_forward(r_m: float, q_W_per_m: float, t0_s: float, k: float, rho_c: float, t: np.ndarray
                  ) -> np.ndarray:
    """Finite-pulse line-source response at r (for tests and simulation)."""
    kappa = k / rho_c
    t = np.asarray(t, dtype=float)
    out = np.zeros_like(t)
    on = t > 0
    out[on] = exp1(r_m**2 / (4 * kappa * t[on]))
    off = t > t0_s
    out[off] -= exp1(r_m**2 / (4 * kappa * (t[off] - t0_s)))
    return q_W_per_m / (4 * math.pi * k) * out


def pulse_check(t: np.ndarray, dT: np.ndarray, r_m: float, q_W_per_m: float, t0_s: float) -> PulseCheck | None:
    """The peak relations applied to a recorded pulse, or None when the record has no clear peak after t0."""
    sel = t > 0
    if np.count_nonzero(sel) < 5:
        return None
    tp, hp = peak(t[sel], dT[sel])
    if tp <= t0_s * 1.05 or hp <= 0 or tp >= float(t[sel][-1]):
        return None
    try:
        kappa, rc, k = pulse_inverse(r_m, q_W_per_m, t0_s, tp, hp)
    except (ValueError, ZeroDivisionError):
        return None
    return PulseCheck(tp, hp, kappa, rc, k)
