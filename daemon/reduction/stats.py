"""Statistics shared by every fit: correlated-residual inflation, straight-line fits with covariance."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

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
    xc = x - x.mean()
    A = np.column_stack([np.ones_like(xc), xc, xc * xc])
    coef, *_ = np.linalg.lstsq(A, y, rcond=None)
    resid = y - A @ coef
    s2 = float(resid @ resid) / max(x.size - 3, 1)
    try:
        cov = np.linalg.inv(A.T @ A) * s2 * ar1_inflation(lag1_autocorrelation(resid))
    except np.linalg.LinAlgError:
        return 0.0, 0.0, math.nan
    c1, c2 = float(coef[1]), float(coef[2])
    span = float(xc.max() - xc.min())
    rel = 2.0 * c2 * span / c1 if c1 != 0 else math.inf
    z = abs(c2) / math.sqrt(cov[2, 2]) if cov[2, 2] > 0 else math.inf
    return rel, z, c1
