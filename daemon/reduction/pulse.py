"""k, α and ρc from a sensor needle's record of a heat pulse: the whole record fitted, the peak as a cross-check.

The fit: ln α and ln ρc (the peak's time and height, nearly independent) by least squares of the forward model
(``pulse_model``: measured power steps, heater and sensor needles with radius and heat capacity, finite length)
to ΔT over the rise, the peak and the decay. Uncertainty: the fit's own (AR(1)-inflated) covariance, and every
input the model takes as known — spacing, power, baseline level and slope, the needles' heat capacity, the axial
correction — propagated as a linearised refit, δx = (JᵀJ)⁻¹Jᵀ·δm, with δm the change of the model when that input
moves by its standard uncertainty. Each term is kept per quantity in ``budget``; k = α·ρc keeps the correlation.

The cross-check: the peak's time and height from a local cubic (with their uncertainty from its covariance) put
through the finite-pulse relations of Kluitenberg, Ham & Bristow (1993) give α, ρc and k without any fit. Those
relations assume thin massless needles; the same peak estimator applied to the fitted model's own curve says what
they should read if the fit is right, so the check compares like with like and flags ``pulse_peak_disagree`` when
the difference exceeds twice its standard uncertainty (the inputs both methods share — spacing, power — cancel).

Spacing calibration (``rho_c_fixed``): in a medium of known ρc the spacing is fitted instead of ρc.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
from scipy.optimize import least_squares

from .pulse_model import PulseGeometry, sensor_rise
from .radial import pulse_inverse
from .stats import ar1_inflation, lag1_autocorrelation

# Standard uncertainties of what the model takes as known, where the probe profile does not say:
NEEDLE_C_U_REL = 0.15      # a needle's volumetric heat capacity (steel tube, epoxy, wires: judgement, no source)
AXIAL_U_FRACTION = 0.3     # of the finite-length correction: exact for a line in a whole space, but where the needles
                           # enter the ground the surface returns heat the model lets escape (judgement, no source)
CONTACT_U_M2K_PER_W = 1.0 / 3000.0  # a heater's contact resistance when not known: a snug needle in moist granular
                           # soil (the simulator's default, common practice, no source), taken as one standard u
AXIAL_MIN = 0.95           # the fit ends where the finite length has taken 5 % of a line pulse's signal (no source)
MIN_END_PEAK_TIMES = 2.0   # ... but never before two peak times
# Model-form error of lumped needles in perfect contact against needles resolved as sheath and filler, from the
# project's comparison with its independent reference solver (tests/reference, bench/pulse_bench.py): ρc's
# largest difference there is 0.55 %, α's 3.2 % on the air-gap record (≤ 1.6 % on the others).
MODEL_U_REL = {"alpha": 0.010, "rho_c": 0.005}
# With a spacing calibrated in a medium of known ρc, that medium's ρc error went into the effective spacing: what is
# left is how the error changes from one medium to another. On the reference set the calibrated ρc differs from the
# truth by −0.04 to +0.43 % (rms 0.27 %, gel calibration, profile exact): 0.3 % standard. α keeps its term (the
# air-gap record's α error does not cancel).
MODEL_U_REL_CALIBRATED = {"alpha": 0.010, "rho_c": 0.003}
PEAK_FRACTION = 0.85       # the peak's cubic in ln t is fitted to the samples above 85 % of the maximum: on the
                           # published pulse solution at 1 Hz it finds t_m within 0.2 %, ΔT_m within 0.05 % (tests)
MIN_PEAK_POINTS = 7
DISAGREE_Z = 2.0
# Residuals above 1.5 × the baseline's noise and correlated sample to sample (lag-1 > 0.5) mean the model misses the
# record's shape (a sample boundary, a second heat source): residual_trend (common practice, no source).
MISFIT_NOISE_RATIO = 1.5
MISFIT_RHO1 = 0.5
MAX_POINTS = 800
QUANTITIES = ("k", "alpha", "rho_c")


class PulseFitError(ValueError):
    """The record cannot give a pulse fit (no heating, no samples after it); the message says what is missing."""


@dataclass(frozen=True)
class Peak:
    """Time and height of the record's maximum from a local cubic, with standard uncertainties."""

    t_s: float
    t_u_s: float
    rise_K: float
    rise_u_K: float
    n: int


