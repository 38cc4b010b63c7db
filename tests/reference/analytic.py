"""Analytic solutions the reference solver is checked against (each cites its source).

All take SI and return the temperature rise in K for a heater of q W/m switched on at t = 0.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
from scipy import integrate, special

__all__ = ["finite_line", "jaeger_probe", "line_source", "pulse_line_source"]


def line_source(q: float, k: float, alpha: float, r: float, t: np.ndarray | float) -> np.ndarray:
    """Infinite line source, constant power: ΔT = q/(4πk)·E1(r²/4αt) (Carslaw & Jaeger 1959, §10.4)."""
    t = np.asarray(t, dtype=float)
    return q / (4.0 * math.pi * k) * special.exp1(r * r / (4.0 * alpha * t))


def pulse_line_source(q: float, k: float, alpha: float, r: float, t0: float, t: np.ndarray | float) -> np.ndarray:
    """Line source heated for t0 seconds: E1 difference after the pulse (Kluitenberg, Ham & Bristow 1993)."""
    t = np.asarray(t, dtype=float)
    on = line_source(q, k, alpha, r, t)
    late = t > t0
    off = np.zeros_like(t)
    off[late] = line_source(q, k, alpha, r, t[late] - t0)
    return on - off


def jaeger_probe(q: float, k: float, alpha: float, a: float, S: float, H: float | None,
                 t: np.ndarray | float) -> np.ndarray:
    """Perfectly conducting cylinder of radius a and heat capacity S (J/(m·K)) behind a contact conductance H.

    Real-integral form (Jaeger 1956; Carslaw & Jaeger 1959 §13.7; Blackwell 1954):
        ΔT = (2qα_J²/(π³k)) ∫_0^∞ (1 − e^{−τu²}) / (u³ Δ(u)) du,
        Δ(u) = [u·Y0(u) − (α_J − h·u²)·Y1(u)]² + [u·J0(u) − (α_J − h·u²)·J1(u)]²,
    with τ = αt/a², α_J = 2πa²ρc/S, h = k/(aH) (H = None: perfect contact). Evaluated with scipy quad on a log
    grid of u, independently of any Laplace inversion.
    """
    rho_c = k / alpha
    aj = 2.0 * math.pi * a * a * rho_c / S
    h = 0.0 if H is None else k / (a * H)
    taus = np.atleast_1d(np.asarray(t, dtype=float)) * alpha / (a * a)

    def delta(u: float) -> float:
        b = aj - h * u * u
        return (u * special.y0(u) - b * special.y1(u)) ** 2 + (u * special.j0(u) - b * special.j1(u)) ** 2

    out = np.empty_like(taus)
    for n, tau in enumerate(taus):
        def f(s: float, tau: float = tau) -> float:
            # u = e^s, du/u = ds: integrand (1 − e^{−τu²})/(u² Δ(u))
            u = math.exp(s)
            return -math.expm1(-tau * u * u) / (u * u * delta(u))
        # the integrand lives where u ~ τ^{-1/2} .. a few; split the log range at its natural scales
        # the tail falls as u^-3 (h = 0) or u^-5 (h > 0): stop where it is below 1e-12 of the whole
        s_lo, s_hi = math.log(1e-8 / math.sqrt(tau)), math.log(1e4 if h < 0.1 else 500.0)
        mid = sorted({-0.5 * math.log(tau), 0.0, math.log(2.0), math.log(10.0), math.log(100.0)})
        pts = [s_lo, *[m for m in mid if s_lo < m < s_hi], s_hi]
        total = 0.0
        for lo, hi in itertools.pairwise(pts):
            val, _ = integrate.quad(f, lo, hi, limit=400, epsabs=0.0, epsrel=1e-11)
            total += val
        out[n] = total
    res = 2.0 * q * aj * aj / (math.pi**3 * k) * out
    return res if np.ndim(t) else res[0]


def finite_line(q: float, k: float, alpha: float, r: float, z: float, length: float,
                t: np.ndarray | float) -> np.ndarray:
    """Line source of finite length from z = 0 to L in an infinite medium, read at radius r and height z.

    Integral of continuous point sources (Carslaw & Jaeger 1959 §10.3, 10.4; Blackwell 1956):
        ΔT = q/(4πk) ∫_0^t e^{−r²/4αs}·½[erf(z/2√(αs)) + erf((L − z)/2√(αs))] ds/s.
    """
    ts = np.atleast_1d(np.asarray(t, dtype=float))
    out = np.empty_like(ts)

    def f(x: float) -> float:  # x = ln s
        s = math.exp(x)
        w = 2.0 * math.sqrt(alpha * s)
        return math.exp(-r * r / (4.0 * alpha * s)) * 0.5 * (math.erf(z / w) + math.erf((length - z) / w))

    x_lo = math.log(r * r / (4.0 * alpha) / 200.0)
    for n, tt in enumerate(ts):
        x_hi = math.log(tt)
        pts = np.linspace(x_lo, x_hi, 9) if x_hi > x_lo else [x_lo, x_lo]
        total = 0.0
        for lo, hi in itertools.pairwise(pts):
            total += integrate.quad(f, lo, hi, limit=200, epsabs=0.0, epsrel=1e-11)[0]
        out[n] = total
    res = q / (4.0 * math.pi * k) * out
    return res if np.ndim(t) else res[0]
