"""Temperature at a second needle a few millimetres from a heated one: the forward model of the heat-pulse method.

The ideal finite pulse (Kluitenberg, Ham & Bristow 1993; Bristow, Kluitenberg & Horton 1994) is the line-source
solution superposed twice: ΔT = q/(4πk)·[E1(r²/4αt) − E1(r²/4α(t − t0))]. Real needles have a radius and a heat
capacity, and are a few spacings long. This model keeps the same superposition (over every measured power step,
Duhamel) but replaces E1 by the step response of

* the heater as a perfectly conducting cylinder of radius a with heat capacity S_h = πa²·C_h per metre behind a
  contact resistance R (Blackwell 1954; Jaeger 1956; Carslaw & Jaeger 1959 §13.7), whose field in the medium at r
  is B·K0(βr), β = √(s/α). The contact matters only with the heat capacity: it delays the charging of the needle;
* the sensor needle as a perfectly conducting cylinder of radius b and heat capacity S_s = πb²·C_s, bathed in
  that field. Its monopole response (the field's mean over the needle, to first order in the needle's size) in
  the Laplace domain is θ̄_s = θ̄_inc / [1 + (ζ/α_s)·K0(ζ)/K1(ζ)], ζ = βb, α_s = 2ρc/C_s: from continuity of
  temperature and the heat balance S_s·s·θ̄_s = 2πbk·∂θ̄/∂ρ at its surface, with the scattered part A·K0(βρ).
  A needle holding as much heat as the soil it displaced still lags, because it is a conductor and not soil;
* a heater of finite length L with the sensor at height z: for a line source the impulse response factorises
  into the planar one times ½[erf((L − z)/2√(αt)) + erf(z/2√(αt))] (Carslaw & Jaeger 1959 §10.3: the Green's
  function of the heat equation is a product over the axes). The factor is applied to the planar cylinder
  response as a Stieltjes sum over its tabulated step response; exact for the line, an approximation with the
  needles' capacities, whose effect is over before the axial factor departs from 1 for any probe with L ≫ r.

Knight, Kluitenberg, Kamai and Hopmans (2012, Vadose Zone J. 11) solved the same two effects semi-analytically
and showed the heater's capacity lowers and delays the peak; Knight, Kluitenberg & Kamai (2016) showed the
needles' mutual interaction, neglected here, is small for usual designs. The two-needle interaction, contact
resistance at either needle and the needles' own internal conduction are not modelled; their size is carried as
model error in ``pulse``.

In τ = αt/r², P the Laplace variable of τ, Z = √P, ρ_a = a/r, ρ_b = b/r, α_h = 2ρc/C_h (α_J of the probe model):

    L{4πk·ΔT/q per unit step}(P) = 2·K0(Z)·Λ(ρ_b Z) / (P·D(P)),
    D = (ρ_a²P/α_h)·[K0(ρ_a Z) + h·ρ_a Z·K1(ρ_a Z)] + ρ_a Z·K1(ρ_a Z),   h = kR/a,
    Λ(ζ) = 1/[1 + (ζ/α_s)·K0(ζ)/K1(ζ)],

which is 2K0(Z)/P, the transform of E1(1/4τ), for thin massless needles. Inversion: Gaver–Stehfest (as the probe
model) of the monotone step response, tabulated on a log-τ grid and splined; pulses are differences of steps.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
from scipy.interpolate import CubicSpline
from scipy.special import erf, exp1, k0e, k1e

from .probe_model import _K, _V, LN2

TAU_MIN = 0.004      # below this the sensor at r has seen less than E1(62) ~ 1e-29 of a step: zero
PER_DECADE = 32


@dataclass(frozen=True)
class PulseGeometry:
    """Where the sensor is and what the needles are (SI). None for a capacity means a massless needle."""

    spacing_m: float
    heater_radius_m: float = 0.0
    heater_C_J_per_m3K: float | None = None
    sensor_radius_m: float = 0.0
    sensor_C_J_per_m3K: float | None = None
    length_m: float | None = None
    axial_m: float | None = None
    heater_contact_m2K_per_W: float = 0.0

    def __post_init__(self) -> None:
        if not (self.spacing_m > 0 and math.isfinite(self.spacing_m)):
            raise ValueError(f"spacing must be a finite distance > 0 m, got {self.spacing_m}")
        if not 0 <= self.heater_radius_m < self.spacing_m or not 0 <= self.sensor_radius_m < self.spacing_m:
            raise ValueError("the needle radii must be >= 0 and smaller than the spacing")
        if self.length_m is not None and not self.length_m > 0:
            raise ValueError(f"heater length must be > 0 m, got {self.length_m}")

    @property
    def ideal(self) -> PulseGeometry:
        """The same spacing with thin massless needles of infinite length: the published pulse solution."""
        return PulseGeometry(self.spacing_m)

    def with_spacing(self, spacing_m: float) -> PulseGeometry:
        return replace(self, spacing_m=spacing_m)

    def alpha_ratios(self, rho_c: float) -> tuple[float | None, float | None]:
        """(α_h, α_s) = 2ρc/C for heater and sensor needle; None where the needle has no radius or capacity."""
        ah = 2.0 * rho_c / self.heater_C_J_per_m3K if self.heater_C_J_per_m3K and self.heater_radius_m else None
        as_ = 2.0 * rho_c / self.sensor_C_J_per_m3K if self.sensor_C_J_per_m3K and self.sensor_radius_m else None
        return ah, as_


def laplace_step(P: np.ndarray, rho_a: float, alpha_h: float | None, rho_b: float,
                 alpha_s: float | None, h: float = 0.0) -> np.ndarray:
    """The transform above for real P > 0 (scaled Bessel functions: finite for any P)."""
    P = np.asarray(P, dtype=float)
    Z = np.sqrt(P)
    out = 2.0 * k0e(Z) / P                                    # × e^(−Z)
    shift = 1.0                                               # the exponent's factor: e^(−shift·Z) overall
    if rho_a > 0:
        za = rho_a * Z
        cap = 0.0 if alpha_h is None else rho_a * rho_a * P / alpha_h
        k1a = k1e(za)
        out = out / (cap * (k0e(za) + h * za * k1a) + za * k1a)   # den × e^(−ρ_a Z)
        shift -= rho_a
    if rho_b > 0:
        # the sensing needle: ζK1(ζ) + (ζ²/α_s)K0(ζ), × e^(−ζ) (a massless conductor still reads 1/(ζK1(ζ)) of
        # the field at its centre: it takes the mean of a field that is not linear across it)
        zb = rho_b * Z
        out = out / (zb * k1e(zb) + (0.0 if alpha_s is None else zb * zb / alpha_s * k0e(zb)))
        shift -= rho_b
    return out * np.exp(-shift * Z)


def step_response_stehfest(tau: np.ndarray, rho_a: float, alpha_h: float | None, rho_b: float,
                           alpha_s: float | None, h: float = 0.0) -> np.ndarray:
    """4πk·ΔT/q at the sensor for a unit step of power at τ = 0 (Gaver–Stehfest, N = 14)."""
    tau = np.asarray(tau, dtype=float)
    P = np.multiply.outer(LN2 / tau, _K)
    return (LN2 / tau) * (laplace_step(P, rho_a, alpha_h, rho_b, alpha_s, h) @ _V)


def axial_factor(tau: np.ndarray, length_over_r: float, axial_over_r: float | None) -> np.ndarray:
    """½[erf((L − z)/2r√τ) + erf(z/2r√τ)]: the share of an instantaneous line pulse a sensor at height z sees."""
    z = 0.5 * length_over_r if axial_over_r is None else axial_over_r
    d = 2.0 * np.sqrt(np.asarray(tau, dtype=float))
    return 0.5 * (erf((length_over_r - z) / d) + erf(z / d))


class StepTable:
    """The sensor's unit-step response G(τ) on a log grid, splined in ln τ; zero before ``TAU_MIN``."""

    def __init__(self, geometry: PulseGeometry, k: float, rho_c: float, tau_max: float, *,
                 axial: bool = True) -> None:
        g = geometry
        r = g.spacing_m
        ah, as_ = g.alpha_ratios(rho_c)
        hi = math.ceil(math.log10(max(tau_max, 10 * TAU_MIN)) * PER_DECADE) + 2
        lo = math.floor(math.log10(TAU_MIN) * PER_DECADE)
        self.ln_tau = np.arange(lo, hi + 1) / PER_DECADE * math.log(10.0)
        tau = np.exp(self.ln_tau)
        thin = g.heater_radius_m == 0 and g.sensor_radius_m == 0
        h = k * g.heater_contact_m2K_per_W / g.heater_radius_m if g.heater_radius_m else 0.0
        G = exp1(0.25 / tau) if thin else step_response_stehfest(tau, g.heater_radius_m / r, ah,
                                                                 g.sensor_radius_m / r, as_, h)
        G = np.maximum.accumulate(np.clip(G, 0.0, None))      # a step response never falls: drop inversion ripple
        if axial and g.length_m is not None:
            a_mid = axial_factor(np.sqrt(tau[1:] * tau[:-1]), g.length_m / r,
                                 None if g.axial_m is None else g.axial_m / r)
            G = np.concatenate(([G[0] * float(axial_factor(tau[:1], g.length_m / r,
                                                           None if g.axial_m is None else g.axial_m / r)[0])],
                                np.diff(G) * a_mid))
            G = np.cumsum(G)
        self.G = G
        self._spline = CubicSpline(self.ln_tau, G)

    def __call__(self, tau: np.ndarray) -> np.ndarray:
        tau = np.asarray(tau, dtype=float)
        out = np.zeros_like(tau)
        on = tau > math.exp(self.ln_tau[0])
        out[on] = self._spline(np.minimum(np.log(tau[on]), self.ln_tau[-1]))
        return out


