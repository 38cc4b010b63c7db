"""Statistics shared by every fit: correlated-residual inflation, straight-line fits with covariance."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.signal import lfilter

RHO_MAX = 0.95


def combine(budget: dict[str, float]) -> float:
    """Relative standard uncertainties of independent terms, in quadrature (JCGM 100:2008 §5.1.2)."""
    return math.sqrt(sum(v * v for v in budget.values()))


def lag1_autocorrelation(resid: np.ndarray) -> float:
    r = np.asarray(resid, dtype=float)
    if r.size < 3:
        return 0.0
    den = float(r @ r)
    return 0.0 if den <= 0 else float(r[:-1] @ r[1:]) / den


def ar1_inflation(rho: float) -> float:
    """Variance factor for a smooth regressor under AR(1) residuals: n/n_eff = (1 + ρ)/(1 − ρ), for ρ > 0.

    Residual autocorrelation also grows when the model misses curvature, so this inflation covers part of that
    systematic misfit too.
    """
    rho = min(max(rho, 0.0), RHO_MAX)
    return (1.0 + rho) / (1.0 - rho)


MIN_WANDER_SAMPLES = 80  # a baseline shorter than this says too little about a slow wander (no source)


def wander_model(t_base: np.ndarray, resid_base: np.ndarray) -> tuple[float, float, float, float] | None:
    """White noise plus an AR(1) wander read off a baseline's residuals (trend removed): (σ²_e, σ²_w, φ, dt).

    The wander's lag-l autocovariance is σ²_w·φ^l and white noise adds only at lag 0, so φ = (γ2 + γ3)/(γ1 + γ2)
    and σ²_w = γ1/φ; the rest of γ0 is white. None: too short a baseline, or no wander to be seen."""
    tb = np.asarray(t_base, dtype=float)
    r = np.asarray(resid_base, dtype=float)
    if r.size < MIN_WANDER_SAMPLES:
        return None
    r = r - np.polyval(np.polyfit(tb, r, 1), tb)
    g = [float(r[: r.size - lag] @ r[lag:]) / r.size for lag in range(4)]
    if not (g[1] > 0 and g[2] > 0):
        return None
    phi = min(max((g[2] + g[3]) / (g[1] + g[2]), 0.0), RHO_MAX)
    dt = float(np.median(np.diff(tb)))
    if phi <= 0 or not dt > 0:
        return None
    var_w = min(g[1] / phi, g[0])
    return g[0] - var_w, var_w, phi, dt


def wander_inflation(t_base: np.ndarray, resid_base: np.ndarray) -> float:
    """The long-run variance factor of that noise, (σ²_e + σ²_w·(1 + φ)/(1 − φ))/(σ²_e + σ²_w): what a slope over
    a window much longer than the wander's correlation sees (shorter windows see less: an upper bound)."""
    m = wander_model(t_base, resid_base)
    if m is None:
        return 1.0
    var_e, var_w, phi, _ = m
    return max((var_e + var_w * (1 + phi) / (1 - phi)) / (var_e + var_w), 1.0)


def wander_variance(t_base: np.ndarray, resid_base: np.ndarray, t_rows: np.ndarray, w: np.ndarray) -> float | None:
    """Var(w·T) under the baseline's white noise and wander (``wander_model``), rows at ``t_rows``.

    Between rows the wander's correlation is φ^(Δt/dt), so gaps (the baseline, then the window) count as they
    are. Exact for the estimator's own rows: a short window keeps more of a wander than its lag-1 correlation
    says. None: no wander model."""
    m = wander_model(t_base, resid_base)
    w = np.asarray(w, dtype=float)
    if m is None or w.size == 0:
        return None
    var_e, var_w, phi, dt = m
    # on the baseline's sample grid (gaps as zeros): s_i = Σ_{j<i} w_j·φ^(i−j) = φ·(s_{i−1} + w_{i−1})
    idx = np.rint((np.asarray(t_rows, dtype=float) - float(np.min(t_rows))) / dt).astype(np.int64)
    if idx.max() > 2_000_000:
        return None
    grid = np.zeros(int(idx.max()) + 1)
    np.add.at(grid, idx, w)
    s = lfilter([0.0, phi], [1.0, -phi], grid)
    ww = float(grid @ grid)
    return var_e * ww + var_w * (ww + 2.0 * float(grid @ s))


@dataclass(frozen=True)
class LineFit:
    """y = slope·x + intercept by least squares; standard uncertainties inflated for correlated residuals."""

    slope: float
    intercept: float
    slope_u: float
    intercept_u: float
    cov_slope_intercept: float
    resid_rms: float
    rho1: float
    n: int
    x_mean: float

    @property
    def n_eff(self) -> float:
        return self.n / ar1_inflation(self.rho1)


def fit_line(x: np.ndarray, y: np.ndarray) -> LineFit:
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    n = x.size
    if n < 3:
        raise ValueError("a line fit needs at least 3 points")
    xm = float(x.mean())
    dx = x - xm
    sxx = float(dx @ dx)
    if sxx <= 0:
        raise ValueError("a line fit needs more than one distinct x")
    slope = float(dx @ (y - y.mean())) / sxx
    intercept = float(y.mean()) - slope * xm
    resid = y - (slope * x + intercept)
    sse = float(resid @ resid)
    s2 = sse / (n - 2)
    rho = lag1_autocorrelation(resid)
    infl = ar1_inflation(rho)
    var_s = s2 / sxx * infl
    var_i = s2 * (1.0 / n + xm * xm / sxx) * infl
    cov = -xm * s2 / sxx * infl
    return LineFit(slope, intercept, math.sqrt(var_s), math.sqrt(var_i), cov, math.sqrt(sse / n), rho, n, xm)


def quadratic_curvature(x: np.ndarray, y: np.ndarray) -> tuple[float, float, float]:
    """Fit y = c0 + c1·x + c2·x²; return (relative slope change across the x range, its z-score, c1).

    The relative change 2·c2·(x_max − x_min)/slope says how much the local slope drifts across the window; the
    z-score (with the AR(1) inflation) says whether that drift is more than noise.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if x.size < 6:
        return 0.0, 0.0, math.nan
    # normal equations on centred, scaled x: no n×3 design matrix (a long record would hold hundreds of MB)
    xm = float(x.mean())
    scale = float(np.max(np.abs(x - xm))) or 1.0
    xs = (x - xm) / scale
    x2 = xs * xs
    m = [float(v) for v in (xs.size, xs.sum(), x2.sum(), x2 @ xs, x2 @ x2)]
    ata = np.array([[m[0], m[1], m[2]], [m[1], m[2], m[3]], [m[2], m[3], m[4]]])
    atb = np.array([float(y.sum()), float(xs @ y), float(x2 @ y)])
    try:
        inv = np.linalg.inv(ata)
    except np.linalg.LinAlgError:
        return 0.0, 0.0, math.nan
    c0, c1s, c2s = inv @ atb
    resid = y - (c0 + c1s * xs + c2s * x2)
    s2 = float(resid @ resid) / max(x.size - 3, 1)
    var_c2s = inv[2, 2] * s2 * ar1_inflation(lag1_autocorrelation(resid))
    c1, c2 = float(c1s) / scale, float(c2s) / scale**2
    span = float(xs.max() - xs.min()) * scale
    rel = 2.0 * c2 * span / c1 if c1 != 0 else math.inf
    z = abs(float(c2s)) / math.sqrt(var_c2s) if var_c2s > 0 else math.inf
    return rel, z, c1
