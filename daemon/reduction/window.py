"""Where the late-time straight line holds: the start and end of the fitting window from published criteria.

Start (probe heat capacity, contact resistance, finite radius): the local slope of the cylinder-probe
solution differs from q/(4πk) by ε(τ) ≈ [(2 − α_J)·ln(4τ/C) + 4h − 2]/(2α_J·τ), τ = αt/a², from the long-time
expansion of the Blackwell (1954) / Jaeger (1956) solution (Carslaw & Jaeger 1959 §13.7). Without a probe heat
capacity the ideal line at radius r is used: local slope = exp(−r²/4αt), i.e. 1 % at t = 24.9·r²/α (Carslaw &
Jaeger §10.4). End (finite heater length L, sensor at axial position z): the local slope is
½[erf(z/2√(αt)) + erf((L−z)/2√(αt))] of the ideal; at mid-length 1 % is reached at t = L²/(53.1·α).
End (a sample of radius R around the probe, its outer face held at the bath temperature or insulated): the
local slope from the Fourier–Bessel expansion of a line source on the axis of a cylinder (Carslaw & Jaeger 1959,
the cylinder problems of ch. 7 and 13; the series is written out in ``wall_slope_ratio``); 1 % is reached at
t ≈ 0.144·R²/α (insulated face; 0.147·R²/α held at the bath), for a sensor near the axis.

The recovery has no window of its own in those terms: each power step keeps its own age, so the recovery at t
mixes the step response at t and at t − t_h. ``StepModel`` gives the departure of one step's response from the
late-time line (probe, contact, axial loss) and ``recovery_errors`` superposes it over the measured power steps.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy.optimize import brentq
from scipy.special import erf, erfinv, exp1, j0, j1, jn_zeros

from .probe_model import response_stehfest

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


_WALL_TERMS = 600   # exp(−λ²τ) of the 600th zero is below 1e-300 from τ = 0.005 on: the series is exact there


@lru_cache(maxsize=1)
def _bessel_zeros() -> tuple[np.ndarray, np.ndarray]:
    return jn_zeros(0, _WALL_TERMS), jn_zeros(1, _WALL_TERMS)


def wall_slope_ratio(tau: np.ndarray | float, rho: float = 0.0, insulated: bool = False) -> np.ndarray:
    """Local log-slope in a cylinder of radius R over the infinite medium's, τ = αt/R² (≥ 0.005), sensor at
    ρ = r/R.

    Held at the bath temperature at R (zeros λ of J0): s = 4τ Σ J0(λρ)·e^{−λ²τ}/J1(λ)²; insulated (zeros μ of
    J1, plus the uniform heating of the whole sample): s = 4τ[1 + Σ J0(μρ)·e^{−μ²τ}/J0(μ)²]; the infinite
    medium's is e^{−ρ²/4τ}. Both series follow from the steady and transient parts of the cylinder with a line
    source on its axis (∫₀¹ x·ln(1/x)·J0(λx) dx = 1/λ² at the zeros of J0)."""
    lam, mu = _bessel_zeros()
    tau = np.maximum(np.asarray(tau, dtype=float), 0.005)
    z = mu if insulated else lam
    terms = np.exp(-np.multiply.outer(tau, z * z)) @ (j0(z * rho) / (j0(z) if insulated else j1(z)) ** 2)
    s = 4.0 * tau * ((1.0 + terms) if insulated else terms)
    return s / np.exp(-rho * rho / (4.0 * tau))


@lru_cache(maxsize=256)
def wall_tau(tol: float = 0.01, rho: float = 0.0) -> float:
    """The τ = αt/R² at which a sample's outer face first moves the local slope by ``tol`` (the earlier of a face
    held at the bath temperature and an insulated one: a container is something between the two)."""
    lo = max(0.005, rho * rho / 4.0)  # before this the face is many diffusion lengths away
    held = brentq(lambda x: 1.0 - float(wall_slope_ratio(x, rho)) - tol, lo, 5.0)
    insulated = brentq(lambda x: float(wall_slope_ratio(x, rho, insulated=True)) - 1.0 - tol, lo, 5.0)
    return min(held, insulated)


def wall_end_s(sample_radius_m: float | None, alpha_m2_per_s: float, tol: float = 0.01,
               sensor_radius_m: float = 0.0) -> float:
    """Latest t at which the sample's outer face keeps the local slope within ``tol`` (∞ without a sample)."""
    if not sample_radius_m or not (alpha_m2_per_s > 0 and math.isfinite(alpha_m2_per_s)):
        return math.inf
    rho = round(min(max(sensor_radius_m / sample_radius_m, 0.0), 0.9), 3)
    return wall_tau(tol, rho) * sample_radius_m**2 / alpha_m2_per_s


def wall_alpha(k_W_per_mK: float | None, rho_c_floor: float) -> float | None:
    """The diffusivity a sample's face is judged with: k over the lowest volumetric heat capacity the medium may
    have, an upper bound on α. Not the estimate: a needle's α from its intercept carries e^{2h} (too high, up to
    the clip) and from its transient can be far too low under model mismatch (issue 11), while k is known well."""
    if not k_W_per_mK or not (k_W_per_mK > 0 and math.isfinite(k_W_per_mK)):
        return None
    return k_W_per_mK / rho_c_floor