@dataclass(frozen=True)
class PeakCheck:
    """The finite-pulse peak relations on the record, and what they give on the fitted model's own curve."""

    peak: Peak
    heat_J_per_m: float
    pulse_s: float
    values: dict[str, float]            # α (m²/s), ρc (J/(m³·K)), k (W/(m·K)) from the record's peak
    u_rel: dict[str, float]             # from the peak's own uncertainty only
    expected: dict[str, float]          # the same relations on the fitted curve
    z: dict[str, float]                 # (record − expected) / u of the difference
    disagree: bool

    def to_dict(self) -> dict[str, object]:
        return {"t_peak_s": self.peak.t_s, "t_peak_u_s": self.peak.t_u_s, "rise_peak_K": self.peak.rise_K,
                "rise_peak_u_K": self.peak.rise_u_K, "pulse_s": self.pulse_s, "heat_J_per_m": self.heat_J_per_m,
                "alpha_mm2_per_s": self.values["alpha"] * 1e6, "rho_c_MJ_per_m3K": self.values["rho_c"] / 1e6,
                "k_W_per_mK": self.values["k"], "u_rel": dict(self.u_rel),
                "expected_alpha_mm2_per_s": self.expected["alpha"] * 1e6,
                "expected_rho_c_MJ_per_m3K": self.expected["rho_c"] / 1e6, "expected_k_W_per_mK": self.expected["k"],
                "z": dict(self.z), "disagree": self.disagree}


@dataclass(frozen=True)
class PulseFit:
    """Result of the pulse fit (SI). ``budget[q][term]`` is a relative standard uncertainty of quantity q."""

    k_W_per_mK: float
    alpha_m2_per_s: float
    rho_c_J_per_m3K: float
    u_rel: dict[str, float]
    budget: dict[str, dict[str, float]]
    geometry: PulseGeometry
    spacing_u_m: float
    resid_rms_K: float
    rho1: float
    n: int
    window_s: tuple[float, float]
    success: bool
    message: str
    peak: PeakCheck | None = None
    flags: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    calibrating: bool = False
    drift_K_per_s: float | None = None   # the slope fitted jointly with the pulse (relative to the baseline's)
    step_t: np.ndarray = field(default_factory=lambda: np.zeros(0), repr=False)
    step_dq: np.ndarray = field(default_factory=lambda: np.zeros(0), repr=False)

    @property
    def spacing_m(self) -> float:
        return self.geometry.spacing_m

    def u(self, quantity: str) -> float:
        """Combined standard uncertainty of ``k``, ``alpha`` or ``rho_c`` (SI)."""
        value = {"k": self.k_W_per_mK, "alpha": self.alpha_m2_per_s, "rho_c": self.rho_c_J_per_m3K}[quantity]
        return value * self.u_rel[quantity]

    def curve(self, t: np.ndarray) -> np.ndarray:
        """The fitted ΔT at times t (s from heater on)."""
        return sensor_rise(t, self.step_t, self.step_dq, self.k_W_per_mK, self.rho_c_J_per_m3K, self.geometry)

    def to_dict(self) -> dict[str, object]:
        return {"k_W_per_mK": self.k_W_per_mK, "alpha_mm2_per_s": self.alpha_m2_per_s * 1e6,
                "rho_c_MJ_per_m3K": self.rho_c_J_per_m3K / 1e6, "u_rel": dict(self.u_rel),
                "budget": {q: dict(b) for q, b in self.budget.items()}, "spacing_mm": self.spacing_m * 1e3,
                "spacing_u_mm": self.spacing_u_m * 1e3, "resid_rms_K": self.resid_rms_K, "n": self.n,
                "window_s": list(self.window_s), "peak_check": self.peak.to_dict() if self.peak else None,
                "drift_fitted_K_per_h": None if self.drift_K_per_s is None else self.drift_K_per_s * 3600.0,
                "flags": list(self.flags)}


