"""The late-time line: k from the slope of ΔT against the superposed ln t on the automatic (or given) window."""

from __future__ import annotations

import numpy as np

from ..driftfit import DriftFit, fit_with_drift
from ..linesource import FLOOR_FRACTION, MIN_POINTS, LateTimeFit, choose_window, fit_window
from ..live import NOISE_HIGH_FRACTION
from ..record import SensorRecord
from ..timezero import rectangular_u
from .base import Estimate, Found, MethodResult, Options
from .stepmodels import plausible_models, window_u


def preliminary_line(rec: SensorRecord) -> tuple[LateTimeFit | None, str | None]:
    """The line on the automatic window without any model's hints: starting values for the model fits."""
    g = rec.geometry
    try:
        pc = choose_window(rec.th, rec.u, rec.y, rec.Qh, r_m=g.line_radius_m, probe_C_J_per_m3K=g.probe_C_J_per_m3K,
                           length_m=g.length_m, axial_m=g.axial_m, sample_radius_m=g.sample_radius_m)
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
        model = found.credible("model") if g.on_heater and opts.method != "line" else None
        hint = model.fit if model is not None else None
        why = too_short(rec) if opts.window_s is None else None
        if why is not None:
            return MethodResult(self.name, None, converged=False, why=why, notes=[f"no late-time line: {why}"])
        try:
            if opts.window_s is not None:
                lf = fit_window(th, u, y, Qh, opts.window_s[0], min(opts.window_s[1], float(th[-1])),
                                g.line_radius_m, g.sensor_radius_u_m, drift_u)
                why = "window given"
            else:
                wc = choose_window(th, u, y, Qh, r_m=g.line_radius_m, probe_C_J_per_m3K=g.probe_C_J_per_m3K,
                                   length_m=g.length_m, axial_m=g.axial_m,
                                   alpha_hint=hint.alpha_m2_per_s if hint else None,
                                   h_hint=hint.h if hint else 0.0, k_hint=hint.k_W_per_mK if hint else None,
                                   sample_radius_m=g.sample_radius_m)
                lf = fit_window(th, u, y, Qh, wc.t_start, wc.t_end, g.line_radius_m, g.sensor_radius_u_m, drift_u)
                why = wc.reason
        except ValueError as e:
            if g.sample_radius_m and opts.window_s is None:
                e = ValueError(f"{e}; the sample's outer face (R = {g.sample_radius_m * 1e3:.3g} mm) may bend the "
                               "line before the probe's own transient has passed: use a wider sample")
            return MethodResult(self.name, None, converged=False, why=str(e), notes=[f"line fit failed: {e}"])
        try:
            df = line_drift_fit(rec, lf.window_s)
        except ValueError as e:
            return MethodResult(self.name, None, converged=False, why=str(e), notes=[f"line fit failed: {e}"])
        flags = []
        if lf.short:
            flags.append("window_short")
        if lf.trend:
            flags.append("residual_trend")
        if "outer face" in why:
            flags.append("sample_wall")
        if lf.resid_rms_K > NOISE_HIGH_FRACTION * lf.slope_K:
            flags.append("noise_high")
        budget = {"statistical": df.u_stat_rel, "drift": df.u_drift_rel}
        if g.on_heater:
            budget["window"] = window_u(rec, df, plausible_models(rec, found, lf)) or 0.0
        if rec.time_zero is not None and rec.run.shift_s != 0.0:
            budget["time_zero"] = _time_zero_term(rec, lf)
        k = Estimate(df.k_W_per_mK, budget, "late-time line")
        # the intercept gives α·e^{2h} (contact and the probe's own resistance), not α: no α from the line
        return MethodResult(self.name, k, None, window_s=lf.window_s, residual_rms_K=lf.resid_rms_K, n_used=lf.n,
                            q_mean_W_per_m=lf.q_mean_W_per_m, why=why, flags=flags, fit=lf, drift=df)


def widest_window_n(rec: SensorRecord) -> int:
    """Heating samples in the widest window the rule allows, the last decade [0.1·t_h, t_h]."""
    th = rec.th
    return int(np.count_nonzero(th >= FLOOR_FRACTION * float(th[-1])))


# A heating shorter than this, with fewer than MIN_POINTS samples in its last decade, is a pulse, not a line
# (common practice, no source: the shortest needle heatings in use are about a minute; a pulse lasts seconds).
PULSE_MAX_S = 30.0
# Below this many samples in the last decade no line is fitted however long the heating (three parameters with
# the drift, and the residual-trend test needs a third of the window at each end: common practice, no source).
FEWEST_POINTS = 8


def too_short(rec: SensorRecord) -> str | None:
    """Why the heating gives no late-time line, or None when it may.

    A heat pulse read at its own heater (seconds long) has not left the probe's transient: the slope is the
    needle's, not the ground's (reference records: a dual needle's 8 s pulse read on the heater gave k from −5 %
    to +22 %). A long heating logged sparsely (600 s every 30 s: 19 samples in its last decade) is a line: it is
    read, with ``window_short`` set; only below ``FEWEST_POINTS`` is there too little to fit.
    """
    n, th = widest_window_n(rec), float(rec.th[-1])
    span = f"{FLOOR_FRACTION * th:.3g}–{th:.3g} s"
    if n < FEWEST_POINTS:
        return (f"only {n} samples in the heating's last decade ({span}; a line needs {FEWEST_POINTS}): "
                "log faster")
    if n < MIN_POINTS and th < PULSE_MAX_S:
        return (f"a {th:.3g} s heating is a pulse, not a line: {n} samples in the heating's last decade ({span}); "
                f"a line needs {PULSE_MAX_S:.0f} s of heating or {MIN_POINTS} samples: heat longer, or log faster")
    return None


def line_drift_fit(rec: SensorRecord, window_s: tuple[float, float]) -> DriftFit:
    """Baseline and heating window together, the drift as the baseline gave it (the joint fit is where the
    recovery pins it)."""
    run = rec.run
    t = run.t
    heat = run.heat & (t >= window_s[0]) & (t <= window_s[1])
    return fit_with_drift(t, rec.T, run.X, run.Q, base=t < 0, heat=heat, cool=np.zeros(t.size, dtype=bool),
                          drift_free=False, fixed_drift=baseline_drift(rec))


def baseline_drift(rec: SensorRecord) -> tuple[float, float]:
    """The drift as the baseline alone knows it: the rate removed and its standard uncertainty (the slope's
    size when it was not removed: see ``drift``)."""
    return rec.baseline.rate_K_per_s, rec.baseline.rate_u_K_per_s


def _time_zero_term(rec: SensorRecord, lf: LateTimeFit) -> float:
    """The line's k with the switch-on at either end of the time-zero bound, as a rectangular distribution."""
    tz = rec.time_zero
    assert tz is not None
    k_shifted = []
    for shift in (tz.lo_s, tz.hi_s):
        r = rec.shifted(shift)
        try:
            k_shifted.append(fit_window(r.th, r.u, r.y, r.Qh, *lf.window_s).k_W_per_mK)
        except ValueError:
            return 0.0
    return rectangular_u(k_shifted[0], k_shifted[1]) / lf.k_W_per_mK
