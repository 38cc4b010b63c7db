"""Where the late-time straight line holds: the start and end of the fitting window from published criteria.

Start (probe heat capacity, contact resistance, finite radius): the local slope of the cylinder-probe
solution differs from q/(4πk) by ε(τ) ≈ [(2 − α_J)·ln(4τ/C) + 4h − 2]/(2α_J·τ), τ = αt/a², from the long-time
expansion of the Blackwell (1954) / Jaeger (1956) solution (Carslaw & Jaeger 1959 §13.7). Without a probe heat
capacity the ideal line at radius r is used: local slope = exp(−r²/4αt), i.e. 1 % at t = 24.9·r²/α (Carslaw &
Jaeger §10.4). End (finite heater length L, sensor at axial position z): the local slope is
½[erf(z/2√(αt)) + erf((L−z)/2√(αt))] of the ideal; at mid-length 1 % is reached at t = L²/(53.1·α).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import erf, erfinv

EULER_GAMMA = 0.57721566490153286
EXP_GAMMA = math.exp(EULER_GAMMA)

_TAU_GRID = np.logspace(-1, 8, 600)


def probe_slope_error(tau: np.ndarray | float, alpha_J: float, h: float) -> np.ndarray:
    """Relative error of the local log-slope of the probe temperature at dimensionless time τ (long time)."""
    tau = np.asarray(tau, dtype=float)
    return ((2.0 - alpha_J) * np.log(4.0 * tau / EXP_GAMMA) + 4.0 * h - 2.0) / (2.0 * alpha_J * tau)


def line_start_s(r_m: float, alpha_m2_per_s: float, tol: float = 0.01) -> float:
    """Earliest t at which the ideal line-source local slope at r is within ``tol`` of q/(4πk)."""
    return r_m**2 / (-4.0 * alpha_m2_per_s * math.log1p(-tol))


def probe_start_s(radius_m: float, alpha_m2_per_s: float, alpha_J: float, h: float = 0.0,
                  tol: float = 0.01) -> float:
    """Earliest t after which the probe-model slope error stays within ``tol`` (searched on a τ grid)."""
    err = np.abs(probe_slope_error(_TAU_GRID, alpha_J, h))
    bad = np.nonzero(err > tol)[0]
    tau = _TAU_GRID[bad[-1] + 1] if bad.size and bad[-1] + 1 < _TAU_GRID.size else _TAU_GRID[0]
    if bad.size and bad[-1] + 1 >= _TAU_GRID.size:
        tau = _TAU_GRID[-1]
    return float(tau) * radius_m**2 / alpha_m2_per_s


def start_s(r_m: float, alpha_m2_per_s: float, alpha_J: float | None, h: float = 0.0,
            tol: float = 0.01) -> float:
    """Window start: the probe criterion when the probe heat capacity is known, else the ideal-line one."""
    if not (alpha_m2_per_s > 0 and math.isfinite(alpha_m2_per_s)):
        return 0.0
    if alpha_J is None or not math.isfinite(alpha_J) or alpha_J <= 0:
        return line_start_s(r_m, alpha_m2_per_s, tol)
    return max(probe_start_s(r_m, alpha_m2_per_s, alpha_J, h, tol), line_start_s(r_m, alpha_m2_per_s, tol))


def axial_slope_factor(t: np.ndarray | float, length_m: float, alpha_m2_per_s: float,
                       axial_m: float | None = None) -> np.ndarray:
    """Local slope of a finite heater relative to an infinite one; sensor at ``axial_m`` from the tip."""
    z = length_m / 2 if axial_m is None else axial_m
    d = 2.0 * np.sqrt(alpha_m2_per_s * np.asarray(t, dtype=float))
    return 0.5 * (erf(z / d) + erf((length_m - z) / d))


def axial_end_s(length_m: float, alpha_m2_per_s: float, tol: float = 0.01,
                axial_m: float | None = None) -> float:
    """Latest t at which axial loss keeps the local slope within ``tol`` (L²/(53.1·α) at mid-length, 1 %)."""
    if not (alpha_m2_per_s > 0 and math.isfinite(alpha_m2_per_s)):
        return math.inf
    if axial_m is None or abs(axial_m - length_m / 2) < 1e-12:
        x = float(erfinv(1.0 - tol))
        return length_m**2 / (16.0 * x * x * alpha_m2_per_s)
    ts = np.logspace(-3, 1, 400) * length_m**2 / alpha_m2_per_s
    ok = axial_slope_factor(ts, length_m, alpha_m2_per_s, axial_m) >= 1.0 - tol
    bad = np.nonzero(~ok)[0]
    return float(ts[bad[0] - 1]) if bad.size and bad[0] > 0 else (float(ts[0]) if bad.size else math.inf)


def alpha_from_intercept(r_m: float, ln_t0: float) -> float:
    """Single-probe diffusivity from the time-axis intercept t0 of the fitted line: α = r²·e^γ/(4·t0)."""
    return r_m**2 * EXP_GAMMA / 4.0 * math.exp(min(max(-ln_t0, -700.0), 700.0))