# --- the peak -------------------------------------------------------------------------------------------------
def find_peak(t: np.ndarray, dT: np.ndarray, fraction: float = PEAK_FRACTION) -> Peak | None:
    """The maximum of a noisy record: a cubic in ln t fitted to the samples around it above ``fraction`` of its
    height (in ln t the pulse's peak is nearly symmetric; in t a cubic over 80 % of the peak misplaces it by 5 %).

    The height is judged on a 5-point running mean so one noisy sample cannot pick the region. None when the
    maximum is at either end of the record (no peak yet) or too few samples lie around it.
    """
    t = np.asarray(t, dtype=float)
    y = np.asarray(dT, dtype=float)
    if t.size < MIN_PEAK_POINTS:
        return None
    smooth = np.convolve(y, np.ones(5) / 5.0, mode="same") if y.size >= 5 else y
    i = int(np.argmax(smooth[2:-2])) + 2 if y.size > 4 else int(np.argmax(y))
    top = float(smooth[i])
    if top <= 0 or i <= 2 or i >= y.size - 3:
        return None
    lo = i
    while lo > 0 and smooth[lo - 1] >= fraction * top:
        lo -= 1
    hi = i
    while hi < y.size - 1 and smooth[hi + 1] >= fraction * top:
        hi += 1
    if hi == y.size - 1 or hi - lo + 1 < MIN_PEAK_POINTS:
        return None
    if t[lo] <= 0:
        return None
    ts, ys = np.log(t[lo:hi + 1]), y[lo:hi + 1]
    c, s = math.log(float(t[i])), max(float(ts[-1] - ts[0]) / 2.0, 1e-9)
    x = (ts - c) / s
    A = np.vander(x, 4, increasing=True)
    coef, *_ = np.linalg.lstsq(A, ys, rcond=None)
    resid = ys - A @ coef
    dof = max(ys.size - 4, 1)
    cov = np.linalg.pinv(A.T @ A) * float(resid @ resid) / dof * ar1_inflation(lag1_autocorrelation(resid))

    def top_of(cf: np.ndarray) -> tuple[float, float]:
        # roots of c1 + 2c2·x + 3c3·x² = 0; the one that is a maximum inside the span
        roots = np.roots([3 * cf[3], 2 * cf[2], cf[1]]) if abs(cf[3]) > 1e-14 else np.array([-cf[1] / (2 * cf[2])])
        best = None
        for r in roots:
            if abs(r.imag) > 1e-12 or not -1.2 <= r.real <= 1.2:
                continue
            xr = float(r.real)
            if 2 * cf[2] + 6 * cf[3] * xr < 0:
                v = float(cf[0] + cf[1] * xr + cf[2] * xr**2 + cf[3] * xr**3)
                if best is None or v > best[1]:
                    best = (xr, v)
        if best is None:
            raise ValueError("no maximum")
        return best

    try:
        xm, hm = top_of(coef)
        J = np.zeros((2, 4))
        for j in range(4):
            d = np.zeros(4)
            d[j] = 1e-6 * max(abs(coef[j]), 1e-3)
            xp, hp = top_of(coef + d)
            J[:, j] = [(xp - xm) / d[j], (hp - hm) / d[j]]
    except ValueError:
        return None
    cv = J @ cov @ J.T
    t_peak = math.exp(c + s * xm)
    return Peak(t_peak, t_peak * s * math.sqrt(max(cv[0, 0], 0.0)), hm, math.sqrt(max(cv[1, 1], 0.0)), int(ys.size))


def _peak_values(spacing_m: float, heat_J_per_m: float, pulse_s: float, t_s: float, rise_K: float
                 ) -> dict[str, float]:
    kappa, rho_c, k = pulse_inverse(spacing_m, heat_J_per_m / pulse_s, pulse_s, t_s, rise_K)
    return {"alpha": kappa, "rho_c": rho_c, "k": k}


