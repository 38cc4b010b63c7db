"""Radial sensor after a heat pulse: the pulse model fitted over rise, peak and decay (``reduction.pulse``).

Applies when the heater went off and the record goes on for at least as long again as the heating (there is a
decay to read). Its k, α and ρc each carry their own budget (spacing, power, baseline, needles, contact, finite
length, model form); the peak relations ride along as the cross-check that may flag it.
"""

from __future__ import annotations

import math

import numpy as np

from ...probe import ProbeProfile
from ..data import RunData
from ..live import DEFAULT_POWER_U_REL
from ..pulse import MODEL_U_REL, MODEL_U_REL_CALIBRATED, PulseFit, PulseFitError, fit_pulse
from ..pulse_model import PulseGeometry
from ..record import HeatingRecord, SensorRecord
from .base import Estimate, Found, MethodResult, Options

MIN_DECAY_SAMPLES = 10


def pulse_geometry(rec: SensorRecord) -> PulseGeometry | None:
    """The pulse model's geometry of a radial sensor, from the probe profile (None without one)."""
    g, probe = rec.geometry, rec.probe
    if probe is None or g.on_heater or not probe.has_sensor(rec.name):
        return None
    return PulseGeometry(spacing_m=g.sensor_radius_m, heater_radius_m=g.probe_radius_m or 0.0,
                         heater_C_J_per_m3K=g.probe_C_J_per_m3K, sensor_radius_m=probe.needle_radius_m(rec.name),
                         sensor_C_J_per_m3K=probe.needle_heat_capacity_J_per_m3K(rec.name), length_m=g.length_m,
                         axial_m=g.axial_m)


def model_u(rec: SensorRecord) -> dict[str, float]:
    """The pulse model's form error: smaller in ρc where the spacing was calibrated in a medium of known ρc."""
    return dict(MODEL_U_REL_CALIBRATED if rec.geometry.spacing_calibrated else MODEL_U_REL)


def is_pulse_record(rec: SensorRecord) -> bool:
    """The heater went off and the record runs on for at least the heating time and ten samples."""
    run = rec.run
    if run.t_off is None:
        return False
    after = run.t > run.t_off
    return bool(np.count_nonzero(after) >= MIN_DECAY_SAMPLES and run.t[-1] - run.t_off >= run.t_off)


class PulseMethod:
    name = "pulse"

    def fit(self, rec: SensorRecord, opts: Options, found: Found) -> MethodResult | None:
        if rec.geometry.on_heater or opts.method not in ("auto", "pulse"):
            return None
        if not is_pulse_record(rec):
            if opts.method != "pulse":
                return None
            return MethodResult(self.name, None, converged=False,
                                why="no decay to read: the heater must go off and the record run on for at least "
                                    f"the heating time and {MIN_DECAY_SAMPLES} samples")
        geo = pulse_geometry(rec) or PulseGeometry(rec.geometry.sensor_radius_m)
        b = rec.baseline
        try:
            fit = fit_pulse(rec.run.t, rec.dT, rec.run.steps_t, rec.run.steps_dq, geo,
                            spacing_u_m=rec.geometry.sensor_radius_u_m, power_u_rel=opts.power_u_rel,
                            model_u_rel=model_u(rec),
                            level_u_K=b.offset_u_K, drift_u_K_per_s=b.rate_u_K_per_s,
                            noise_K=b.resid_rms_K if b.present else None,
                            t_end_s=opts.window_s[1] if opts.window_s else None)
        except (PulseFitError, ValueError, np.linalg.LinAlgError, FloatingPointError) as exc:
            return MethodResult(self.name, None, converged=False, why=str(exc))
        if not fit.success:
            return MethodResult(self.name, None, converged=False, why=fit.message, fit=fit)
        return _result(self.name, rec, fit)


