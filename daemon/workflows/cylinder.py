"""Surface-step cylinder test: a specimen in a cylindrical mould is moved into a bath (or oven), and the
temperature at its centre is logged. Its diffusivity follows from fitting the classical series solutions.

Uniform initial temperature; at t = 0 the whole surface steps to the bath temperature (perfect contact, thin
mould). Centre response θ = fraction of the step reached (Carslaw & Jaeger 1959, "Conduction of Heat in Solids",
§7.4 infinite cylinder and §3.3 slab, section numbers from memory):

- infinite cylinder, radius R, Fo = κt/R²:  1 − θ = Σ 2/(λ_n·J1(λ_n))·exp(−λ_n²·Fo), J0(λ_n) = 0;
- slab of half-thickness L (centre), Fo_L = κt/L²:  1 − θ = Σ 4(−1)^n/((2n+1)π)·exp(−(2n+1)²π²·Fo_L/4);
- finite cylinder of height H: the product of the two unaccomplished fractions with L = H/2 (Newman's product
  rule, Newman 1936, Ind. Eng. Chem. 28:545).

The problem is linear, so a bath that changes again (cooling in a second bath, an oven that warms slowly) is
handled by superposing the step response of each change of surface temperature (Duhamel).

A finite surface heat-transfer coefficient (Biot number) or a thick mould wall delays the response; fitting the
Dirichlet solution then gives a diffusivity that is too low. A fitted time lag absorbs part of it, and a
residual trend is flagged.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq, least_squares
from scipy.special import j0, j1

N_TERMS = 200
FO_MIN = 1e-3   # below this the centre has not moved (1 − θ = 1 to better than 1e-60 for any geometry here)


class CylinderTestError(ValueError):
    """The record cannot give a diffusivity; the message says what is missing."""


def j0_roots(n: int) -> np.ndarray:
    """First n positive zeros of J0, by Newton's method from McMahon's asymptotic expansion (A&S 9.5.12).

    Computed here rather than taken from scipy so that ``scipy.special.jn_zeros`` can serve as the check.
    """
    k = np.arange(1, n + 1, dtype=float)
    b = (k - 0.25) * math.pi
    x = b + 1 / (8 * b) - 124 / (3 * (8 * b) ** 3)
    for _ in range(8):
        x = x + j0(x) / j1(x)  # J0' = −J1
    return x


_ROOTS = j0_roots(N_TERMS)
_CYL_COEF = 2.0 / (_ROOTS * j1(_ROOTS))
_SLAB_ODD = (2 * np.arange(N_TERMS) + 1) * math.pi / 2
_SLAB_COEF = 4.0 * (-1.0) ** np.arange(N_TERMS) / ((2 * np.arange(N_TERMS) + 1) * math.pi)


def _series(fo: np.ndarray, rates: np.ndarray, coef: np.ndarray) -> np.ndarray:
    fo = np.atleast_1d(np.asarray(fo, dtype=float))
    out = np.ones_like(fo)
    live = fo > FO_MIN
    if np.any(live):
        out[live] = np.exp(-np.outer(fo[live], rates**2)) @ coef
    return out


def unaccomplished_cylinder(fo: np.ndarray | float) -> np.ndarray:
    """1 − θ at the axis of an infinite cylinder, Fo = κt/R²."""
    return _series(fo, _ROOTS, _CYL_COEF)


def unaccomplished_slab(fo_l: np.ndarray | float) -> np.ndarray:
    """1 − θ at the mid-plane of a slab of half-thickness L, Fo_L = κt/L²."""
    return _series(fo_l, _SLAB_ODD, _SLAB_COEF)


def centre_response(fo: np.ndarray | float, h_over_d: float | None = None) -> np.ndarray:
    """θ at the centre for Fo = κt/R²; ``h_over_d`` None means an infinite cylinder."""
    fo = np.asarray(fo, dtype=float)
    shape = fo.shape
    u = unaccomplished_cylinder(fo)
    if h_over_d is not None:
        if h_over_d <= 0:
            raise CylinderTestError(f"height/diameter must be > 0, got {h_over_d}")
        half_height_over_r = h_over_d  # L/R = (H/2)/R = H/D
        u = u * unaccomplished_slab(fo / half_height_over_r**2)
    return (1.0 - u).reshape(shape)


def fourier_at_fraction(fraction: float, h_over_d: float | None = None) -> float:
    """Fo (on the radius) at which the centre reaches ``fraction`` of the step."""
    if not 0.0 < fraction < 1.0:
        raise CylinderTestError(f"fraction must be between 0 and 1, got {fraction}")
    return float(brentq(lambda f: float(centre_response(f, h_over_d)) - fraction, 1e-3, 20.0, xtol=1e-12))


# --- fitting a record ------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class SurfaceSteps:
    """Surface (bath) temperature as steps: level[i] from times_s[i] on; before the first step, the specimen's
    initial temperature (fitted, or given)."""

    times_s: np.ndarray
    levels_C: np.ndarray

    @staticmethod
    def single(bath_C: float, at_s: float = 0.0) -> SurfaceSteps:
        return SurfaceSteps(np.array([at_s]), np.array([bath_C]))

    @staticmethod
    def from_record(time_s: np.ndarray, bath_C: np.ndarray, tol_K: float = 0.1,
                    start_C: float | None = None) -> SurfaceSteps:
        """Piecewise-constant levels from a measured bath temperature: a new step whenever it leaves ±tol_K."""
        t = np.asarray(time_s, dtype=float)
        b = np.asarray(bath_C, dtype=float)
        ok = np.isfinite(b)
        t, b = t[ok], b[ok]
        if t.size == 0:
            raise CylinderTestError("the bath column holds no values")
        times, levels = [], []
        base = start_C
        seg_t, seg = float(t[0]), [float(b[0])]
        for i in range(1, t.size):
            mean = float(np.mean(seg))
            nxt = b[i + 1] if i + 1 < t.size else b[i]
            # a new level needs two samples in a row off the current one, so a single noisy reading is no step
            if abs(b[i] - mean) > tol_K and abs(nxt - mean) > tol_K:
                times.append(seg_t)
                levels.append(mean)
                seg_t, seg = float(t[i]), [float(b[i])]
            else:
                seg.append(float(b[i]))
        times.append(seg_t)
        levels.append(float(np.mean(seg)))
        if base is not None and abs(levels[0] - base) <= tol_K:
            times, levels = times[1:], levels[1:]
        return SurfaceSteps(np.array(times), np.array(levels))


def model_centre_C(t: np.ndarray, alpha: float, radius_m: float, h_over_d: float | None, steps: SurfaceSteps,
                   initial_C: float, lag_s: float = 0.0) -> np.ndarray:
    """Centre temperature for a surface following ``steps`` (superposed step responses)."""
    t = np.asarray(t, dtype=float)
    out = np.full_like(t, initial_C)
    prev = initial_C
    for ts, level in zip(steps.times_s, steps.levels_C, strict=True):
        age = t - ts - lag_s
        fo = np.where(age > 0, alpha * np.maximum(age, 0.0) / radius_m**2, 0.0)
        out = out + (level - prev) * centre_response(fo, h_over_d)
        prev = level
    return out


@dataclass(frozen=True)
class CylinderFit:
    alpha_m2_per_s: float
    alpha_u_m2_per_s: float
    initial_C: float
    lag_s: float
    final_level_C: float
    resid_rms_K: float
    t50_s: float | None
    alpha_fo50_m2_per_s: float | None
    n: int
    geometry: str
    flags: tuple[str, ...]
    alpha_u_model_rel: float = 0.0  # the model-error part of alpha_u (see ``fit_cylinder``)

    @property
    def alpha_mm2_per_s(self) -> float:
        return self.alpha_m2_per_s * 1e6

    def to_dict(self) -> dict[str, object]:
        return {"alpha_mm2_per_s": self.alpha_m2_per_s * 1e6, "alpha_u_mm2_per_s": self.alpha_u_m2_per_s * 1e6,
                "initial_C": self.initial_C, "lag_s": self.lag_s, "final_level_C": self.final_level_C,
                "resid_rms_K": self.resid_rms_K, "t50_s": self.t50_s,
                "alpha_fo50_mm2_per_s": None if self.alpha_fo50_m2_per_s is None else self.alpha_fo50_m2_per_s * 1e6,
                "n": self.n, "geometry": self.geometry, "flags": list(self.flags),
                "alpha_u_model_rel": self.alpha_u_model_rel}


def half_time(t: np.ndarray, centre_C: np.ndarray, initial_C: float, bath_C: float, t_step: float = 0.0
              ) -> float | None:
    """First time after the step at which the centre has covered half of it (linear interpolation)."""
    frac = (np.asarray(centre_C, dtype=float) - initial_C) / (bath_C - initial_C)
    t = np.asarray(t, dtype=float)
    idx = np.nonzero((t > t_step) & (frac >= 0.5))[0]
    if idx.size == 0 or idx[0] == 0:
        return None
    i = int(idx[0])
    f0, f1 = frac[i - 1], frac[i]
    return float(t[i - 1] + (0.5 - f0) * (t[i] - t[i - 1]) / (f1 - f0)) - t_step


def fit_cylinder(t: np.ndarray, centre_C: np.ndarray, radius_m: float, steps: SurfaceSteps,
                 height_m: float | None = None, *, initial_C: float | None = None, fit_lag: bool = True,
                 fit_bath: bool = False) -> CylinderFit:
    """Least-squares diffusivity (and initial temperature, time lag, optionally the last bath level)."""
    t = np.asarray(t, dtype=float)
    y = np.asarray(centre_C, dtype=float)
    ok = np.isfinite(t) & np.isfinite(y)
    t, y = t[ok], y[ok]
    if t.size < 8:
        raise CylinderTestError(f"{t.size} usable samples: the fit needs at least 8")
    if np.any(np.diff(t) <= 0):
        raise CylinderTestError("time_s must increase from row to row")
    if not radius_m > 0:
        raise CylinderTestError("the mould radius must be > 0 (give --radius-mm)")
    h_over_d = None if height_m is None else height_m / (2 * radius_m)
    geometry = "infinite cylinder" if h_over_d is None else f"finite cylinder H/D = {h_over_d:.3g}"
    pre = t < steps.times_s[0]
    t0_guess = float(np.mean(y[pre])) if np.any(pre) else float(y[0])
    levels = steps.levels_C.copy()
    span = abs(levels[0] - t0_guess)
    if span < 1e-6:
        raise CylinderTestError("the bath is at the specimen's initial temperature: there is no step to follow")
    # start κ from the half-time of the first step with the infinite-cylinder Fo₅₀
    fo50 = fourier_at_fraction(0.5, h_over_d)
    t50 = half_time(t, y, t0_guess, float(levels[0]), float(steps.times_s[0]))
    a0 = fo50 * radius_m**2 / t50 if t50 else 2e-7  # typical moist soil when no half-time is seen
    names = ["ln_alpha"]
    x0 = [math.log(a0)]
    if initial_C is None:
        names.append("initial")
        x0.append(t0_guess)
    if fit_lag:
        names.append("lag")
        x0.append(0.0)
    if fit_bath:
        names.append("bath")
        x0.append(float(levels[-1]))

    def unpack(x: np.ndarray) -> tuple[float, float, float, SurfaceSteps]:
        d = dict(zip(names, x, strict=True))
        lv = levels.copy()
        if "bath" in d:
            lv[-1] = d["bath"]
        return (math.exp(d["ln_alpha"]), d.get("initial", initial_C if initial_C is not None else t0_guess),
                d.get("lag", 0.0), SurfaceSteps(steps.times_s, lv))

    def resid(x: np.ndarray) -> np.ndarray:
        a, ti, lag, st = unpack(x)
        return model_centre_C(t, a, radius_m, h_over_d, st, ti, lag) - y

    scale = [1.0] + [max(span, 1.0) if n in ("initial", "bath") else max(float(np.ptp(t)) * 0.01, 1.0)
                     for n in names[1:]]
    sol = least_squares(resid, np.array(x0), x_scale=np.array(scale), method="trf")
    a, ti, lag, st = unpack(sol.x)
    r = sol.fun
    dof = max(t.size - len(names), 1)
    s2 = float(r @ r) / dof
    flags: list[str] = []
    try:
        cov = np.linalg.inv(sol.jac.T @ sol.jac) * s2
        rho1 = float(r[:-1] @ r[1:] / (r @ r)) if float(r @ r) > 0 else 0.0
        infl = (1 + min(max(rho1, 0.0), 0.95)) / (1 - min(max(rho1, 0.0), 0.95))
        a_u = a * math.sqrt(max(cov[0, 0], 0.0) * infl)
        if rho1 > 0.8:
            flags.append("residual_trend")
    except np.linalg.LinAlgError:
        a_u = math.nan
        flags.append("not_identifiable")
    if lag > 0.05 * (t50 or math.inf):
        flags.append("large_lag")
    if not np.any(t > steps.times_s[0] + (t50 or 0) * 2):
        flags.append("record_short")
    a_fo50 = fo50 * radius_m**2 / t50 if t50 else None
    # Model error: the fitted lag stands for a finite bath coefficient and the mould wall, which delay the early
    # and the late response differently. How far κ moved from the plain half-time reading (which ignores the lag)
    # is taken as the half-width of a rectangular distribution (JCGM 100:2008 §4.3.7) of what the model leaves out.
    model_rel = 0.0
    if a_fo50:
        model_rel = abs(a_fo50 / a - 1.0) / math.sqrt(3.0)
        a_u = math.hypot(a_u, a * model_rel)
    return CylinderFit(a, a_u, ti, lag, float(st.levels_C[-1]), math.sqrt(float(r @ r) / t.size), t50, a_fo50,
                       int(t.size), geometry, tuple(flags), model_rel)