def alpha_from_intercept(r_m: float, ln_t0: float) -> float:
    """Single-probe diffusivity from the time-axis intercept t0 of the fitted line: α = r²·e^γ/(4·t0)."""
    return r_m**2 * EXP_GAMMA / 4.0 * math.exp(min(max(-ln_t0, -700.0), 700.0))


_PER_DECADE = 64


@dataclass(frozen=True)
class StepModel:
    """What the window rules know of probe and medium: enough to say how far a step's response is from the line.

    ``alpha_J`` = 2ρc/(ρc)_probe with the probe's heat capacity (Blackwell cylinder of radius ``radius_m`` with
    contact parameter h); None is an ideal line source read at ``radius_m``. ``length_m``/``axial_m``: heater
    length and the sensor's distance from its tip (None: infinitely long, or at mid-length). ``sample_radius_m``:
    a finite sample whose outer face is held at the bath temperature, seen with diffusivity ``wall_alpha_m2_per_s``
    (a conservative one: ``wall_alpha``).
    """

    alpha_m2_per_s: float
    radius_m: float
    alpha_J: float | None = None
    h: float = 0.0
    length_m: float | None = None
    axial_m: float | None = None
    sample_radius_m: float | None = None
    wall_alpha_m2_per_s: float | None = None

    def deviation(self, ages: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(G, g) at each age t > 0: G = 4πk·ΔT/q of a unit step minus its late-time line ln t + c, g = dG/d ln t.

        c is the infinite-line constant, so the probe part of G vanishes late and the axial part is −∫δ d ln t
        with δ = 1 − (axial slope factor); g is the local slope error of the step (the heating rule's ε, and −δ).
        """
        ages = np.asarray(ages, dtype=float)
        if ages.size == 0:
            return np.zeros(0), np.zeros(0)
        a, al = self.radius_m, self.alpha_m2_per_s
        lo, hi = float(np.min(ages)), float(np.max(ages))
        if self.length_m:
            z = self.length_m / 2 if self.axial_m is None else self.axial_m
            z_near = max(min(z, self.length_m - z), 1e-6)
            lo = min(lo, z_near**2 / (100.0 * al))  # erfc(5) ≈ 1.5e-12: axial loss has not started
        pad = 2.0 / _PER_DECADE  # two nodes beyond the ages, so the slope there is a central difference
        n = max(math.ceil(math.log10(hi / lo) * _PER_DECADE) + 5, 5)
        grid = np.logspace(math.log10(lo) - pad, math.log10(hi) + pad, n)
        lng = np.log(grid)
        if self.alpha_J is not None:
            tau = al * grid / a**2
            f = response_stehfest(tau, self.alpha_J, self.h) - (np.log(4.0 * tau / EXP_GAMMA) + 2.0 * self.h)
        else:
            x = a**2 / (4.0 * al * grid)
            f = exp1(x) + np.log(x) + EULER_GAMMA
        g = np.gradient(f, lng)
        if self.length_m:
            d = 1.0 - axial_slope_factor(grid, self.length_m, al, self.axial_m)
            cum = np.concatenate(([0.0], np.cumsum(0.5 * (d[1:] + d[:-1]) * np.diff(lng))))
            f, g = f - cum, g - d
        if self.sample_radius_m:
            aw = self.wall_alpha_m2_per_s or al
            tau_w = aw * grid / self.sample_radius_m**2
            rho = min(self.radius_m / self.sample_radius_m, 0.9)
            d = np.where(tau_w > 0.005, 1.0 - wall_slope_ratio(tau_w, rho), 0.0)
            cum = np.concatenate(([0.0], np.cumsum(0.5 * (d[1:] + d[:-1]) * np.diff(lng))))
            f, g = f - cum, g - d
        la = np.log(ages)
        return np.interp(la, lng, f), np.interp(la, lng, g)


def recovery_errors(t: np.ndarray, steps_t: np.ndarray, steps_dq: np.ndarray, model: StepModel
                    ) -> tuple[np.ndarray, np.ndarray]:
    """Predicted relative errors of the recovery's line at times ``t`` (all after the last step): (level, slope).

    With X = Σ Δq_j·ln(t − t_j) the line says 4πk·ΔT = X after the heater is off. The model says
    4πk·ΔT = X + Σ Δq_j·G(t − t_j). Level error: Σ Δq_j·G/X, what a fit through the origin sees. Slope error:
    d(Σ Δq_j·G)/dX = Σ Δq_j·g/(t − t_j) / Σ Δq_j/(t − t_j), what a fit with a free offset sees. For one step of
    q at 0 and its end at t_h the slope error is [(t − t_h)·g(t) − t·g(t − t_h)]/t_h: the early part of the
    step that ended (probe, contact) weighs t/t_h, the axial loss of both steps enters.
    """
    t = np.asarray(t, dtype=float)
    ages = t[:, None] - np.asarray(steps_t, dtype=float)[None, :]
    if ages.size == 0 or np.any(ages <= 0):
        raise ValueError("recovery times must follow every power step")
    G, g = model.deviation(ages.ravel())
    G, g = G.reshape(ages.shape), g.reshape(ages.shape)
    dq = np.asarray(steps_dq, dtype=float)
    X = np.log(ages) @ dq
    dX = (1.0 / ages) @ dq
    with np.errstate(divide="ignore", invalid="ignore"):
        level = np.where(X > 0, (G @ dq) / X, np.inf)
        slope = np.where(dX != 0, ((g / ages) @ dq) / dX, np.inf)
    return level, slope