def peak_check(t: np.ndarray, dT: np.ndarray, fitted: np.ndarray, spacing_m: float, heat_J_per_m: float,
               pulse_s: float, fit_u_stat: dict[str, float], model_u: dict[str, float]) -> PeakCheck | None:
    """The peak relations on the record and on the fitted curve ``fitted`` (same times), and whether they differ.

    u of the difference: the record's peak (its cubic's covariance, propagated by finite differences), the fit's
    statistical part and its model-form part (what is not shared by the two). None without a clear peak after
    the pulse.
    """
    pk = find_peak(t, dT)
    pf = find_peak(t, fitted)
    if pk is None or pf is None or pk.t_s <= pulse_s * 1.02 or pf.t_s <= pulse_s * 1.02:
        return None
    try:
        vals = _peak_values(spacing_m, heat_J_per_m, pulse_s, pk.t_s, pk.rise_K)
        expected = _peak_values(spacing_m, heat_J_per_m, pulse_s, pf.t_s, pf.rise_K)
        dt = max(pk.t_u_s, 1e-6)
        dh = max(pk.rise_u_K, 1e-9)
        by_t = _peak_values(spacing_m, heat_J_per_m, pulse_s, pk.t_s + dt, pk.rise_K)
        by_h = _peak_values(spacing_m, heat_J_per_m, pulse_s, pk.t_s, pk.rise_K + dh)
    except (ValueError, ZeroDivisionError, OverflowError):
        return None
    u_rel, z = {}, {}
    for q in QUANTITIES:
        u_rel[q] = math.hypot(math.log(by_t[q] / vals[q]) * pk.t_u_s / dt,
                              math.log(by_h[q] / vals[q]) * pk.rise_u_K / dh)
        u_diff = math.sqrt(u_rel[q] ** 2 + fit_u_stat.get(q, 0.0) ** 2 + model_u.get(q, 0.0) ** 2)
        z[q] = math.log(vals[q] / expected[q]) / u_diff if u_diff > 0 else math.inf
    disagree = any(abs(z[q]) > DISAGREE_Z for q in QUANTITIES)
    return PeakCheck(pk, heat_J_per_m, pulse_s, vals, u_rel, expected, z, disagree)


# --- the fit --------------------------------------------------------------------------------------------------
def _thin(n: int, limit: int) -> np.ndarray:
    return np.arange(n) if n <= limit else np.unique(np.linspace(0, n - 1, limit).round().astype(int))


def pulse_energy(step_t: np.ndarray, step_dq: np.ndarray) -> tuple[float, float]:
    """(heat per metre in J/m, time of the last switch-off in s) of the measured power steps."""
    level = np.cumsum(step_dq)
    heat = float(np.sum(level[:-1] * np.diff(step_t))) if step_t.size > 1 else 0.0
    off = float(step_t[-1]) if abs(level[-1]) < 1e-9 * max(float(np.max(np.abs(level))), 1e-300) else math.inf
    return heat, off


