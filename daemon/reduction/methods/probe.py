"""The cylinder-probe model fitted to the whole heating: at the heater (k, α, contact) and in the medium at r (k, α).

Both start from the preliminary late-time line; see ``probe_model`` for the model and METHODS.md for the rules.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from .. import window as win
from ..data import ReductionError
from ..linesource import RHO_C_FLOOR, LateTimeFit
from ..live import NOISE_HIGH_FRACTION
from ..probe_model import ModelFit, fit_probe_model
from ..radial import pulse_check
from ..record import SensorRecord
from ..superposition import compress_steps
from ..timezero import MAX_SHIFT_SAMPLES
from .base import Estimate, Found, MethodResult, Options
from .line import preliminary_line

# The model counts as describing the record when its residual RMS is within 1.5 times the baseline's noise plus
# 0.1 % of the rise (numerical and sampling detail on noise-free records). On the resolved-probe reference records
# (tests/reference) the lumped model's residual was 4 to 500 times the noise; on the simulator's lumped needle it
# was the noise. Common practice, no source.
CREDIBLE_NOISE = 1.5
CREDIBLE_RISE = 1e-3
REFIT_SKIP = 0.05  # the model-error refit leaves out the first 5 % of the heating (no source)


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
    rho_c = Estimate(fit.rho_c_J_per_m3K, {"statistical": fit.rho_c_u_J_per_m3K / fit.rho_c_J_per_m3K,
                                           "radius": geo_rel}, source)
    contact = None
    if fit.fitted_contact:
        rel = fit.contact_u_m2K_per_W / fit.contact_m2K_per_W if fit.contact_m2K_per_W else 0.0
        contact = Estimate(fit.contact_m2K_per_W, {"statistical": rel}, source)
    flags = []
    if fit.resid_rms_K > NOISE_HIGH_FRACTION * q_mean / (4 * math.pi * fit.k_W_per_mK):
        flags.append("noise_high")
    return MethodResult(name, k, alpha, contact, rho_c, window_s=fit.window_s, residual_rms_K=fit.resid_rms_K,
                        n_used=fit.n, q_mean_W_per_m=q_mean, flags=flags, notes=notes, fit=fit)


class ProbeModelMethod:
    """Heater sensor: the probe model over the heating, stopping before axial loss.

    The model is a lumped cylinder (perfect conductor with a heat capacity behind a contact resistance). A real
    needle conducts heat inside itself with a resistance of its own and reads its temperature on the axis; when
    the record shows that (residuals well above the noise), the fit is kept for the record but not credited:
    none of its values stands (see METHODS.md, "Method choice"). When it does fit within the noise, a refit
    that leaves out the first part of the heating (where a lumped model is least sure) gives its model error;
    the baseline's drift uncertainty enters k through the fit's Jacobian.
    """

    name = "model"

    def fit(self, rec: SensorRecord, opts: Options, found: Found) -> MethodResult | None:
        g = rec.geometry
        bounds = time_zero_bounds(rec)
        # asked for the line, the model still runs where it alone can place a switch-on the power column has late
        if not g.on_heater or (opts.method not in ("auto", "model") and bounds is None):
            return None
        if g.probe_radius_m is None or g.probe_C_J_per_m3K is None:
            if opts.method == "model":
                raise ReductionError("the probe model needs the probe radius and heat capacity "
                                     "(--probe, or --radius-mm and --probe-heat-capacity)")
            return None
        prelim, note = preliminary_line(rec.shifted(0.5 * (bounds[0] + bounds[1])) if bounds else rec)
        if prelim is None:
            return MethodResult(self.name, None, converged=False, notes=[note] if note else [])
        fit = _fit_heater(rec, prelim, bounds)
        res = _result(self.name, rec, fit, "probe model", [])
        if not res.converged or fit is None:
            return res
        if not _describes(rec, res, fit, prelim.resid_rms_K):
            return res
        refit = _fit_heater(rec, prelim, bounds, skip=REFIT_SKIP)
        _add_model_error(res, fit, refit)
        if res.k is not None:  # the baseline's drift, as uncertain as the baseline says, through the model's Jacobian
            drift = abs(fit.drift_coef_rel) * rec.baseline.rate_u_K_per_s
            res.k = replace(res.k, budget={**res.k.budget, "drift": drift})
        return res


def _describes(rec: SensorRecord, res: MethodResult, fit: ModelFit, fallback_noise_K: float) -> bool:
    """Whether the fit's residual is within the noise (and a little of the rise); if not, mark it and say so."""
    noise = rec.noise_K if rec.noise_K is not None else fallback_noise_K
    allowed = CREDIBLE_NOISE * noise + CREDIBLE_RISE * rec.rise_K
    if fit.resid_rms_K <= allowed:
        return True
    res.credible = False
    res.notes.append(f"the {res.name} fit does not describe this record (residual {1e3 * fit.resid_rms_K:.3g} mK "
                     f"against {1e3 * allowed:.3g} mK of noise and tolerance): its values are not used")
    return False