def sensor_rise(t: np.ndarray, step_t: np.ndarray, step_dq: np.ndarray, k: float, rho_c: float,
                geometry: PulseGeometry, *, axial: bool = True) -> np.ndarray:
    """ΔT(t) at the sensor for power steps Δq_j at t_j (W/m), medium k and ρc: Σ Δq_j·G(α(t − t_j)/r²)/(4πk)."""
    t = np.asarray(t, dtype=float)
    alpha = k / rho_c
    per_s = alpha / geometry.spacing_m**2
    age = t[:, None] - np.asarray(step_t, dtype=float)[None, :]
    age = np.where(age > 0, age, 0.0) * per_s
    table = StepTable(geometry, k, rho_c, max(float(age.max(initial=0.0)), 1.0), axial=axial)
    return table(age) @ np.asarray(step_dq, dtype=float) / (4.0 * math.pi * k)


def ideal_pulse(t: np.ndarray, q: float, t0: float, k: float, rho_c: float, r: float) -> np.ndarray:
    """The published finite-pulse solution for a thin line (Kluitenberg, Ham & Bristow 1993), for checks."""
    t = np.asarray(t, dtype=float)
    alpha = k / rho_c
    out = np.zeros_like(t)
    on = t > 0
    out[on] = exp1(r * r / (4 * alpha * t[on]))
    off = t > t0
    out[off] -= exp1(r * r / (4 * alpha * (t[off] - t0)))
    return q / (4 * math.pi * k) * out