def fit_pulse(t: np.ndarray, dT: np.ndarray, step_t: np.ndarray, step_dq: np.ndarray, geometry: PulseGeometry,
              *, spacing_u_m: float = 0.0, power_u_rel: float = 0.0, level_u_K: float = 0.0,
              drift_u_K_per_s: float = 0.0, rho_c_fixed: float | None = None, rho_c_fixed_u_rel: float = 0.0,
              heater_C_u_rel: float = NEEDLE_C_U_REL, sensor_C_u_rel: float = NEEDLE_C_U_REL,
              contact_u_m2K_per_W: float = CONTACT_U_M2K_PER_W,
              model_u_rel: dict[str, float] | None = None, start: tuple[float, float] | None = None,
              t_end_s: float | None = None, noise_K: float | None = None, fit_drift: bool = True,
              max_points: int = MAX_POINTS) -> PulseFit:
    """Fit the pulse model to ΔT(t) of a sensor needle: rise, peak and decay (t > 0), and with ``fit_drift`` the
    baseline (t ≤ 0) too, with a straight line c0 + c1·t fitted jointly — the decay is long and small, so a drift
    left from a short baseline (or a slow wander taken for one) would otherwise lean on k; fitted, its uncertainty
    is in the covariance and ``level_u_K``/``drift_u_K_per_s`` are not used.

    The fit runs to the end of the record, or earlier where the heater's finite length has taken more than
    1 − ``AXIAL_MIN`` of the signal (never before two peak times); ``t_end_s`` overrides that.
    ``noise_K``: the record's noise (the baseline's residual RMS), for the misfit flag.
    ``rho_c_fixed``: the medium's known ρc (spacing calibration): the spacing is fitted in its place and the
    result's ``geometry.spacing_m`` is the effective spacing. ``start``: (α, ρc) to start from; by default the
    peak relations, else a typical soil.
    """
    t = np.asarray(t, dtype=float)
    dT = np.asarray(dT, dtype=float)
    pos = (t > 0) & np.isfinite(dT)
    if np.count_nonzero(pos) < 10:
        raise PulseFitError(f"only {np.count_nonzero(pos)} samples after the heater came on; at least 10 are needed")
    step_t = np.asarray(step_t, dtype=float)
    step_dq = np.asarray(step_dq, dtype=float)
    if step_t.size == 0:
        raise PulseFitError("no heating: the power column never rises above 0")
    drift = fit_drift and np.count_nonzero((t <= 0) & np.isfinite(dT)) >= 5
    sel = np.isfinite(dT) if drift else pos
    t_all, y_all = t[sel], dT[sel]
    heat, t_off = pulse_energy(step_t, step_dq)
    prob = _Problem(step_t, step_dq, geometry, rho_c_fixed, float(t_all[-1]) if drift else None)
    x = prob.start(t[pos], dT[pos], heat, t_off, start)
    t_end = float(t_all[-1]) if t_end_s is None else min(float(t_end_s), float(t_all[-1]))
    res = None
    for _ in range(4):
        keep = t_all <= t_end
        if np.count_nonzero(keep) < 10:
            raise PulseFitError(f"only {np.count_nonzero(keep)} samples before {t_end:.3g} s; at least 10 are needed")
        idx = _thin(int(np.count_nonzero(keep)), max_points)
        tf, yf = t_all[keep][idx], y_all[keep][idx]
        res = prob.solve(tf, yf, x)
        x = res.x
        if t_end_s is not None:
            break
        new_end = _window_end(prob, x, t_all)
        if abs(new_end - t_end) <= 0.02 * t_end or (new_end >= t_all[-1] and t_end >= t_all[-1]):
            break
        t_end = min(new_end, float(t_all[-1]))
    assert res is not None
    win = (t_all > 0) & (t_all <= t_end)
    return _result(prob, res, tf, t_all[win], y_all[win], heat, t_off,
                   spacing_u_m=spacing_u_m, power_u_rel=power_u_rel, level_u_K=0.0 if drift else level_u_K,
                   drift_u_K_per_s=0.0 if drift else drift_u_K_per_s, rho_c_fixed_u_rel=rho_c_fixed_u_rel,
                   heater_C_u_rel=heater_C_u_rel, sensor_C_u_rel=sensor_C_u_rel, contact_u=contact_u_m2K_per_W,
                   model_u=dict(MODEL_U_REL if model_u_rel is None else model_u_rel), noise_K=noise_K)


def _window_end(prob: _Problem, x: np.ndarray, t_all: np.ndarray) -> float:
    """Where the finite length has taken 1 − AXIAL_MIN of the signal, not before MIN_END_PEAK_TIMES peak times."""
    if prob.geometry.length_m is None:
        return float(t_all[-1])
    with_ends = prob.pulse(x, t_all)
    endless = prob.pulse(x, t_all, axial=False)
    i_peak = int(np.argmax(with_ends))
    ratio = with_ends / np.where(endless > 0, endless, 1.0)
    short = np.nonzero((np.arange(t_all.size) > i_peak) & (ratio < AXIAL_MIN))[0]
    end = float(t_all[short[0]]) if short.size else float(t_all[-1])
    return max(end, MIN_END_PEAK_TIMES * float(t_all[i_peak]))


