"""The cylinder-probe model fitted to the whole heating: at the heater (k, α, contact) and in the medium at r (k, α).

Both start from the preliminary late-time line; see ``probe_model`` for the model and METHODS.md for the rules.
"""

from __future__ import annotations

import math

import numpy as np

from .. import window as win
from ..data import ReductionError
from ..linesource import LateTimeFit
from ..live import NOISE_HIGH_FRACTION
from ..probe_model import ModelFit, fit_probe_model
from ..record import SensorRecord
from ..superposition import compress_steps
from .base import Estimate, Found, MethodResult, Options
from .line import preliminary_line


def _result(name: str, rec: SensorRecord, fit: ModelFit | None, source: str, notes: list[str]) -> MethodResult:
    if fit is None:
        return MethodResult(name, None, converged=False, notes=notes)
    if not fit.success:
        notes = [*notes, f"probe model fit did not converge: {fit.message}"] if name == "model" else notes
        return MethodResult(name, None, converged=False, why=fit.message, notes=notes, fit=fit)
    g = rec.geometry
    q_mean = float(np.mean(rec.Qh))
    k = Estimate(fit.k_W_per_mK, {"statistical": fit.k_u_W_per_mK / fit.k_W_per_mK}, source)
    geo_rel = 2.0 * g.sensor_radius_u_m / g.sensor_radius_m if g.sensor_radius_m else 0.0
    alpha = Estimate(fit.alpha_m2_per_s, {"statistical": fit.alpha_u_m2_per_s / fit.alpha_m2_per_s,
                                          "radius": geo_rel}, source)
    contact = None
    if fit.fitted_contact:
        rel = fit.contact_u_m2K_per_W / fit.contact_m2K_per_W if fit.contact_m2K_per_W else 0.0
        contact = Estimate(fit.contact_m2K_per_W, {"statistical": rel}, source)
    flags = []
    if fit.resid_rms_K > NOISE_HIGH_FRACTION * q_mean / (4 * math.pi * fit.k_W_per_mK):
        flags.append("noise_high")
    return MethodResult(name, k, alpha, contact, window_s=fit.window_s, residual_rms_K=fit.resid_rms_K,
                        n_used=fit.n, q_mean_W_per_m=q_mean, flags=flags, notes=notes, fit=fit)


class ProbeModelMethod:
    """Heater sensor: the probe model over the heating, stopping before axial loss."""

    name = "model"

    def fit(self, rec: SensorRecord, opts: Options, found: Found) -> MethodResult | None:
        g = rec.geometry
        if not g.on_heater or opts.method not in ("auto", "model"):
            return None
        if g.probe_radius_m is None or g.probe_C_J_per_m3K is None:
            if opts.method == "model":
                raise ReductionError("the probe model needs the probe radius and heat capacity "
                                     "(--probe, or --radius-mm and --probe-heat-capacity)")
            return None
        prelim, note = preliminary_line(rec)
        if prelim is None:
            return MethodResult(self.name, None, converged=False, notes=[note] if note else [])
        fit = _fit_heater(rec, prelim)
        return _result(self.name, rec, fit, "probe model", [])


class RadialMethod:
    """Sensor in the medium at r: the same model evaluated there (a line source for a thin heater)."""

    name = "radial"

    def fit(self, rec: SensorRecord, opts: Options, found: Found) -> MethodResult | None:
        if rec.geometry.on_heater:
            return None
        prelim, note = preliminary_line(rec)
        return _result(self.name, rec, _fit_radial(rec, prelim), "radial fit", [note] if note else [])


def _fit_heater(rec: SensorRecord, prelim: LateTimeFit) -> ModelFit | None:
    """Probe model over the heating, stopping before axial loss; started from the preliminary line fit."""
    g = rec.geometry
    assert g.probe_radius_m is not None and g.probe_C_J_per_m3K is not None
    th, dTh = rec.th, rec.dTh
    steps_t, steps_dq = rec.run.steps_t, rec.run.steps_dq
    st, sdq = compress_steps(steps_t[steps_t < th[-1]], steps_dq[steps_t < th[-1]])
    alpha0 = (prelim.alpha_m2_per_s or 1e-7) / math.e  # intercept α carries e^{2h}; start from h ≈ 0.5
    t_end = float(th[-1])
    fit: ModelFit | None = None
    for _ in range(2):
        sel = th <= t_end
        try:
            fit = fit_probe_model(th[sel], dTh[sel], st, sdq, g.probe_radius_m, g.probe_C_J_per_m3K,
                                  k0=prelim.k_W_per_mK, alpha0=alpha0, fit_contact=True, h_fixed=0.5)
        except (ValueError, np.linalg.LinAlgError, FloatingPointError):
            return None
        if not g.length_m:
            break
        t_ax = win.axial_end_s(g.length_m, fit.alpha_m2_per_s, 0.01, g.axial_m)
        if t_ax >= t_end * 0.98:
            break
        t_end = max(t_ax, float(th[min(30, th.size - 1)]))
        alpha0 = fit.alpha_m2_per_s
    return fit


def _fit_radial(rec: SensorRecord, prelim: LateTimeFit | None) -> ModelFit | None:
    """k and α from a sensor at r: probe model evaluated in the medium (line source for a thin heater)."""
    g = rec.geometry
    th, dTh = rec.th, rec.dTh
    steps_t, steps_dq = rec.run.steps_t, rec.run.steps_dq
    st, sdq = compress_steps(steps_t[steps_t < th[-1]], steps_dq[steps_t < th[-1]])
    r_m, a_m, probe_C = g.sensor_radius_m, g.probe_radius_m, g.probe_C_J_per_m3K
    # With the heater's heat capacity known, the heater is the Blackwell cylinder; without it, an ideal line
    # (a cylinder of r/100 whose size changes the response by ~1e-4).
    with_cap = bool(a_m and a_m < r_m and probe_C)
    a = a_m if with_cap and a_m else r_m / 100.0
    cap = probe_C if with_cap else None
    if prelim is not None and prelim.alpha_m2_per_s:
        k0, alpha0 = prelim.k_W_per_mK, prelim.alpha_m2_per_s
    else:
        k0, alpha0 = 1.0, 5e-7
    alpha0 = min(max(alpha0, 1e-8), 1e-5)
    best: ModelFit | None = None
    for a0 in (alpha0, 1.5e-7, 5e-7, 1.5e-6):
        try:
            f = fit_probe_model(th, dTh, st, sdq, a, cap, r_sensor_m=r_m, k0=k0, alpha0=a0, fit_contact=False)
        except (ValueError, np.linalg.LinAlgError, FloatingPointError):
            continue
        if best is None or (f.success and f.resid_rms_K < best.resid_rms_K):
            best = f
        if f.success and f.resid_rms_K < 1e-3 * max(float(np.max(dTh)), 1e-9):
            break
    return best
