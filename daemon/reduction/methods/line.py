"""The late-time line: k from the slope of ΔT against the superposed ln t on the automatic (or given) window."""

from __future__ import annotations

from ..linesource import LateTimeFit, choose_window, fit_window
from ..live import NOISE_HIGH_FRACTION
from ..record import SensorRecord
from .base import Estimate, Found, MethodResult, Options

INTERCEPT_MODEL_REL = 0.5  # the intercept also holds 2h and the probe's heat capacity (METHODS.md)


def preliminary_line(rec: SensorRecord) -> tuple[LateTimeFit | None, str | None]:
    """The line on the automatic window without any model's hints: starting values for the model fits."""
    g = rec.geometry
    try:
        pc = choose_window(rec.th, rec.u, rec.y, rec.Qh, r_m=g.line_radius_m, probe_C_J_per_m3K=g.probe_C_J_per_m3K,
                           length_m=g.length_m, axial_m=g.axial_m)
        return fit_window(rec.th, rec.u, rec.y, rec.Qh, pc.t_start, pc.t_end, g.line_radius_m,
                          g.sensor_radius_u_m), None
    except ValueError as e:
        return None, f"preliminary line fit failed: {e}"


class LineMethod:
    name = "line"

    def fit(self, rec: SensorRecord, opts: Options, found: Found) -> MethodResult:
        g = rec.geometry
        th, u, y, Qh = rec.th, rec.u, rec.y, rec.Qh
        drift_u = rec.baseline.rate_u_K_per_s
        model = found.converged("model") if g.on_heater else None
        hint = model.fit if model is not None else None
        try:
            if opts.window_s is not None:
                lf = fit_window(th, u, y, Qh, opts.window_s[0], min(opts.window_s[1], float(th[-1])),
                                g.line_radius_m, g.sensor_radius_u_m, drift_u)
                why = "window given"
            else:
                wc = choose_window(th, u, y, Qh, r_m=g.line_radius_m, probe_C_J_per_m3K=g.probe_C_J_per_m3K,
                                   length_m=g.length_m, axial_m=g.axial_m,
                                   alpha_hint=hint.alpha_m2_per_s if hint else None,
                                   h_hint=hint.h if hint else 0.0, k_hint=hint.k_W_per_mK if hint else None)
                lf = fit_window(th, u, y, Qh, wc.t_start, wc.t_end, g.line_radius_m, g.sensor_radius_u_m, drift_u)
                why = wc.reason
        except ValueError as e:
            return MethodResult(self.name, None, converged=False, why=str(e), notes=[f"line fit failed: {e}"])
        flags = []
        if lf.short:
            flags.append("window_short")
        if lf.trend:
            flags.append("residual_trend")
        if lf.resid_rms_K > NOISE_HIGH_FRACTION * lf.slope_K:
            flags.append("noise_high")
        k = Estimate(lf.k_W_per_mK, {"statistical": lf.k_u_stat_W_per_mK / lf.k_W_per_mK, "drift": lf.drift_u_rel},
                     "late-time line")
        alpha = None
        if lf.alpha_m2_per_s is not None:
            alpha = Estimate(lf.alpha_m2_per_s, {"intercept": lf.alpha_u_rel or 0.0, "model": INTERCEPT_MODEL_REL},
                             "time-axis intercept")
        return MethodResult(self.name, k, alpha, window_s=lf.window_s, residual_rms_K=lf.resid_rms_K, n_used=lf.n,
                            q_mean_W_per_m=lf.q_mean_W_per_m, why=why, flags=flags, fit=lf)