def _add_model_error(res: MethodResult, fit: ModelFit, refit: ModelFit | None) -> None:
    """The change of each value when the first part of the heating is left out, as the half-width of a
    rectangular distribution (JCGM 100:2008 §4.3.7), in each value's budget as ``model``.

    Part of that change is noise: the refit, on fewer points, scatters more. For nested least-squares fits the
    difference has variance u_refit² − u_full² (Hausman 1978, Econometrica 46:1251), which is taken off first.
    """
    if refit is None or not refit.success:
        res.notes.append("probe model: the refit without the early heating failed; no model-error term")
        return
    rel = [(fit.k_u_W_per_mK / fit.k_W_per_mK, refit.k_u_W_per_mK / refit.k_W_per_mK),
           (fit.alpha_u_m2_per_s / fit.alpha_m2_per_s, refit.alpha_u_m2_per_s / refit.alpha_m2_per_s)]
    pairs = [("k", fit.k_W_per_mK, refit.k_W_per_mK, rel[0]), ("alpha", fit.alpha_m2_per_s, refit.alpha_m2_per_s,
                                                                rel[1]),
             ("contact", fit.contact_m2K_per_W, refit.contact_m2K_per_W, None),
             ("rho_c", fit.rho_c_J_per_m3K, refit.rho_c_J_per_m3K, None)]
    for attr, v0, v1, us in pairs:
        est = getattr(res, attr)
        if est is None or not v0:
            continue
        d2 = (v1 / v0 - 1) ** 2
        if us is not None and attr == "k":
            d2 = max(d2 - max(us[1] ** 2 - us[0] ** 2, 0.0), 0.0)
        setattr(res, attr, replace(est, budget={**est.budget, "model": math.sqrt(d2 / 3.0)}))


class RadialMethod:
    """Sensor in the medium at r: the same model evaluated there (a line source for a thin heater)."""

    name = "radial"

    def fit(self, rec: SensorRecord, opts: Options, found: Found) -> MethodResult | None:
        if rec.geometry.on_heater:
            return None
        prelim, note = preliminary_line(rec)
        fit = _fit_radial(rec, prelim)
        res = _result(self.name, rec, fit, "radial fit", [note] if note else [])
        if not res.converged or fit is None:
            return res
        if not _describes(rec, res, fit, prelim.resid_rms_K if prelim is not None else fit.resid_rms_K):
            return res
        _add_model_error(res, fit, _fit_radial(rec, prelim, skip=REFIT_SKIP))
        return res


def time_zero_bounds(rec: SensorRecord) -> tuple[float, float] | None:
    """Where the switch-on may be moved, relative to the power column, when the temperature rose first."""
    tz = rec.time_zero
    if tz is None or tz.samples > MAX_SHIFT_SAMPLES:
        return None
    return tz.lo_s, tz.hi_s