def _result(name: str, rec: SensorRecord, fit: PulseFit) -> MethodResult:
    source = "pulse fit"
    est = {q: Estimate(v, dict(fit.budget[q]), source) for q, v in (
        ("k", fit.k_W_per_mK), ("alpha", fit.alpha_m2_per_s), ("rho_c", fit.rho_c_J_per_m3K))}
    heat = rec.run.heating_s
    q_mean = float(np.sum(rec.run.steps_dq * np.maximum(heat - rec.run.steps_t, 0.0)) / heat) if heat > 0 else math.nan
    notes = list(fit.notes)
    if fit.geometry.heater_radius_m == 0:
        notes.append("no probe profile: thin, massless needles of infinite length assumed")
    return MethodResult(name, est["k"], est["alpha"], window_s=fit.window_s, residual_rms_K=fit.resid_rms_K,
                        n_used=fit.n, q_mean_W_per_m=q_mean, flags=list(fit.flags), notes=notes, fit=fit,
                        rho_c=est["rho_c"], why=f"pulse model over {fit.window_s[0]:.0f}–{fit.window_s[1]:.0f} s")


def spacing_fit(rec: SensorRecord, rho_c: float, rho_c_u_rel: float, power_u_rel: float) -> PulseFit:
    """The effective spacing of a radial sensor from a pulse in a medium of known ρc (spacing calibration)."""
    if rec.geometry.on_heater:
        raise PulseFitError(f"sensor {rec.name!r} is in the heated needle: a spacing is calibrated at a radial sensor")
    if not is_pulse_record(rec):
        raise PulseFitError("no decay to read: the heater must go off and the record run on for at least the heating "
                            f"time and {MIN_DECAY_SAMPLES} samples")
    geo = pulse_geometry(rec) or PulseGeometry(rec.geometry.sensor_radius_m)
    b = rec.baseline
    fit = fit_pulse(rec.run.t, rec.dT, rec.run.steps_t, rec.run.steps_dq, geo, power_u_rel=power_u_rel,
                    level_u_K=b.offset_u_K, drift_u_K_per_s=b.rate_u_K_per_s,
                    noise_K=b.resid_rms_K if b.present else None, rho_c_fixed=rho_c, rho_c_fixed_u_rel=rho_c_u_rel)
    if not fit.success:
        raise PulseFitError(f"the spacing fit did not converge ({fit.message})")
    return fit


def live_pulse_fit(data: RunData, probe: ProbeProfile | None, sensor: str,
                   power_u_rel: float = DEFAULT_POWER_U_REL) -> PulseFit:
    """The pulse fit on a record still being made (after switch-off, before the decay is as long as the pulse):
    the same fit as the final reduction's, without waiting for the record to qualify as a pulse record."""
    rec = SensorRecord.of(data, HeatingRecord.of(data), sensor, probe)
    if rec.geometry.on_heater:
        raise PulseFitError(f"sensor {sensor!r} is in the heated needle: a pulse is read at a radial sensor")
    if rec.run.t_off is None or np.count_nonzero(rec.run.t > rec.run.t_off) < MIN_DECAY_SAMPLES:
        raise PulseFitError("the pulse is not over yet")
    geo = pulse_geometry(rec) or PulseGeometry(rec.geometry.sensor_radius_m)
    b = rec.baseline
    return fit_pulse(rec.run.t, rec.dT, rec.run.steps_t, rec.run.steps_dq, geo, model_u_rel=model_u(rec),
                     spacing_u_m=rec.geometry.sensor_radius_u_m, power_u_rel=power_u_rel, level_u_K=b.offset_u_K,
                     drift_u_K_per_s=b.rate_u_K_per_s, noise_K=b.resid_rms_K if b.present else None)


def curve_points(fit: PulseFit, t_end_s: float, n: int = 120) -> dict[str, list[float]]:
    """The fitted ΔT on an even grid from heater on to ``t_end_s``, for plotting (JSON-ready)."""
    t = np.linspace(0.0, max(t_end_s, 1.0), n)
    return {"t_s": [float(x) for x in t], "dT_K": [float(y) for y in fit.curve(t)]}
