"""Recovery (cooling) analysis, alone and jointly with the heating.

After the heater goes off at t_h the late-time superposition gives ΔT ≈ q/(4πk)·ln(t/(t − t_h)) (Carslaw &
Jaeger 1959 §10.4; ASTM D5334 uses the recovery to reduce drift effects). With the measured power steps this is
ΔT = X/(4πk) with X = Σ Δq_j·ln(t − t_j): the constant term of the heating (probe radius, contact) cancels, so
the line goes through the origin and its level carries k. The fit keeps no offset when a baseline fixed the
zero of ΔT, and a free one when none was recorded (then only the shape of the recovery carries k).

Where that line holds is not where the heating's does: the recovery at t mixes the step response at t (axial
loss has had all of t to grow) and at t − t_h (probe heat capacity and contact still fading). The window is
where the probe model (``window.StepModel``) predicts the error to be small (METHODS.md, "Recovery").
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .data import contiguous
from .stats import ar1_inflation, fit_line, lag1_autocorrelation

RECOVERY_TOLS = (0.01, 0.02, 0.03, 0.05)  # predicted error allowed in the window, tried in turn (no source)
MIN_RECOVERY_SAMPLES = 20                 # as for the heating window's "short" (common practice, no source)
RECOVERY_END_FACTOR = 3.0                 # the recovery is not used past 3·t_h (common practice, no source)


@dataclass(frozen=True)
class CoolingFit:
    kind: str                      # "recovery" or "joint"
    k_W_per_mK: float
    k_u_stat_W_per_mK: float       # noise, baseline slope and level carried through
    window_s: tuple[float, float]  # recovery samples used (joint: first heating to last recovery sample)
    n: int
    resid_rms_K: float
    rho1: float
    window_u_rel: float = 0.0      # relative standard uncertainty of the window: predicted error max/√3
    free_offset: bool = False
    drift_coef_rel: float = 0.0    # relative change of k per K/s of error in the removed baseline slope (signed)

    @property
    def k_u_W_per_mK(self) -> float:
        """Standard uncertainty, statistical and window terms combined."""
        return math.hypot(self.k_u_stat_W_per_mK, self.k_W_per_mK * self.window_u_rel)

    def to_dict(self) -> dict[str, object]:
        return {"kind": self.kind, "k_W_per_mK": self.k_W_per_mK, "k_u_W_per_mK": self.k_u_W_per_mK,
                "k_u_stat_W_per_mK": self.k_u_stat_W_per_mK, "window_u_rel": self.window_u_rel,
                "window_s": list(self.window_s), "n": self.n, "residual_rms_K": self.resid_rms_K,
                "free_offset": self.free_offset}


@dataclass(frozen=True)
class RecoveryWindow:
    t_start: float
    t_end: float
    max_error_rel: float   # largest predicted |error| in the window (nan when no model was available)
    tol: float | None      # the tolerance it met (None: no model, fallback rule)
    reason: str

    @property
    def window_u_rel(self) -> float:
        """The predicted error as a rectangular distribution of half-width max|e|: u = max|e|/√3 (JCGM 100 §4.3.7)."""
        return self.max_error_rel / math.sqrt(3.0) if math.isfinite(self.max_error_rel) else 0.0


def recovery_candidates(t: np.ndarray, Q: np.ndarray, t_off: float, t_last: float) -> np.ndarray:
    """Recovery samples that may be used: heater off, after t_h, before the next heating and before 3·t_h."""
    return (t > t_off) & (Q == 0) & (t <= min(t_last, RECOVERY_END_FACTOR * t_off))


def choose_recovery_window(t_rec: np.ndarray, err_rel: np.ndarray | None, t_off: float,
                           heat_start_s: float) -> RecoveryWindow:
    """Where the recovery line is fitted (METHODS.md, "Recovery").

    The longest run of recovery samples whose predicted error ``err_rel`` (level error for a fit through the
    origin, slope error with a free offset) stays within the first tolerance of ``RECOVERY_TOLS`` that leaves
    ``MIN_RECOVERY_SAMPLES`` (or all samples, if fewer). Without a model (``err_rel`` None) the window starts
    the heating window's start after t_h and runs to the last candidate.
    Raises ValueError when no tolerance leaves enough samples.
    """
    t_rec = np.asarray(t_rec, dtype=float)
    if t_rec.size < 5:
        raise ValueError(f"only {t_rec.size} recovery samples; at least 5 are needed")
    if err_rel is None:
        sel = t_rec >= t_off + heat_start_s
        if np.count_nonzero(sel) < 5:
            raise ValueError("fewer than 5 recovery samples after the heating window's start")
        return RecoveryWindow(float(t_rec[sel][0]), float(t_rec[sel][-1]), math.nan, None,
                              "no probe or medium model: start t_h + heating start")
    err = np.abs(np.asarray(err_rel, dtype=float))
    need = max(min(MIN_RECOVERY_SAMPLES, t_rec.size), 5)
    for tol in RECOVERY_TOLS:
        i0, i1 = _longest_run(err <= tol)
        if i1 - i0 >= need:
            return RecoveryWindow(float(t_rec[i0]), float(t_rec[i1 - 1]), float(np.max(err[i0:i1])), tol,
                                  f"predicted error ≤ {100 * tol:.0f} % from t − t_h = {t_rec[i0] - t_off:.3g} s "
                                  f"to {t_rec[i1 - 1] - t_off:.3g} s")
    raise ValueError(f"no {need} recovery samples in a row are within {100 * RECOVERY_TOLS[-1]:.0f} % of the "
                     f"line-source recovery (best {100 * float(np.min(err)):.1f} %): probe heat capacity and "
                     "axial loss bend it everywhere; heat for less than the axial-loss time L²/(53α) or use a "
                     "longer probe")


def _longest_run(ok: np.ndarray) -> tuple[int, int]:
    """[i0, i1) of the longest run of True."""
    best, start, i0, i1 = 0, None, 0, 0
    for i, v in enumerate(np.append(ok, False)):
        if v and start is None:
            start = i
        elif not v and start is not None:
            if i - start > best:
                best, i0, i1 = i - start, start, i
            start = None
    return i0, i1


def fit_recovery(t: np.ndarray, dT: np.ndarray, X: np.ndarray, Q: np.ndarray, t0: float, t1: float,
                 drift_rate_u_K_per_s: float = 0.0, *, free_offset: bool = False, level_u_K: float = 0.0,
                 window_u_rel: float = 0.0) -> CoolingFit:
    """ΔT = X/(4πk) (+ c with ``free_offset``) over recovery samples (heater off, Q = 0) with t0 <= t <= t1.

    The uncertainty carries the baseline: a slope error δ tilts the fit by δ·(A⁺t) and, without an offset, a
    level error ``level_u_K`` shifts it by u·(A⁺1) (A the design matrix).
    """
    sel = (t >= t0) & (t <= t1) & (Q == 0)
    if np.count_nonzero(sel) < 5:
        raise ValueError("fewer than 5 recovery samples in the window")
    ts, xs, ys = t[sel], X[sel], dT[sel]
    if free_offset:
        lf = fit_line(xs, ys)
        slope, slope_u, rms, rho = lf.slope, lf.slope_u, lf.resid_rms, lf.rho1
        dx = xs - xs.mean()
        tilt = float(dx @ ts) / float(dx @ dx)   # slope change per K/s of drift
        level_u = 0.0
    else:
        sxx = float(xs @ xs)
        slope = float(xs @ ys) / sxx
        resid = ys - slope * xs
        rho = lag1_autocorrelation(resid)
        s2 = float(resid @ resid) / (xs.size - 1)
        slope_u = math.sqrt(s2 / sxx * ar1_inflation(rho))
        rms = math.sqrt(float(resid @ resid) / xs.size)
        tilt = float(xs @ ts) / sxx
        level_u = abs(level_u_K * float(xs.sum()) / sxx)
    if slope <= 0:
        raise ValueError("the recovery does not decay as the line-source model says")
    drift_u = abs(drift_rate_u_K_per_s * tilt)
    k = 1.0 / (4.0 * math.pi * slope)
    u = k * math.sqrt(slope_u**2 + drift_u**2 + level_u**2) / slope
    return CoolingFit("recovery", k, u, (float(ts[0]), float(ts[-1])), int(ts.size), rms, rho, window_u_rel,
                      free_offset, -tilt / slope)


def fit_joint(t: np.ndarray, dT: np.ndarray, X: np.ndarray, Q: np.ndarray, heat_window: tuple[float, float],
              cool_window: tuple[float, float], drift_rate_u_K_per_s: float = 0.0, *, free_offset: bool = False,
              level_u_K: float = 0.0, window_u_rel: float = 0.0) -> CoolingFit:
    """ΔT = X/(4πk) + b·Q (+ c in the recovery with ``free_offset``) over both windows together (one k).

    Solved by the normal equations summed over the two windows, each taken as a view where it is contiguous: a
    long record never holds a design matrix or copies of its columns.
    """
    parts = [(contiguous((t >= heat_window[0]) & (t <= heat_window[1]) & (Q > 0)), 0.0),
             (contiguous((t >= cool_window[0]) & (t <= cool_window[1]) & (Q == 0)), 1.0)]
    if any(t[sel].size < 3 for sel, _ in parts):
        raise ValueError("too few samples for a joint heating and recovery fit")
    p = 3 if free_offset else 2
    ata = np.zeros((3, 3))
    atb = np.zeros(3)
    sums = np.zeros(3)  # Σ of each column, and Σ column·t, for the baseline's level and slope errors
    tdot = np.zeros(3)
    for sel, off in parts:
        x, q, y, ts = X[sel], Q[sel], dT[sel], t[sel]
        cols = (x, q)
        for i, ci in enumerate(cols):
            for j, cj in enumerate(cols):
                ata[i, j] += float(ci @ cj)
            ata[i, 2] += off * float(ci.sum())
            ata[2, i] = ata[i, 2]
            atb[i] += float(ci @ y)
            sums[i] += float(ci.sum())
            tdot[i] += float(ci @ ts)
        ata[2, 2] += off * off * x.size
        atb[2] += off * float(y.sum())
        sums[2] += off * x.size
        tdot[2] += off * float(ts.sum())
    ata_inv = np.linalg.inv(ata[:p, :p])
    coef = np.zeros(3)
    coef[:p] = ata_inv @ atb[:p]
    resid = [dT[sel] - coef[0] * X[sel] - coef[1] * Q[sel] - coef[2] * off for sel, off in parts]
    n = sum(r.size for r in resid)
    sse = sum(float(r @ r) for r in resid)
    lag = sum(float(r[:-1] @ r[1:]) for r in resid) + float(resid[0][-1] * resid[1][0])
    rho = lag / sse if sse > 0 else 0.0
    s2 = sse / (n - p)
    cov = ata_inv * s2 * ar1_inflation(rho)
    a = float(coef[0])
    if a <= 0:
        raise ValueError("joint fit found no heating signal")
    w = ata_inv[0]
    tilt = float(w @ tdot[:p])
    drift_u = abs(drift_rate_u_K_per_s * tilt)
    # a baseline level error shifts every ΔT, heating and recovery alike
    level_u = 0.0 if free_offset else abs(level_u_K * float(w @ sums[:p]))
    k = 1.0 / (4.0 * math.pi * a)
    first = min(float(t[sel][0]) for sel, _ in parts)
    last = max(float(t[sel][-1]) for sel, _ in parts)
    return CoolingFit("joint", k, k * math.sqrt(cov[0, 0] + drift_u**2 + level_u**2) / a, (first, last), n,
                      math.sqrt(sse / n), rho, window_u_rel, free_offset, -tilt / a)
