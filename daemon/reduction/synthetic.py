"""Synthetic records from the probe model, for tests and benchmarks (pure; the caller supplies the rng).

Exact Duhamel superposition of every power step (no compression), optional finite heater length (the
finite-line correction of §2.6 type, ∫ e^−u/u·erf((L/2r)√u) du, applied as a difference to the infinite line),
finite sample (boundary held at the initial temperature), drift, noise and a sagging supply.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.integrate import quad
from scipy.special import erf, exp1

from .data import RunData
from .probe_model import response_stehfest


@dataclass(frozen=True)
class Medium:
    k_W_per_mK: float
    rho_c_J_per_m3K: float

    @property
    def alpha_m2_per_s(self) -> float:
        return self.k_W_per_mK / self.rho_c_J_per_m3K


def finite_line_deficit(t: np.ndarray, r_m: float, alpha: float, length_m: float) -> np.ndarray:
    """4πk/q·(ΔT_infinite − ΔT_finite) at mid-length of a heater of length L (line source)."""
    out = np.zeros_like(np.asarray(t, dtype=float))
    for i, ti in enumerate(np.asarray(t, dtype=float)):
        if ti <= 0:
            continue
        x0 = r_m**2 / (4 * alpha * ti)
        c = length_m / (2 * r_m)
        out[i] = quad(lambda v, c=c: math.exp(-v) / v * (1.0 - float(erf(c * math.sqrt(v)))), x0, np.inf,
                      limit=200)[0]
    return out


def unit_response(ages: np.ndarray, medium: Medium, radius_m: float, probe_C: float | None, h: float = 0.0,
                  r_sensor_m: float | None = None, length_m: float | None = None,
                  outer_radius_m: float | None = None) -> np.ndarray:
    """ΔT per W/m of a step at age t (K), heater sensor (r_sensor None) or a sensor in the medium."""
    ages = np.asarray(ages, dtype=float)
    alpha = medium.alpha_m2_per_s
    aj = None if probe_C is None else 2.0 * medium.rho_c_J_per_m3K / probe_C
    rho = 1.0 if r_sensor_m is None else r_sensor_m / radius_m
    outer = None if outer_radius_m is None else outer_radius_m / radius_m
    out = np.zeros_like(ages)
    pos = ages > 0
    u = np.unique(ages[pos])
    f = response_stehfest(u * alpha / radius_m**2, aj, h, rho, outer)
    if length_m is not None:
        r_eff = radius_m if r_sensor_m is None else r_sensor_m
        f = f - finite_line_deficit(u, r_eff, alpha, length_m)
    out[pos] = np.interp(ages[pos], u, f)
    return out / (4 * math.pi * medium.k_W_per_mK)


def make_run(medium: Medium, *, q_W_per_m: float = 5.0, radius_m: float = 0.635e-3,
             probe_C: float | None = 2.5e6, h: float = 0.0, heat_s: float = 600.0, recover_s: float = 0.0,
             baseline_s: float = 120.0, dt_s: float = 1.0, noise_K: float = 0.0, drift_K_per_h: float = 0.0,
             sag_fraction: float = 0.0, q_noise_rel: float = 0.0, r_sensor_m: float | None = None,
             length_m: float | None = None, outer_radius_m: float | None = None, t0_C: float = 20.0,
             rng: np.random.Generator | None = None, sensor: str = "heater") -> RunData:
    """One run: baseline, heating at q (sagging linearly by ``sag_fraction`` over the heating), recovery."""
    t = np.arange(-baseline_s, heat_s + recover_s + dt_s / 2, dt_s)
    q = np.where((t >= 0) & (t < heat_s), q_W_per_m * (1.0 - sag_fraction * np.clip(t, 0, None) / heat_s), 0.0)
    if q_noise_rel and rng is not None:
        q = np.where(q > 0, q * (1.0 + q_noise_rel * rng.standard_normal(t.size)), 0.0)
    on = t >= 0
    dq = np.diff(np.where(on, q, 0.0), prepend=0.0)
    st = t[on & (dq != 0)]
    sd = dq[on & (dq != 0)]
    st = np.where(st == t[on][0], 0.0, st)
    ages = t[:, None] - st[None, :]
    uniq_ages = np.unique(ages[ages > 0])
    resp = unit_response(uniq_ages, medium, radius_m, probe_C, h, r_sensor_m, length_m, outer_radius_m)
    G = np.zeros_like(ages)
    pos = ages > 0
    G[pos] = np.interp(ages[pos], uniq_ages, resp)
    dT = G @ sd
    T = t0_C + dT + drift_K_per_h / 3600.0 * t
    if noise_K and rng is not None:
        T = T + noise_K * rng.standard_normal(t.size)
    return RunData(time_s=t, q_W_per_m=q, temps_C={sensor: T})


def line_source_run(k: float, rho_c: float, q: float, r_m: float, t: np.ndarray, t_heat: float | None = None
                    ) -> np.ndarray:
    """Ideal line source ΔT at r (Carslaw & Jaeger §10.4), with recovery after t_heat."""
    alpha = k / rho_c
    t = np.asarray(t, dtype=float)
    out = np.zeros_like(t)
    on = t > 0
    out[on] = exp1(r_m**2 / (4 * alpha * t[on]))
    if t_heat is not None:
        off = t > t_heat
        out[off] -= exp1(r_m**2 / (4 * alpha * (t[off] - t_heat)))
    return q / (4 * math.pi * k) * out
