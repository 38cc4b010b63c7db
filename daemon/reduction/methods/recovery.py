"""The recovery after switch-off, alone (through the origin) and jointly with the heating window (one k).

The recovery window is where the probe model (or the line's intercept α) predicts the recovery's line to hold;
see ``cooling`` and METHODS.md, "Recovery".
"""

from __future__ import annotations

import numpy as np

from .. import window as win
from ..cooling import RecoveryWindow, choose_recovery_window, fit_joint, fit_recovery, recovery_candidates
from ..linesource import ALPHA_MAX, ALPHA_MIN
from ..record import SensorRecord
from ..superposition import compress_steps
from .base import Estimate, Found, MethodResult, Options

MODEL_LINE_REL = 0.03  # model and line k differ by more than this: the line's α is tried as well (no source)


def heating_reference(found: Found) -> MethodResult | None:
    """The heating result the recovery is read against: the line when it worked, else the probe model."""
    return found.converged("line") or found.converged("model")


class RecoveryMethod:
    """Heater sensor, heater switched off: ΔT = X/(4πk) through the origin on the recovery window."""

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
            cw = _recovery_window(rec, t[cand], ref.window_s[0], found, free)
            fit = fit_recovery(t, rec.dT, run.X, run.Q, cw.t_start, cw.t_end, rec.baseline.rate_u_K_per_s,
                               free_offset=free, level_u_K=rec.baseline.offset_u_K, window_u_rel=cw.window_u_rel)
        except ValueError as e:
            notes = [f"recovery not analysed: {e}"] if np.count_nonzero(t > t_off) > 0 else []
            return MethodResult(self.name, None, converged=False, why=str(e), notes=notes)
        k = Estimate(fit.k_W_per_mK, {"statistical": fit.k_u_stat_W_per_mK / fit.k_W_per_mK,
                                      "window": fit.window_u_rel}, "recovery")
        return MethodResult(self.name, k, window_s=fit.window_s, residual_rms_K=fit.resid_rms_K, n_used=fit.n,
                            why=cw.reason, fit=fit)


class JointMethod:
    """Heating window and recovery window fitted together with one k."""

    name = "joint"

    def fit(self, rec: SensorRecord, opts: Options, found: Found) -> MethodResult | None:
        recovery, ref = found.converged("recovery"), heating_reference(found)
        if recovery is None or ref is None or ref.window_s is None:
            return None
        run = rec.run
        cw = recovery.fit
        try:
            fit = fit_joint(run.t, rec.dT, run.X, run.Q, ref.window_s, cw.window_s, rec.baseline.rate_u_K_per_s,
                            free_offset=cw.free_offset, level_u_K=rec.baseline.offset_u_K,
                            window_u_rel=cw.window_u_rel)
        except ValueError as e:
            return MethodResult(self.name, None, converged=False, why=str(e), notes=[f"recovery not analysed: {e}"])
        k = Estimate(fit.k_W_per_mK, {"statistical": fit.k_u_stat_W_per_mK / fit.k_W_per_mK,
                                      "window": fit.window_u_rel}, "joint heating and recovery")
        return MethodResult(self.name, k, window_s=fit.window_s, residual_rms_K=fit.resid_rms_K, n_used=fit.n,
                            fit=fit)


def _recovery_window(rec: SensorRecord, t_rec: np.ndarray, heat_start: float, found: Found,
                     free: bool) -> RecoveryWindow:
    """The recovery window from the first step model that gives one (see ``cooling.choose_recovery_window``)."""
    run = rec.run
    t_off = run.t_off
    assert t_off is not None
    step_models = _step_models(rec, found)
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


def _step_models(rec: SensorRecord, found: Found) -> list[win.StepModel]:
    """Probe and medium for the recovery window, from the same sources as the heating window's rule, in order.

    The probe-model fit when it converged (α, h; α_J from its k/α). The line's intercept α with h = 0 when there
    is no model, or as a second choice when the model and the line disagree by more than 3 %: a heating the two
    read differently (a power log that was wrong for a while) can leave the model an α far off, and the recovery
    is what should show the disagreement. A Blackwell cylinder when the probe's heat capacity is known, an ideal
    line at the radius otherwise.
    """
    g = rec.geometry
    a_m, probe_C = g.probe_radius_m, g.probe_C_J_per_m3K
    if a_m is None:
        return []
    model, line = found.converged("model"), found.converged("line")
    sources: list[tuple[float, float, float]] = []
    if model is not None and model.fit.alpha_m2_per_s > 0:
        sources.append((model.fit.alpha_m2_per_s, model.fit.h, model.fit.k_W_per_mK))
    lf = line.fit if line is not None else None
    if lf is not None and lf.alpha_m2_per_s and (
            not sources or abs(sources[0][2] / lf.k_W_per_mK - 1) > MODEL_LINE_REL):
        sources.append((lf.alpha_m2_per_s, 0.0, lf.k_W_per_mK))
    out = []
    for alpha, h, k in sources:
        alpha = min(max(alpha, ALPHA_MIN), ALPHA_MAX)
        out.append(win.StepModel(alpha, a_m, 2.0 * (k / alpha) / probe_C if probe_C else None, h, g.length_m,
                                 g.axial_m))
    return out