class _Problem:
    """The parameter vector and the model: (ln α, ln ρc), or (ln α, ln r) when ρc is known (calibration), then
    with a fitted drift the level c0 (K) and the slope as its change c1·T over the record's length T (K)."""

    def __init__(self, step_t: np.ndarray, step_dq: np.ndarray, geometry: PulseGeometry,
                 rho_c_fixed: float | None, drift_span_s: float | None = None) -> None:
        self.step_t, self.step_dq, self.geometry, self.rho_c_fixed = step_t, step_dq, geometry, rho_c_fixed
        self.drift_span_s = drift_span_s

    @property
    def calibrating(self) -> bool:
        return self.rho_c_fixed is not None

    def geo_of(self, x: np.ndarray) -> PulseGeometry:
        return self.geometry.with_spacing(math.exp(x[1])) if self.calibrating else self.geometry

    def props(self, x: np.ndarray) -> tuple[float, float]:
        """(k, ρc) of a parameter vector."""
        rc = self.rho_c_fixed if self.rho_c_fixed is not None else math.exp(x[1])
        return math.exp(x[0]) * rc, rc

    def pulse(self, x: np.ndarray, t: np.ndarray, geo: PulseGeometry | None = None, axial: bool = True
              ) -> np.ndarray:
        """The pulse's rise at the sensor (no drift)."""
        k, rc = self.props(x)
        return sensor_rise(t, self.step_t, self.step_dq, k, rc, geo or self.geo_of(x), axial=axial)

    def drift(self, x: np.ndarray, t: np.ndarray) -> np.ndarray:
        if self.drift_span_s is None:
            return np.zeros_like(t)
        return x[2] + x[3] * t / self.drift_span_s

    def model(self, x: np.ndarray, t: np.ndarray, geo: PulseGeometry | None = None, axial: bool = True
              ) -> np.ndarray:
        return self.pulse(x, t, geo, axial) + self.drift(x, t)

    def start(self, t: np.ndarray, y: np.ndarray, heat: float, t_off: float,
              given: tuple[float, float] | None) -> np.ndarray:
        """From the peak relations when the record has a clear peak after the pulse, else a typical soil."""
        r0 = self.geometry.spacing_m
        alpha0, rc0 = given if given is not None else (5e-7, 2.5e6)
        if given is None:
            pk = find_peak(t, y)
            if pk is not None and math.isfinite(t_off) and pk.t_s > 1.05 * t_off:
                try:
                    v = _peak_values(r0, heat, t_off, pk.t_s, pk.rise_K)
                    if 1e-9 < v["alpha"] < 1e-4 and 1e4 < v["rho_c"] < 1e8:
                        alpha0, rc0 = v["alpha"], v["rho_c"]
                except (ValueError, ZeroDivisionError, OverflowError):
                    pass
        extra = [0.0, 0.0] if self.drift_span_s is not None else []
        if self.rho_c_fixed is None:
            return np.array([math.log(alpha0), math.log(rc0), *extra])
        # the ideal solution depends on r²/α only: ρc known means r = r0·√(ρc_start/ρc_known), α = k/ρc_known
        return np.array([math.log(alpha0 * rc0 / self.rho_c_fixed),
                         math.log(r0 * math.sqrt(rc0 / self.rho_c_fixed)), *extra])

    def bounds(self, x0: np.ndarray) -> tuple[list[float], list[float]]:
        free = [-np.inf, -np.inf] if self.drift_span_s is not None else []
        if self.rho_c_fixed is None:
            return [x0[0] - 6, math.log(1e4), *free], [x0[0] + 6, math.log(1e8), *(-v for v in free)]
        g = self.geometry
        r_lo = max(0.5 * g.spacing_m, 1.5 * max(g.heater_radius_m, g.sensor_radius_m), 1e-4)
        return [x0[0] - 5, math.log(r_lo), *free], [x0[0] + 5, math.log(2.0 * g.spacing_m), *(-v for v in free)]

    def solve(self, t: np.ndarray, y: np.ndarray, x0: np.ndarray) -> Any:
        lo, hi = self.bounds(x0)
        x0 = np.clip(x0, np.array(lo) + 1e-6, np.array(hi) - 1e-6)
        x0[2:] = np.nan_to_num(x0[2:])
        return least_squares(lambda x: self.model(x, t) - y, x0, bounds=(lo, hi), x_scale="jac", method="trf",
                             xtol=1e-10, ftol=1e-10, max_nfev=200, diff_step=1e-6)


