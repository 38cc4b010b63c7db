"""Late-time line-source fit on an automatically chosen window, with single-probe diffusivity from the intercept.

ΔT ≈ q/(4πk)·[ln t + ln(4α/r²) − γ + 2h] late in the heating (Carslaw & Jaeger 1959 §10.4, §13.7). With the
superposition regressors of ``superposition`` this is y = u/(4πk) + c, y = ΔT/Q, u = X/Q (u = ln t at constant
power), so the slope gives k and a sagging supply does not bias it.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np

from . import window as win
from .data import contiguous
from .stats import LineFit, fit_line, quadratic_curvature

FLOOR_FRACTION = 0.1   # same as the live rule: the window never starts before 0.1·t_end (no source)
START_TOL = 0.01       # slope error allowed at the window start
END_TOL = 0.01         # axial-loss slope error allowed at the window end
TREND_TOL = 0.02       # relative slope drift across the window that counts as a residual trend (no source)
TREND_Z = 3.0
SHORT_SPAN_LN = math.log(2.0)  # window shorter than a factor 2 in time (common practice, no source)
MIN_POINTS = 20
END_FLOOR = 0.3        # the axial limit never cuts more than 70 % of the heating (then residual_trend tells)
ALPHA_MIN, ALPHA_MAX = 1e-9, 1e-4   # plausible diffusivities for any ground or reference medium (m²/s)
# The media a probe meets: dry sand ≈ 1.3, moist soils 2–3 MJ/(m³·K) (de Vries 1963), water 4.18 (IAPWS-95);
# 1.0 leaves room below dry sand (common practice, no source). The window's model-error term and the stop rule
# weigh the media in this range; a sample's outer face is judged with α = k/RHO_C_FLOOR, the largest it can be.
RHO_C_FLOOR = 1.0e6
RHO_C_LIMITS = (RHO_C_FLOOR, 4.2e6)


@dataclass(frozen=True)
class LateTimeFit:
    """Result of the straight-line fit of y = ΔT/Q against u = X/Q on [t_start, t_end]."""

    k_W_per_mK: float
    k_u_stat_W_per_mK: float
    slope_K: float
    intercept_K: float
    window_s: tuple[float, float]
    n: int
    resid_rms_K: float
    rho1: float
    q_mean_W_per_m: float
    alpha_m2_per_s: float | None
    alpha_u_rel: float | None
    trend_rel: float
    trend_z: float
    line: LineFit
    drift_u_rel: float = 0.0
    drift_coef_rel: float = 0.0   # relative change of k per K/s of error in the removed baseline slope (signed)

    @property
    def span_ln(self) -> float:
        return math.log(self.window_s[1] / self.window_s[0]) if self.window_s[0] > 0 else math.inf

    @property
    def short(self) -> bool:
        return self.span_ln < SHORT_SPAN_LN or self.n < MIN_POINTS

    @property
    def trend(self) -> bool:
        return abs(self.trend_rel) > TREND_TOL and self.trend_z > TREND_Z


def fit_window(t: np.ndarray, u: np.ndarray, y: np.ndarray, Q: np.ndarray, t_start: float, t_end: float,
               r_m: float | None = None, r_u_m: float = 0.0, drift_rate_u_K_per_s: float = 0.0) -> LateTimeFit:
    """Fit the late-time line on samples with t_start <= t <= t_end (heating samples only).

    ``drift_rate_u_K_per_s`` (the standard uncertainty of the baseline slope that was subtracted) is carried into
    k: an error δ in the rate adds −δ·t/Q to y, which tilts the fitted slope by −δ·cov(t/Q, u)/var(u).
    """
    sel = _span(t, t_start, t_end)
    ts, us, ys, qs = t[sel], u[sel], y[sel], Q[sel]
    if ts.size < 3:
        raise ValueError(f"fewer than 3 samples between {t_start:.3g} s and {t_end:.3g} s")
    lf = fit_line(us, ys)
    a, b = lf.slope, lf.intercept
    if a <= 0:
        raise ValueError("temperature does not rise with ln t in the window (no heating signal)")
    if not 1e-60 < a < 1e60:  # a³ below appears in α's variance; past these it under- or overflows
        raise ValueError(f"slope {a:.3g} K per W/m per unit of ln t is beyond any medium: check the units of the "
                         "power and temperature columns")
    k = 1.0 / (4.0 * math.pi * a)
    q_mean = float(np.mean(qs))
    resid = ys - (a * us + b)
    alpha = alpha_u = None
    if r_m:
        ln_t0 = -b / a
        alpha = win.alpha_from_intercept(r_m, ln_t0)
        var = (lf.intercept_u / a) ** 2 + (b * lf.slope_u / a**2) ** 2 - 2 * b * lf.cov_slope_intercept / a**3
        alpha_u = math.sqrt(max(var, 0.0) + (2 * r_u_m / r_m) ** 2)
    rel, z, _ = quadratic_curvature(us, ys)
    du = us - us.mean()
    tilt = float(du @ (ts / qs)) / float(du @ du)   # slope change per K/s of drift
    return LateTimeFit(k, k * lf.slope_u / a, a * q_mean, b * q_mean, (float(ts[0]), float(ts[-1])), ts.size,
                       float(np.sqrt(np.mean((resid * qs) ** 2))), lf.rho1, q_mean, alpha, alpha_u, rel, z, lf,
                       abs(drift_rate_u_K_per_s * tilt) / a, -tilt / a)


def _span(t: np.ndarray, t0: float, t1: float) -> slice | np.ndarray:
    """The samples with t0 <= t <= t1 (a slice when contiguous: views, not copies, of a long record)."""
    return contiguous((t >= t0) & (t <= t1))


def _thirds_slopes(t: np.ndarray, u: np.ndarray, y: np.ndarray, t0: float, t1: float) -> tuple[float, ...]:
    edges = np.exp(np.linspace(math.log(t0), math.log(t1), 4))
    out = []
    for lo, hi in itertools.pairwise(edges):
        sel = _span(t, lo, hi)
        out.append(fit_line(u[sel], y[sel]).slope if u[sel].size >= 3 else math.nan)
    return tuple(out)


@dataclass(frozen=True)
class WindowChoice:
    t_start: float
    t_end: float
    reason: str


def choose_window(t: np.ndarray, u: np.ndarray, y: np.ndarray, Q: np.ndarray, *, r_m: float | None,
                  probe_C_J_per_m3K: float | None, length_m: float | None, axial_m: float | None,
                  alpha_hint: float | None = None, h_hint: float = 0.0, k_hint: float | None = None,
                  sample_radius_m: float | None = None) -> WindowChoice:
    """The automatic window (see METHODS.md): physics start and end, then trimmed until no residual trend.

    Start: the later of 0.1·t_end and the time the probe-model slope error falls below 1 % (α from the probe
    model fit when given, else iterated from the intercept). End: the end of heating, or earlier where axial
    loss bends the slope by 1 % (t < L²/(53.1·α)), and before a finite sample's outer face does (t < 0.144·R²/α
    with α = k/``RHO_C_FLOOR``, its upper bound; never floored: a wall moves k by more than it tells). Then,
    while a quadratic in u shows the local slope drifting by more than 2 % across the window (z > 3), the end of
    the window whose third deviates most is trimmed by a factor 1.25 in time, keeping at least a factor e.
    """
    t_max = float(t[-1])
    t_first = float(t[0])
    alpha = alpha_hint
    k = k_hint
    t_start, t_end = max(FLOOR_FRACTION * t_max, t_first), t_max
    why = ["floor 0.1·t_end"]
    for _ in range(4):
        t_end = t_max
        if alpha is not None:
            alpha = min(max(alpha, ALPHA_MIN), ALPHA_MAX)
        if alpha and length_m:
            t_end = min(t_max, max(win.axial_end_s(length_m, alpha, END_TOL, axial_m), END_FLOOR * t_max))
        t_wall = math.inf
        if sample_radius_m and k:
            aw = win.wall_alpha(k, RHO_C_FLOOR)
            t_wall = win.wall_end_s(sample_radius_m, aw, END_TOL, r_m or 0.0) if aw else math.inf
            t_end = min(t_end, t_wall)
        start = max(FLOOR_FRACTION * t_end, t_first)
        why = ["floor 0.1·t_end"]
        if alpha and r_m:
            aj = 2.0 * (k / alpha) / probe_C_J_per_m3K if (probe_C_J_per_m3K and k) else None
            t_phys = win.start_s(r_m, alpha, aj, h_hint, START_TOL)
            if t_phys > start:
                start = t_phys
                why = ["probe-model slope error < 1 %" if aj else "line-source slope error < 1 %"]
        if t_end == t_wall and t_wall < t_max:
            why.append(f"sample's outer face (R = {sample_radius_m * 1e3:.3g} mm) from {t_wall:.3g} s")
        elif t_end < t_max:
            why.append("axial-loss limit L²/(53α)" if t_end > END_FLOOR * t_max else "axial limit capped at 0.3·t")
        if math.log(t_end / start) < 0.5:  # heating too short for the criterion: keep the last half-decade
            start = t_end / math.exp(0.5)
            why.append("start moved to keep half a decade")
        t_start = start
        if alpha_hint is not None:
            break
        try:
            f = fit_window(t, u, y, Q, t_start, t_end, r_m)
        except ValueError:
            break
        k = f.k_W_per_mK
        if r_m and f.alpha_m2_per_s:
            if alpha and abs(f.alpha_m2_per_s / alpha - 1) < 0.02:
                alpha = f.alpha_m2_per_s
                break
            alpha = f.alpha_m2_per_s
    trimmed = 0
    for _ in range(10):
        if math.log(t_end / t_start) < SHORT_SPAN_LN + math.log(1.25):
            break
        sel = _span(t, t_start, t_end)
        if u[sel].size < 2 * MIN_POINTS:
            break
        rel, z, _ = quadratic_curvature(u[sel], y[sel])
        if not (abs(rel) > TREND_TOL and z > TREND_Z):
            break
        s1, s2, s3 = _thirds_slopes(t, u, y, t_start, t_end)
        if abs(s1 - s2) >= abs(s3 - s2):
            t_start *= 1.25
        else:
            t_end /= 1.25
        trimmed += 1
    if trimmed:
        why.append(f"trimmed {trimmed}× for residual trend")
    return WindowChoice(t_start, t_end, "; ".join(why))
