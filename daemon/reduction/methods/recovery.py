"""The recovery after switch-off, alone (through the origin) and jointly with the heating window (one k).

The recovery window is where the probe model (or the line's intercept α) predicts the recovery's line to hold;
see ``cooling`` and METHODS.md, "Recovery".
"""

from __future__ import annotations

import numpy as np

from .. import window as win
from ..cooling import CoolingFit, RecoveryWindow, choose_recovery_window, fit_recovery, recovery_candidates
from ..driftfit import DriftFit, fit_with_drift
from ..record import SensorRecord
from ..superposition import compress_steps
from .base import Estimate, Found, MethodResult, Options
from .stepmodels import step_models, window_u


def heating_reference(found: Found) -> MethodResult | None:
    """The heating result the recovery is read against: the line when it worked, else the probe model."""
    return found.converged("line") or found.credible("model")


class RecoveryMethod:
    """Heater sensor, heater switched off: ΔT = X/(4πk) through the origin on the recovery window, level and
    drift as the baseline gave them (``cooling.fit_recovery``; the joint fit is where the recovery pins the
    drift)."""

    name = "recovery"

    def fit(self, rec: SensorRecord, opts: Options, found: Found) -> MethodResult | None:
        run, g = rec.run, rec.geometry
        ref = heating_reference(found)
        if run.t_off is None or not g.on_heater or ref is None or ref.window_s is None:
            return None
        t, t_off = run.t, run.t_off
        after = np.nonzero((t > t_off) & (run.q > 0))[0]
        t_last = float(t[after[0] - 1]) if after.size else float(t[-1])
        cand = recovery_candidates(t, run.Q, t_off, t_last)
        # without a baseline the zero of ΔT is unknown: keep a free offset, judge the slope
        free = not rec.baseline.present
        try:
            cw = _recovery_window(rec, t[cand], ref.window_s[0], step_models(rec, found), free)
            fit = fit_recovery(t, rec.dT, run.X, run.Q, cw.t_start, cw.t_end, rec.baseline.rate_u_K_per_s,
                               free_offset=free, level_u_K=rec.baseline.offset_u_K, window_u_rel=cw.window_u_rel)
        except ValueError as e:
            notes = [f"recovery not analysed: {e}"] if np.count_nonzero(t > t_off) > 0 else []
            return MethodResult(self.name, None, converged=False, why=str(e), notes=notes)
        stat = fit.k_u_stat_W_per_mK / fit.k_W_per_mK  # noise, the baseline's slope and level carried through
        k = Estimate(fit.k_W_per_mK, {"statistical": stat, "window": fit.window_u_rel}, "recovery")
        return MethodResult(self.name, k, window_s=fit.window_s, residual_rms_K=fit.resid_rms_K, n_used=fit.n,
                            why=cw.reason, fit=fit)


class JointMethod:
    """Baseline, heating window and recovery window fitted together: one k, the drift pinned at both ends."""

    name = "joint"

    def fit(self, rec: SensorRecord, opts: Options, found: Found) -> MethodResult | None:
        recovery, ref = found.converged("recovery"), heating_reference(found)
        if recovery is None or ref is None or ref.window_s is None:
            return None
        run = rec.run
        t = run.t
        cw = recovery.fit
        heat = run.heat & (t >= ref.window_s[0]) & (t <= ref.window_s[1])
        cool = (t >= cw.window_s[0]) & (t <= cw.window_s[1]) & (run.Q == 0)
        try:
            df = fit_with_drift(t, rec.T, run.X, run.Q, base=t < 0, heat=heat, cool=cool,
                                drift_free=rec.baseline.present)
        except ValueError as e:
            return MethodResult(self.name, None, converged=False, why=str(e), notes=[f"recovery not analysed: {e}"])
        wu = window_u(rec, df, step_models(rec, found)[:1])
        wu = wu if wu is not None else cw.window_u_rel
        k = Estimate(df.k_W_per_mK, {"statistical": df.u_stat_rel, "drift": df.u_drift_rel, "window": wu},
                     "joint heating and recovery")
        fit = _cooling("joint", df, (float(df.t_rows[df.t_rows > 0][0]), float(df.t_rows[-1])), wu,
                       cw.free_offset)
        return MethodResult(self.name, k, window_s=fit.window_s, residual_rms_K=df.resid_rms_K, n_used=df.n,
                            fit=fit, drift=df)


def _cooling(kind: str, df: DriftFit, window: tuple[float, float], window_u: float, free: bool) -> CoolingFit:
    """The fit in the shape plots and reports read (``cooling.CoolingFit``)."""
    return CoolingFit(kind, df.k_W_per_mK, df.k_W_per_mK * df.u_rel, window, df.n, df.resid_rms_K, df.rho1,
                      window_u, free)


def _recovery_window(rec: SensorRecord, t_rec: np.ndarray, heat_start: float, step_models: list[win.StepModel],
                     free: bool) -> RecoveryWindow:
    """The recovery window from the first step model that gives one (see ``cooling.choose_recovery_window``)."""
    run = rec.run
    t_off = run.t_off
    assert t_off is not None
    if not step_models or t_rec.size == 0:
        return choose_recovery_window(t_rec, None, t_off, heat_start)
    keep = run.steps_t <= t_off
    st, sdq = compress_steps(run.steps_t[keep], run.steps_dq[keep])
    failed: list[ValueError] = []
    for m in step_models:
        level_err, slope_err = win.recovery_errors(t_rec, st, sdq, m)
        try:
            return choose_recovery_window(t_rec, slope_err if free else level_err, t_off, heat_start)
        except ValueError as e:
            failed.append(e)
    raise failed[0]
