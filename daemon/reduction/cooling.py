"""Recovery (cooling) analysis, alone and jointly with the heating.

After the heater goes off at t_h the late-time superposition gives ΔT ≈ q/(4πk)·ln(t/(t − t_h)) (Carslaw &
Jaeger 1959 §10.4; ASTM D5334 uses the recovery to reduce drift effects). With the measured power steps this is
ΔT = X/(4πk) with X = Σ Δq_j·ln(t − t_j): the constant term of the heating (probe radius, contact) cancels.
The recovery fit keeps a free offset, so a residual baseline error does not bias its slope.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .stats import ar1_inflation, fit_line, lag1_autocorrelation


@dataclass(frozen=True)
class CoolingFit:
    kind: str                      # "recovery" or "joint"
    k_W_per_mK: float
    k_u_stat_W_per_mK: float
    window_s: tuple[float, float]
    n: int
    resid_rms_K: float
    rho1: float

    def to_dict(self) -> dict[str, object]:
        return {"kind": self.kind, "k_W_per_mK": self.k_W_per_mK, "k_u_W_per_mK": self.k_u_stat_W_per_mK,
                "window_s": list(self.window_s), "n": self.n, "residual_rms_K": self.resid_rms_K}


def recovery_window(t_off: float, heat_start_s: float, t_last: float, t_axial_s: float = math.inf
                    ) -> tuple[float, float]:
    """From t_h plus the heating window's start (the early recovery mirrors the early heating) to the end of the
    record, at most 3·t_h and not past the axial-loss limit."""
    return t_off + heat_start_s, min(t_last, 3.0 * t_off, max(t_axial_s, t_off + 2 * heat_start_s))


def fit_recovery(t: np.ndarray, dT: np.ndarray, X: np.ndarray, Q: np.ndarray, t0: float, t1: float,
                 drift_rate_u_K_per_s: float = 0.0) -> CoolingFit:
    """ΔT = X/(4πk) + c over recovery samples (heater off, Q = 0) with t0 <= t <= t1.

    The uncertainty includes the baseline-slope uncertainty carried through: δ·cov(t, X)/var(X) on the slope.
    """
    sel = (t >= t0) & (t <= t1) & (Q == 0)
    if np.count_nonzero(sel) < 5:
        raise ValueError("fewer than 5 recovery samples in the window")
    lf = fit_line(X[sel], dT[sel])
    if lf.slope <= 0:
        raise ValueError("the recovery does not decay as the line-source model says")
    k = 1.0 / (4.0 * math.pi * lf.slope)
    ts = t[sel]
    dx = X[sel] - X[sel].mean()
    drift_u = abs(drift_rate_u_K_per_s * float(dx @ ts) / float(dx @ dx))
    return CoolingFit("recovery", k, k * math.hypot(lf.slope_u, drift_u) / lf.slope,
                      (float(ts[0]), float(ts[-1])), int(ts.size), lf.resid_rms, lf.rho1)


def fit_joint(t: np.ndarray, dT: np.ndarray, X: np.ndarray, Q: np.ndarray, heat_window: tuple[float, float],
              cool_window: tuple[float, float], drift_rate_u_K_per_s: float = 0.0) -> CoolingFit:
    """ΔT = X/(4πk) + b·Q over the heating window and the recovery window together (one k)."""
    sel = (((t >= heat_window[0]) & (t <= heat_window[1]) & (Q > 0))
           | ((t >= cool_window[0]) & (t <= cool_window[1]) & (Q == 0)))
    if np.count_nonzero(sel) < 8:
        raise ValueError("too few samples for a joint heating and recovery fit")
    A = np.column_stack([X[sel], Q[sel]])
    coef, *_ = np.linalg.lstsq(A, dT[sel], rcond=None)
    resid = dT[sel] - A @ coef
    n = resid.size
    s2 = float(resid @ resid) / (n - 2)
    rho = lag1_autocorrelation(resid)
    AtA_inv = np.linalg.inv(A.T @ A)
    cov = AtA_inv * s2 * ar1_inflation(rho)
    a = float(coef[0])
    drift_u = abs(drift_rate_u_K_per_s * float((AtA_inv @ A.T @ t[sel])[0]))
    if a <= 0:
        raise ValueError("joint fit found no heating signal")
    k = 1.0 / (4.0 * math.pi * a)
    ts = t[sel]
    return CoolingFit("joint", k, k * math.hypot(math.sqrt(cov[0, 0]), drift_u) / a, (float(ts[0]), float(ts[-1])), n,
                      math.sqrt(float(resid @ resid) / n), rho)
