"""Cylindrical probe with heat capacity and contact resistance in an infinite medium, and fits of it to data.

Model (Blackwell 1954, J. Appl. Phys. 25:137; Jaeger 1956, Aust. J. Phys. 9:167; Carslaw & Jaeger 1959 §13.7):
a perfectly conducting cylinder of radius a and heat capacity S per metre, joined to the medium (k, α, ρc) by a
contact conductance H, heated at q per metre from t = 0. With τ = αt/a², α_J = 2πa²ρc/S and h = k/(aH), the
Laplace transform (in τ, variable p, z = √p) of 4πk·ΔT/q at radius r = ρ·a is

    F(p) = (2/p) · N(z) / { (p/α_J)·[K0(z) + h·z·K1(z)] + z·K1(z) },
    N = K0(z) + h·z·K1(z) for the probe itself (ρ = 1), N = K0(ρz) in the medium at ρ > 1.

(The medium solution follows from the same boundary conditions: θ̄ = B·K0(βr).) Exponentially scaled Bessel
functions (``k0e``, ``k1e``, ``kve``) keep every term finite for large p. The inversion is vectorised: Gaver–
Stehfest (real p, fast; used for fitting) or the fixed Talbot contour of Abate & Valkó (2004) (complex p; more
digits, used as a check). Measured power enters by Duhamel superposition of its steps.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction

import numpy as np
from scipy.interpolate import CubicSpline
from scipy.optimize import least_squares
from scipy.special import i0e, i1e, ive, k0e, k1e, kve

from .stats import ar1_inflation, lag1_autocorrelation

LN2 = math.log(2.0)


def _stehfest_weights(n: int) -> np.ndarray:
    """Gaver–Stehfest weights V_k (Stehfest 1970, Comm. ACM 13:47), computed exactly then rounded."""
    half = n // 2
    v = []
    for k in range(1, n + 1):
        s = Fraction(0)
        for j in range((k + 1) // 2, min(k, half) + 1):
            s += Fraction(j**half * math.factorial(2 * j),
                          math.factorial(half - j) * math.factorial(j) * math.factorial(j - 1)
                          * math.factorial(k - j) * math.factorial(2 * j - k))
        v.append((-1) ** (k + half) * s)
    return np.array([float(x) for x in v])


_STEHFEST_N = 14
_V = _stehfest_weights(_STEHFEST_N)
_K = np.arange(1, _STEHFEST_N + 1, dtype=float)


def _ie(v: int, z: np.ndarray) -> np.ndarray:
    """I_v(z)·e^(−z) for complex z (scipy's ``ive`` scales by e^(−|Re z|) instead)."""
    return ive(v, z) * np.exp(np.abs(z.real) - z)


def laplace_response(p: np.ndarray, alpha_J: float | None, h: float, rho: float = 1.0,
                     outer_rho: float | None = None) -> np.ndarray:
    """F(p): Laplace transform (in τ) of 4πk·ΔT/q; real or complex p. ``alpha_J`` None means a massless probe.

    ``outer_rho`` puts a boundary held at the initial temperature at radius outer_rho·a (a finite sample in a
    bath); the medium solution becomes K0(βr) − c·I0(βr) with c = K0(βR)/I0(βR).
    """
    p = np.asarray(p)
    z = np.sqrt(p)
    cplx = np.iscomplexobj(z)
    k0 = kve(0, z) if cplx else k0e(z)
    k1 = kve(1, z) if cplx else k1e(z)
    if outer_rho is not None:
        zR = outer_rho * z
        c = (kve(0, zR) / _ie(0, zR) if cplx else k0e(zR) / i0e(zR)) * np.exp(2.0 * z * (1.0 - outer_rho))
        k0 = k0 - c * (_ie(0, z) if cplx else i0e(z))
        k1 = k1 + c * (_ie(1, z) if cplx else i1e(z))
    probe_term = k0 + h * z * k1
    if rho == 1.0:
        num = probe_term
    else:
        num = kve(0, rho * z) * np.exp(-(rho - 1.0) * z)
        if outer_rho is not None:
            num = num - c * (_ie(0, rho * z) if cplx else i0e(rho * z)) * np.exp((rho - 1.0) * z)
    cap = 0.0 if alpha_J is None or not math.isfinite(alpha_J) else p / alpha_J
    return (2.0 / p) * num / (cap * probe_term + z * k1)


def response_stehfest(tau: np.ndarray, alpha_J: float | None, h: float, rho: float = 1.0,
                      outer_rho: float | None = None) -> np.ndarray:
    """4πk·ΔT/q at dimensionless times τ by Gaver–Stehfest inversion (N = 14)."""
    tau = np.asarray(tau, dtype=float)
    p = np.multiply.outer(LN2 / tau, _K)
    return (LN2 / tau) * (laplace_response(p, alpha_J, h, rho, outer_rho) @ _V)


def response_talbot(tau: np.ndarray, alpha_J: float | None, h: float, rho: float = 1.0,
                    m: int = 32, outer_rho: float | None = None) -> np.ndarray:
    """4πk·ΔT/q by the fixed Talbot contour (Abate & Valkó 2004, Int. J. Numer. Meth. Eng. 60:979)."""
    tau = np.atleast_1d(np.asarray(tau, dtype=float))
    theta = np.arange(1, m) * math.pi / m
    cot = 1.0 / np.tan(theta)
    r = 2.0 * m / (5.0 * tau)
    s = np.multiply.outer(r, theta * (cot + 1j))                   # (n, m-1)
    sigma = theta + (theta * cot - 1.0) * cot
    f0 = 0.5 * np.exp(r * tau) * laplace_response(r, alpha_J, h, rho, outer_rho).real
    terms = np.exp(s * tau[:, None]) * laplace_response(s, alpha_J, h, rho, outer_rho) * (1.0 + 1j * sigma)
    return (r / m) * (f0 + terms.real.sum(axis=1))


def long_time_response(tau: np.ndarray, alpha_J: float, h: float) -> np.ndarray:
    """Two-term long-time expansion of 4πk·ΔT/q for the probe (ρ = 1); C = e^γ."""
    tau = np.asarray(tau, dtype=float)
    lg = np.log(4.0 * tau / math.exp(0.57721566490153286))
    return 2 * h + lg + ((alpha_J - 2.0) * lg + alpha_J - 4.0 * h) / (2.0 * alpha_J * tau)


class ResponseTable:
    """f(τ) tabulated on a log grid and splined in ln τ, so a convolution costs one spline evaluation per pair."""

    def __init__(self, tau_min: float, tau_max: float, alpha_J: float | None, h: float, rho: float = 1.0,
                 per_decade: int = 16) -> None:
        # Nodes sit at fixed multiples of the spacing, so the interpolant (and the fit objective) varies
        # smoothly with α instead of jittering as the grid slides.
        step = 1.0 / per_decade
        lo = math.floor(math.log10(max(tau_min, 1e-8)) / step) - 2
        hi = math.ceil(math.log10(max(tau_max, tau_min * 10)) / step) + 2
        self.ln_tau = np.arange(lo, hi + 1) * step * math.log(10.0)
        self.f = response_stehfest(np.exp(self.ln_tau), alpha_J, h, rho)
        self._spline = CubicSpline(self.ln_tau, self.f)

    def __call__(self, tau: np.ndarray) -> np.ndarray:
        tau = np.asarray(tau, dtype=float)
        out = np.zeros_like(tau)
        pos = tau > 0
        lt = np.log(tau[pos])
        out[pos] = self._spline(np.clip(lt, self.ln_tau[0], None))
        # below the grid the response grows ~linearly with τ (heat goes into the probe first)
        low = pos & (np.log(np.where(pos, tau, 1.0)) < self.ln_tau[0])
        out[low] = self.f[0] * tau[low] / math.exp(self.ln_tau[0])
        return out


def superpose(t: np.ndarray, step_t: np.ndarray, step_dq: np.ndarray, unit: ResponseTable,
              tau_per_s: float) -> np.ndarray:
    """Σ_j Δq_j·f(τ(t − t_j)): the response (in units of 4πk·ΔT) to the measured power steps."""
    age = t[:, None] - step_t[None, :]
    return unit(np.where(age > 0, age, 0.0) * tau_per_s) @ step_dq


@dataclass(frozen=True)
class ModelFit:
    """Least-squares fit of the probe model (SI). ``h`` = k/(aH); contact resistance R = 1/H in m²·K/W."""

    k_W_per_mK: float
    k_u_W_per_mK: float
    alpha_m2_per_s: float
    alpha_u_m2_per_s: float
    h: float
    h_u: float
    contact_m2K_per_W: float
    contact_u_m2K_per_W: float
    rho_c_J_per_m3K: float
    rho_c_u_J_per_m3K: float
    resid_rms_K: float
    rho1: float
    n: int
    window_s: tuple[float, float]
    success: bool
    message: str
    fitted_contact: bool
    shift_s: float = 0.0     # time shift of the power steps fitted with them (``shift_bounds_s``), else 0
    shift_u_s: float = 0.0
    drift_coef_rel: float = 0.0  # d ln k per K/s of drift removed from the data in addition (Gauss–Newton)


def fit_probe_model(t: np.ndarray, dT: np.ndarray, step_t: np.ndarray, step_dq: np.ndarray, radius_m: float,
                    probe_C_J_per_m3K: float | None, *, r_sensor_m: float | None = None,
                    k0: float, alpha0: float, fit_contact: bool = True, h_fixed: float = 0.0,
                    max_points: int = 500, shift_bounds_s: tuple[float, float] | None = None) -> ModelFit:
    """Fit k, α (and the contact parameter h) to ΔT(t) of the heating (and recovery) record.

    ``r_sensor_m`` > radius places the sensor in the medium (second needle); then h is normally fixed.
    ``shift_bounds_s`` (lo, hi) also fits a shift of every power step within those bounds (a switch-on that the
    power column places late; ``timezero``).
    """
    t = np.asarray(t, dtype=float)
    dT = np.asarray(dT, dtype=float)
    if t.size > max_points:
        idx = np.unique(np.linspace(0, t.size - 1, max_points).round().astype(int))
        t, dT = t[idx], dT[idx]
    a = radius_m
    rho = 1.0 if r_sensor_m is None or r_sensor_m <= a else r_sensor_m / a
    s_lo, s_hi = shift_bounds_s if shift_bounds_s is not None else (0.0, 0.0)
    ages = (t[:, None] - step_t[None, :])
    ages_late = ages - s_hi
    age_min = float(ages_late[ages_late > 0].min()) if np.any(ages_late > 0) else float(ages[ages > 0].min())
    age_max = float((ages - s_lo)[ages - s_lo > 0].max())
    n_base = 3 if fit_contact else 2

    def unpack(x: np.ndarray) -> tuple[float, float, float, float]:
        return (math.exp(x[0]), math.exp(x[1]), (float(x[2]) if fit_contact else h_fixed),
                float(x[n_base]) if shift_bounds_s is not None else 0.0)

    def model(x: np.ndarray) -> np.ndarray:
        k, alpha, h, shift = unpack(x)
        aj = None if not probe_C_J_per_m3K else 2.0 * (k / alpha) / probe_C_J_per_m3K
        tau_per_s = alpha / a**2
        table = ResponseTable(age_min * tau_per_s, age_max * tau_per_s, aj, h, rho)
        return superpose(t, step_t + shift, step_dq, table, tau_per_s) / (4.0 * math.pi * k)

    x0 = [math.log(k0), math.log(alpha0)] + ([min(max(h_fixed, 0.05), 10.0)] if fit_contact else [])
    lo = [math.log(k0) - 4, math.log(alpha0) - 6] + ([0.0] if fit_contact else [])
    hi = [math.log(k0) + 4, math.log(alpha0) + 6] + ([50.0] if fit_contact else [])
    if shift_bounds_s is not None:
        x0.append(0.5 * (s_lo + s_hi))
        lo.append(s_lo)
        hi.append(s_hi)
    res = least_squares(lambda x: model(x) - dT, np.array(x0), bounds=(lo, hi), x_scale="jac",
                        method="trf", xtol=1e-10, ftol=1e-10, max_nfev=200, diff_step=1e-5)
    k, alpha, h, shift = unpack(res.x)
    resid = res.fun
    n, npar = resid.size, res.x.size
    s2 = float(resid @ resid) / max(n - npar, 1)
    rho1 = lag1_autocorrelation(resid)
    J = res.jac
    try:
        cov = np.linalg.pinv(J.T @ J) * s2 * ar1_inflation(rho1)
    except np.linalg.LinAlgError:
        cov = np.full((npar, npar), np.nan)
    u_lnk, u_lna = math.sqrt(max(cov[0, 0], 0)), math.sqrt(max(cov[1, 1], 0))
    try:  # removing δb·t more from the data moves x by −δb·J⁺t
        drift_coef = -float((np.linalg.pinv(J) @ t)[0])
    except np.linalg.LinAlgError:
        drift_coef = 0.0
    u_h = math.sqrt(max(cov[2, 2], 0)) if fit_contact else 0.0
    u_shift = math.sqrt(max(cov[n_base, n_base], 0)) if shift_bounds_s is not None else 0.0
    var_lnrc = cov[0, 0] + cov[1, 1] - 2 * cov[0, 1]
    H = k / (a * h) if h > 0 else math.inf
    contact = a * h / k  # 1/H
    u_contact = contact * math.sqrt(max((u_h / h) ** 2 + cov[0, 0], 0.0)) if h > 0 and fit_contact else 0.0
    del H
    return ModelFit(k, k * u_lnk, alpha, alpha * u_lna, h, u_h, contact, u_contact, k / alpha,
                    k / alpha * math.sqrt(max(var_lnrc, 0.0)), math.sqrt(float(resid @ resid) / n), rho1, n,
                    (float(t[0]), float(t[-1])), bool(res.success), str(res.message), fit_contact, shift, u_shift,
                    drift_coef)