def _fit_heater(rec: SensorRecord, prelim: LateTimeFit, shift_bounds: tuple[float, float] | None,
                skip: float = 0.0) -> ModelFit | None:
    """Probe model over the heating, stopping before axial loss; started from the preliminary line fit. With
    ``shift_bounds`` the switch-on is fitted too (``timezero``); ``skip`` leaves out that fraction of the
    heating's first samples."""
    g = rec.geometry
    assert g.probe_radius_m is not None and g.probe_C_J_per_m3K is not None
    th, dTh = rec.th, rec.dTh
    if skip > 0:
        keep = th >= skip * float(th[-1])
        th, dTh = th[keep], dTh[keep]
    steps_t, steps_dq = rec.run.steps_t, rec.run.steps_dq
    st, sdq = compress_steps(steps_t[steps_t < th[-1]], steps_dq[steps_t < th[-1]])
    alpha0 = (prelim.alpha_m2_per_s or 1e-7) / math.e  # intercept α carries e^{2h}; start from h ≈ 0.5
    t_end = float(th[-1])
    fit: ModelFit | None = None
    for _ in range(2):
        sel = th <= t_end
        try:
            fit = fit_probe_model(th[sel], dTh[sel], st, sdq, g.probe_radius_m, g.probe_C_J_per_m3K,
                                  k0=prelim.k_W_per_mK, alpha0=alpha0, fit_contact=True, h_fixed=0.5,
                                  shift_bounds_s=shift_bounds)
        except (ValueError, np.linalg.LinAlgError, FloatingPointError):
            return None
        if not (g.length_m or g.sample_radius_m):
            break
        t_ax = min(win.axial_end_s(g.length_m, fit.alpha_m2_per_s, 0.01, g.axial_m) if g.length_m else math.inf,
                   win.wall_end_s(g.sample_radius_m, win.wall_alpha(fit.k_W_per_mK, RHO_C_FLOOR) or 0.0, 0.01,
                                  g.sensor_radius_m))
        if t_ax >= t_end * 0.98:
            break
        t_end = max(t_ax, float(th[min(30, th.size - 1)]))
        alpha0 = fit.alpha_m2_per_s
    return fit


def _fit_radial(rec: SensorRecord, prelim: LateTimeFit | None, skip: float = 0.0) -> ModelFit | None:
    """k and α from a sensor at r: probe model evaluated in the medium (line source for a thin heater).

    The whole record from switch-on is fitted, the recovery with it (the model superposes the switch-off like any
    step): after a short pulse the medium's response is almost all in the recovery, and its peak fixes α.
    """
    g = rec.geometry
    run = rec.run
    keep = run.t > 0
    if run.t_off is not None:  # up to any later heating (cycles in one record are reduced one at a time)
        later = np.nonzero((run.t > run.t_off) & (run.q > 0))[0]
        keep &= run.t < (run.t[later[0]] if later.size else np.inf)
    th, dTh = run.t[keep], rec.dT[keep]
    if skip > 0:  # the model-error refit leaves out the first part of the record
        th, dTh = th[th >= skip * float(th[-1])], dTh[th >= skip * float(th[-1])]
    steps_t, steps_dq = run.steps_t, run.steps_dq
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
    starts = [alpha0, 1.5e-7, 5e-7, 1.5e-6]
    if run.t_off is not None:  # a pulse's peak gives κ directly (Kluitenberg et al. 1993): the best start
        pc = pulse_check(run.t[run.t > 0], rec.dT[run.t > 0], r_m, float(np.mean(rec.Qh)), run.t_off)
        if pc is not None and 1e-8 < pc.alpha_m2_per_s < 1e-5:
            starts.insert(0, pc.alpha_m2_per_s)
            k0 = pc.k_W_per_mK if 0.01 < pc.k_W_per_mK < 20 else k0
    best: ModelFit | None = None
    for a0 in starts:
        try:
            f = fit_probe_model(th, dTh, st, sdq, a, cap, r_sensor_m=r_m, k0=k0, alpha0=a0, fit_contact=False)
        except (ValueError, np.linalg.LinAlgError, FloatingPointError):
            continue
        if best is None or (f.success and f.resid_rms_K < best.resid_rms_K):
            best = f
        if f.success and f.resid_rms_K < 1e-3 * max(float(np.max(dTh)), 1e-9):
            break
    return best
