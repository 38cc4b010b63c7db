"""Background drift from the baseline recorded before the heater came on.

The ground rarely sits still: a straight line through the baseline is extrapolated over the run and
subtracted. A baseline that is curved (still settling after insertion) or drifts fast compared with the rise
cannot be extrapolated honestly, and is flagged.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .stats import ar1_inflation, lag1_autocorrelation, wander_variance

MIN_BASELINE_SAMPLES = 5
# Thresholds below are common practice, no source: a drift is worth reporting when its extrapolation over the
# heating changes the rise by more than 1 %, and the baseline is "not settled" beyond 10 %, or when a curved
# baseline would move the extrapolated value by more than 2 % of the rise.
DRIFT_FLAG_FRACTION = 0.01
NOT_SETTLED_FRACTION = 0.10
CURVATURE_FRACTION = 0.02
# A fitted slope is removed only when it stands out of the noise (|b| > 3u): extrapolating a slope
# that is mostly noise over a heating several times longer than the baseline adds more error than it removes.
# Either way its uncertainty stays in the budget.
REMOVE_Z = 3.0


@dataclass(frozen=True)
class Baseline:
    """T(t) = offset_C + rate_K_per_s·t for t < 0, with what is known about how well that describes it."""

    offset_C: float
    rate_K_per_s: float
    rate_u_K_per_s: float
    n: int
    span_s: float
    resid_rms_K: float
    quad_K_per_s2: float = 0.0
    quad_z: float = 0.0
    fitted_rate_K_per_s: float | None = None  # the slope found, whether or not it was removed
    offset_u_K: float = 0.0  # standard uncertainty of the level at t = 0 (what a fit through ΔT = 0 relies on)
    fitted_rate_u_K_per_s: float = 0.0  # the fitted slope's own standard uncertainty (noise, AR(1)-inflated)

    @property
    def present(self) -> bool:
        return self.n > 0

    def at(self, t: np.ndarray | float) -> np.ndarray:
        return self.offset_C + self.rate_K_per_s * np.asarray(t, dtype=float)

    def flags(self, rise_K: float, heat_s: float) -> list[str]:
        """Quality flags for this baseline against a rise of ``rise_K`` over ``heat_s`` seconds of heating."""
        if not self.present:
            return ["no_baseline"]
        out: list[str] = []
        rise = max(abs(rise_K), 1e-9)
        drift_K = abs(self.rate_K_per_s) * heat_s
        significant = abs(self.rate_K_per_s) > 3.0 * self.rate_u_K_per_s
        if significant and drift_K > DRIFT_FLAG_FRACTION * rise:
            out.append("drift")
        curved_K = abs(self.quad_K_per_s2) * heat_s**2
        if (self.n < MIN_BASELINE_SAMPLES or drift_K > NOT_SETTLED_FRACTION * rise
                or (self.quad_z > 3.0 and curved_K > CURVATURE_FRACTION * rise)):
            out.append("not_settled")
        return out

    def to_dict(self) -> dict[str, float | int | None]:
        fitted = self.rate_K_per_s if self.fitted_rate_K_per_s is None else self.fitted_rate_K_per_s
        return {"offset_C": self.offset_C if self.present else None,
                "rate_K_per_h": fitted * 3600.0 if self.present else None,
                "removed": bool(self.present and self.rate_K_per_s != 0.0),
                "rate_u_K_per_h": self.rate_u_K_per_s * 3600.0 if self.present else None,
                "n": self.n, "span_s": self.span_s, "resid_rms_K": self.resid_rms_K}


def no_baseline(first_temp_C: float) -> Baseline:
    """Stand-in when no baseline was recorded: the first heating sample's temperature, no drift (flagged)."""
    return Baseline(first_temp_C, 0.0, 0.0, 0, 0.0, 0.0)


def fit_baseline(t: np.ndarray, temp_C: np.ndarray) -> Baseline:
    """Straight line through the baseline samples (t < 0), with a quadratic term tested for settling."""
    t = np.asarray(t, dtype=float)
    y = np.asarray(temp_C, dtype=float)
    n = t.size
    if n == 0:
        raise ValueError("no baseline samples")
    if n == 1 or float(t.max() - t.min()) <= 0:
        return Baseline(float(y.mean()), 0.0, 0.0, n, 0.0, 0.0)
    A = np.column_stack([np.ones(n), t])
    coef, *_ = np.linalg.lstsq(A, y, rcond=None)
    resid = y - A @ coef
    s2 = float(resid @ resid) / max(n - 2, 1)
    infl = ar1_inflation(lag1_autocorrelation(resid))
    cov = np.linalg.inv(A.T @ A) * s2 * infl
    wander = wander_variance(t, resid, t, np.linalg.pinv(A)[1])  # a slow wander moves the rate more than lag 1 says
    if wander is not None:
        cov[1, 1] = max(float(cov[1, 1]), wander)
    quad, quad_z = 0.0, 0.0
    if n >= 8:
        tc = t / max(abs(float(t.min())), 1e-9)
        Aq = np.column_stack([np.ones(n), tc, tc * tc])
        cq, *_ = np.linalg.lstsq(Aq, y, rcond=None)
        rq = y - Aq @ cq
        s2q = float(rq @ rq) / max(n - 3, 1)
        covq = np.linalg.inv(Aq.T @ Aq) * s2q * ar1_inflation(lag1_autocorrelation(rq))
        scale = max(abs(float(t.min())), 1e-9)
        quad = float(cq[2]) / scale**2
        quad_z = abs(float(cq[2])) / math.sqrt(covq[2, 2]) if covq[2, 2] > 0 else math.inf
    rate, rate_u = float(coef[1]), math.sqrt(max(cov[1, 1], 0.0))
    offset, offset_u = float(coef[0]), math.sqrt(max(cov[0, 0], 0.0))
    if abs(rate) <= REMOVE_Z * rate_u:
        # level, not an extrapolated line; the slope left in is as uncertain as the slope found plus its noise
        offset, applied, applied_u = float(y.mean()), 0.0, math.hypot(rate, rate_u)
        r0 = y - offset
        offset_u = math.sqrt(float(r0 @ r0) / (n - 1) / n * ar1_inflation(lag1_autocorrelation(r0)))
    else:
        applied, applied_u = rate, rate_u
    return Baseline(offset, applied, applied_u, n, float(t.max() - t.min()), math.sqrt(float(resid @ resid) / n),
                    quad, quad_z, fitted_rate_K_per_s=rate, offset_u_K=offset_u, fitted_rate_u_K_per_s=rate_u)
