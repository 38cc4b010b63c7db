"""Straight lines with the drift as a parameter: baseline, heating window and recovery window fitted together.

    T = T0 + b·t                    baseline rows (t < 0)
    T = T0 + b·t + a·X + c·Q        heating-window rows (the superposed late-time line, ``superposition``)
    T = T0 + b·t + a·X              recovery-window rows (Q = 0: the heating's constant terms cancel)

with a = 1/(4πk) (Carslaw & Jaeger 1959 §10.4 and its superposition). A baseline alone fixes the drift b only
as well as a few minutes of noise allow, and extrapolated over a long heating that is the largest term of the
budget; the ln t shape of the heating separates b from a a little, and the recovery, which returns towards the
baseline, pins it. The same fit with b held fixed gives the part of u(a) that is noise alone; the rest is the
drift's (``u_drift_rel``). Ordinary least squares with the AR(1)-inflated covariance of ``stats``.

A model error G in the rows (the departure of the real response from the late-time line, in units of a) moves
the fitted a by A⁺G: ``bias_rel`` gives the relative error of a, hence of k, that a predicted departure causes
(the drift column absorbs part of it, as it would in the data).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .stats import ar1_inflation, lag1_autocorrelation, wander_variance


@dataclass(frozen=True)
class DriftFit:
    k_W_per_mK: float
    u_stat_rel: float          # noise alone (b held at its estimate)
    u_drift_rel: float         # what the drift's freedom adds (0 when b is fixed)
    drift_K_per_s: float
    drift_u_K_per_s: float
    level_C: float
    n: int
    resid_rms_K: float
    rho1: float
    t_rows: np.ndarray         # times of the rows used, in order
    pinv_a: np.ndarray         # the row of A⁺ that gives a from the rows' temperatures
    drift_free: bool

    @property
    def u_rel(self) -> float:
        return math.hypot(self.u_stat_rel, self.u_drift_rel)

    @property
    def a(self) -> float:
        return 1.0 / (4.0 * math.pi * self.k_W_per_mK)

    def bias_rel(self, departure: np.ndarray) -> float:
        """Relative error of k when the rows carry ``departure`` (4πk·ΔT error per unit of q, i.e. in units of a
        per W/m: Σ Δq_j·G(t − t_j)); positive means k reads low."""
        return float(self.pinv_a @ departure)


def fit_with_drift(t: np.ndarray, T: np.ndarray, X: np.ndarray, Q: np.ndarray, *, base: np.ndarray,
                   heat: np.ndarray, cool: np.ndarray, drift_free: bool = True,
                   fixed_drift: tuple[float, float] = (0.0, 0.0)) -> DriftFit:
    """Fit the rows selected by the masks ``base``, ``heat`` and ``cool`` (see the module docstring).

    Without ``drift_free`` the drift is ``fixed_drift`` (rate, its
    standard uncertainty), taken out of T, and its uncertainty carried into k through the fit's sensitivity
    to it. Raises ValueError when the rows cannot give a positive a.
    """
    sel = base | heat | cool
    ts, Ts, Xs, Qs = t[sel], T[sel], X[sel], Q[sel]
    if not drift_free:
        Ts = Ts - fixed_drift[0] * ts
    cols = [np.ones(ts.size)] + ([ts] if drift_free else []) + [Xs]
    if np.any(heat):
        cols.append(np.where(heat[sel], Qs, 0.0))
    A = np.column_stack(cols)
    i_a = 2 if drift_free else 1
    if ts.size < A.shape[1] + 3:
        raise ValueError(f"only {ts.size} samples for a fit of {A.shape[1]} parameters")
    pinv = np.linalg.pinv(A)
    coef = pinv @ Ts
    resid = Ts - A @ coef
    n, p = ts.size, np.linalg.matrix_rank(A)
    s2 = float(resid @ resid) / max(n - p, 1)
    rho = lag1_autocorrelation(resid)
    infl = ar1_inflation(rho)
    b_rows = base[sel]
    cov = (pinv @ pinv.T) * s2 * infl
    a = float(coef[i_a])
    if not a > 0:
        raise ValueError("the temperature does not rise with the superposed ln t (no heating signal)")
    var_a = max(float(cov[i_a, i_a]), 0.0)
    if drift_free:
        Ac = np.delete(A, 1, axis=1)
        pc = np.linalg.pinv(Ac)
        var_cond = max(float((pc @ pc.T)[i_a - 1, i_a - 1]) * s2 * infl, 0.0)
        b, b_u = float(coef[1]), math.sqrt(max(float(cov[1, 1]), 0.0))
    else:  # an error δ in the fixed rate leaves δ·t in the rows: a moves by δ·(A⁺t)_a
        b, b_u = fixed_drift
        wander = wander_variance(ts[b_rows], resid[b_rows], ts, pinv[i_a]) if np.any(b_rows) else None
        var_a = max(var_a, wander or 0.0)  # a slow wander under white noise: the baseline shows it
        var_cond = var_a
        var_a = var_a + (float(pinv[i_a] @ ts) * b_u) ** 2
    k = 1.0 / (4.0 * math.pi * a)
    return DriftFit(k, math.sqrt(var_cond) / a, math.sqrt(max(var_a - var_cond, 0.0)) / a, b, b_u,
                    float(coef[0]), n, math.sqrt(float(resid @ resid) / n), rho, ts, pinv[i_a], drift_free)