def _result(prob: _Problem, res: Any, tf: np.ndarray, t_win: np.ndarray, y_win: np.ndarray, heat: float,
            t_off: float, *, spacing_u_m: float, power_u_rel: float, level_u_K: float, drift_u_K_per_s: float,
            rho_c_fixed_u_rel: float, heater_C_u_rel: float, sensor_C_u_rel: float, contact_u: float,
            model_u: dict[str, float], noise_K: float | None) -> PulseFit:
    """The fit's values, its budget (linearised refits for every input taken as known) and the peak check."""
    x, J, resid = res.x, res.jac, res.fun
    n, npar = resid.size, x.size
    s2 = float(resid @ resid) / max(n - npar, 1)
    rho1 = lag1_autocorrelation(resid)
    JtJ_inv = np.linalg.pinv(J.T @ J)
    cov = JtJ_inv * s2 * ar1_inflation(rho1)
    gain = JtJ_inv @ J.T                                         # δx = gain @ δm for a model change δm
    k, rc = prob.props(x)
    geo = prob.geo_of(x)
    base = prob.pulse(x, tf)
    calibrating = prob.calibrating
    g0 = prob.geometry

    def to_q(dx: np.ndarray) -> dict[str, float]:
        """Relative shifts of k, α and ρc (and of the spacing, calibrating) for a parameter shift dx."""
        if calibrating:
            return {"alpha": float(dx[0]), "k": float(dx[0]), "spacing": float(dx[1])}
        return {"alpha": float(dx[0]), "rho_c": float(dx[1]), "k": float(dx[0] + dx[1])}

    terms: dict[str, list[dict[str, float]]] = {}

    def add(name: str, dm: np.ndarray) -> None:
        terms.setdefault(name, []).append(to_q(gain @ dm))

    if calibrating:
        stat = {"alpha": math.sqrt(max(cov[0, 0], 0)), "k": math.sqrt(max(cov[0, 0], 0)),
                "spacing": math.sqrt(max(cov[1, 1], 0))}
    else:
        stat = {"alpha": math.sqrt(max(cov[0, 0], 0)), "rho_c": math.sqrt(max(cov[1, 1], 0)),
                "k": math.sqrt(max(cov[0, 0] + cov[1, 1] + 2 * cov[0, 1], 0))}
    terms["statistical"] = [stat]
    if not calibrating and spacing_u_m > 0:
        add("spacing", prob.pulse(x, tf, geo=geo.with_spacing(geo.spacing_m + spacing_u_m)) - base)
    if calibrating and rho_c_fixed_u_rel > 0:
        # the known ρc is itself uncertain: the model with the medium's ρc (and k) scaled by 1 + u
        add("reference", sensor_rise(tf, prob.step_t, prob.step_dq, k * (1 + rho_c_fixed_u_rel),
                                     rc * (1 + rho_c_fixed_u_rel), geo) - base)
    if power_u_rel > 0:
        add("power", base * power_u_rel)
    if level_u_K > 0:
        add("baseline", np.full_like(base, level_u_K))
    if drift_u_K_per_s > 0:
        add("baseline", tf * drift_u_K_per_s)
    if g0.heater_C_J_per_m3K and g0.heater_radius_m and heater_C_u_rel > 0:
        add("needles", prob.pulse(x, tf, geo=replace(geo, heater_C_J_per_m3K=g0.heater_C_J_per_m3K
                                                     * (1 + heater_C_u_rel))) - base)
    if g0.sensor_C_J_per_m3K and g0.sensor_radius_m and sensor_C_u_rel > 0:
        add("needles", prob.pulse(x, tf, geo=replace(geo, sensor_C_J_per_m3K=g0.sensor_C_J_per_m3K
                                                     * (1 + sensor_C_u_rel))) - base)
    if g0.heater_C_J_per_m3K and g0.heater_radius_m and contact_u > 0:
        add("contact", prob.pulse(x, tf, geo=replace(geo, heater_contact_m2K_per_W=geo.heater_contact_m2K_per_W
                                                     + contact_u)) - base)
    if g0.length_m is not None:
        add("axial", (base - prob.pulse(x, tf, axial=False)) * AXIAL_U_FRACTION)
    quantities = ("k", "alpha", "spacing") if calibrating else QUANTITIES
    budget: dict[str, dict[str, float]] = {q: {} for q in quantities}
    for name, parts in terms.items():
        for q in quantities:
            budget[q][name] = math.sqrt(sum(p.get(q, 0.0) ** 2 for p in parts))
    # Calibrating, the model-form error is not in the spacing: whatever the lumped needles get wrong in the
    # reference medium goes into the effective spacing and cancels when that spacing reads another medium, whose
    # own ρc keeps the model term (it carries what does not cancel: the error's change from medium to medium).
    if not calibrating:
        budget["alpha"]["model"] = model_u.get("alpha", 0.0)
        budget["rho_c"]["model"] = model_u.get("rho_c", 0.0)
        budget["k"]["model"] = math.hypot(model_u.get("alpha", 0.0), model_u.get("rho_c", 0.0))
    u_rel = {q: math.sqrt(sum(v * v for v in b.values())) for q, b in budget.items()}
    if calibrating:
        u_rel["rho_c"] = rho_c_fixed_u_rel

    flags: list[str] = []
    notes: list[str] = []
    rms = math.sqrt(float(resid @ resid) / n)
    if noise_K and rms > MISFIT_NOISE_RATIO * noise_K and rho1 > MISFIT_RHO1:
        flags.append("residual_trend")
        notes.append(f"the pulse model misses the record's shape: residuals {1e3 * rms:.3g} mK RMS against "
                     f"{1e3 * noise_K:.3g} mK of baseline noise, lag-1 correlation {rho1:.2f} (a sample boundary, "
                     "another heat source, a needle that moved?)")
    pc = None
    if math.isfinite(t_off) and heat > 0:
        pc = peak_check(t_win, y_win, prob.model(x, t_win), geo.spacing_m, heat, t_off,
                        {q: stat.get(q, 0.0) for q in QUANTITIES}, {"k": budget["k"].get("model", 0.0), **model_u})
        if pc is None:
            flags.append("no_peak")
            notes.append("no clear peak after the pulse: the peak cross-check was not made")
        elif pc.disagree:
            flags.append("pulse_peak_disagree")
            notes.append("the peak relations and the fit differ beyond their uncertainties: k "
                         f"{pc.values['k']:.3g} against {pc.expected['k']:.3g} W/(m·K) expected from the fit, ρc "
                         f"{pc.values['rho_c'] / 1e6:.3g} against {pc.expected['rho_c'] / 1e6:.3g} MJ/(m³·K), α "
                         f"{pc.values['alpha'] * 1e6:.3g} against {pc.expected['alpha'] * 1e6:.3g} mm²/s")
    spacing_u = geo.spacing_m * u_rel["spacing"] if calibrating else spacing_u_m
    return PulseFit(k, math.exp(x[0]), rc, u_rel, budget, geo, spacing_u, rms, rho1,
                    n, (float(tf[tf > 0][0]), float(tf[-1])), bool(res.success), str(res.message), pc, tuple(flags),
                    tuple(notes), calibrating,
                    None if prob.drift_span_s is None else float(x[3]) / prob.drift_span_s, prob.step_t, prob.step_dq)
