"""One call from a recorded run to results per sensor: method choice, window, uncertainty budget and flags.

See METHODS.md for the methods, the window rule and what each flag means.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..probe import ProbeProfile
from . import units
from . import window as win
from .cooling import CoolingFit, RecoveryWindow, choose_recovery_window, fit_joint, fit_recovery, recovery_candidates
from .data import ImplausibleRun, ReductionError, RunData, contiguous
from .drift import Baseline, fit_baseline, no_baseline
from .linesource import ALPHA_MAX, ALPHA_MIN, LateTimeFit, choose_window, fit_window
from .live import DEFAULT_POWER_U_REL, NOISE_HIGH_FRACTION, replay
from .probe_model import ModelFit, fit_probe_model
from .radial import PulseCheck, pulse_check
from .superposition import compress_steps, log_time_regressor, power_steps

METHODS = ("auto", "line", "model", "radial")
HEAT_COOL_REL = 0.03        # heating and recovery k differ by > 3 % and > 2 combined u: heat_cool_disagree (no source)
CONTACT_H_HIGH = 1.0        # h = k/(aH) > 1: contact drop exceeds q/(2πk) (common practice, no source)
MODEL_LINE_REL = 0.03


@dataclass
class SensorResult:
    """Results for one sensor, SI inside. ``to_json`` gives the interface keys in trade units."""

    name: str
    method: str
    method_reason: str
    k_W_per_mK: float | None = None
    k_u_W_per_mK: float | None = None
    k_raw_W_per_mK: float = math.nan
    k_raw_u_W_per_mK: float = math.nan
    u_budget_rel: dict[str, float] = field(default_factory=dict)
    alpha_m2_per_s: float | None = None
    alpha_u_m2_per_s: float | None = None
    alpha_source: str | None = None
    rho_c_J_per_m3K: float | None = None
    rho_c_u_J_per_m3K: float | None = None
    contact_m2K_per_W: float | None = None
    contact_u_m2K_per_W: float | None = None
    window_s: tuple[float, float] | None = None
    stable_at_s: float | None = None
    flags: list[str] = field(default_factory=list)
    baseline: Baseline | None = None
    rise_K: float | None = None
    q_mean_W_per_m: float | None = None
    heating_s: float | None = None
    residual_rms_K: float | None = None
    n_used: int | None = None
    line: LateTimeFit | None = None
    model: ModelFit | None = None
    recovery: CoolingFit | None = None
    joint: CoolingFit | None = None
    pulse: PulseCheck | None = None
    calibration_factor: float = 1.0
    specific_heat_J_per_kgK: float | None = None
    radial_m: float = 0.0
    notes: list[str] = field(default_factory=list)

    @property
    def k_U_W_per_mK(self) -> float | None:
        """Expanded uncertainty, coverage factor 2."""
        return None if self.k_u_W_per_mK is None else 2.0 * self.k_u_W_per_mK

    def to_json(self) -> dict[str, object]:
        k = self.k_W_per_mK
        d: dict[str, object] = {
            "k_W_per_mK": k,
            "k_u_W_per_mK": self.k_u_W_per_mK,
            "resistivity_mK_per_W": units.resistivity_mK_per_W(k) if k else None,
            "alpha_mm2_per_s": (units.m2_per_s_to_mm2_per_s(self.alpha_m2_per_s)
                                if self.alpha_m2_per_s is not None else None),
            "rho_c_MJ_per_m3K": (units.J_per_m3K_to_MJ_per_m3K(self.rho_c_J_per_m3K)
                                 if self.rho_c_J_per_m3K is not None else None),
            "window_s": list(self.window_s) if self.window_s else None,
            "stable_at_s": self.stable_at_s,
            "method": self.method,
            "flags": list(self.flags),
            # extras
            "method_reason": self.method_reason,
            "k_U_W_per_mK": self.k_U_W_per_mK,
            "coverage_factor": 2,
            "resistivity_Ccm_per_W": units.resistivity_Ccm_per_W(k) if k else None,
            "resistivity_u_mK_per_W": (units.resistivity_u(k, self.k_u_W_per_mK)
                                       if k and self.k_u_W_per_mK is not None else None),
            "u_budget_rel": dict(self.u_budget_rel),
            "alpha_u_mm2_per_s": (self.alpha_u_m2_per_s * 1e6 if self.alpha_u_m2_per_s is not None else None),
            "alpha_source": self.alpha_source,
            "rho_c_u_MJ_per_m3K": (self.rho_c_u_J_per_m3K / 1e6 if self.rho_c_u_J_per_m3K is not None else None),
            "specific_heat_J_per_kgK": self.specific_heat_J_per_kgK,
            "contact_resistance_m2K_per_W": self.contact_m2K_per_W,
            "contact_resistance_u_m2K_per_W": self.contact_u_m2K_per_W,
            "rise_K": self.rise_K,
            "q_mean_W_per_m": self.q_mean_W_per_m,
            "heating_s": self.heating_s,
            "residual_rms_K": self.residual_rms_K,
            "n_used": self.n_used,
            "calibration_factor": self.calibration_factor,
            "drift_K_per_h": (self.baseline.to_dict()["rate_K_per_h"] if self.baseline and self.baseline.present
                              else None),
            "drift_removed": bool(self.baseline and self.baseline.present and self.baseline.rate_K_per_s != 0.0),
            "k_line_W_per_mK": self.line.k_W_per_mK * self.calibration_factor if self.line else None,
            "k_model_W_per_mK": self.model.k_W_per_mK * self.calibration_factor if self.model else None,
            "k_recovery_W_per_mK": (self.recovery.k_W_per_mK * self.calibration_factor
                                    if self.recovery else None),
            "k_joint_W_per_mK": self.joint.k_W_per_mK * self.calibration_factor if self.joint else None,
            "pulse_check": self.pulse.to_dict() if self.pulse else None,
        }
        return {key: _clean(v) for key, v in d.items()}


def _clean(v: object) -> object:
    if isinstance(v, float) and not math.isfinite(v):
        return None
    if isinstance(v, dict):
        return {k: _clean(x) for k, x in v.items()}
    return v


@dataclass
class RunReduction:
    sensors: dict[str, SensorResult]
    heating_s: float | None = None

    def to_json(self) -> dict[str, object]:
        return {"sensors": {name: r.to_json() for name, r in self.sensors.items()}}


def _sensor_geometry(probe: ProbeProfile | None, name: str) -> tuple[float | None, float, float, bool, float | None]:
    """(probe radius, sensor radius r, u(r), on_heater, axial position) for a sensor."""
    if probe is None:
        return None, 0.0, 0.0, True, None
    if probe.has_sensor(name):
        s = probe.sensor(name)
        axial = s.axial_mm * 1e-3 if s.axial_mm is not None else None
        return probe.radius_m, probe.sensor_radius_m(name), probe.sensor_radius_u_m(name), s.is_on_heater, axial
    return probe.radius_m, probe.radius_m, probe.radius_u_m, True, None


def reduce_run(data: RunData, probe: ProbeProfile | None = None, method: str = "auto",
               calibration_factor: float = 1.0, calibration_factor_u: float = 0.0,
               window_s: tuple[float, float] | None = None, max_rise_K: float | None = None,
               bulk_density_kg_per_m3: float | None = None, *, power_u_rel: float = DEFAULT_POWER_U_REL,
               sensors: list[str] | None = None, stable_rule: bool = True) -> RunReduction:
    """Reduce every sensor of a run. Raises ReductionError when the record cannot give any result."""
    if method not in METHODS:
        raise ReductionError(f"unknown method {method!r}; choose one of {', '.join(METHODS)}")
    if not (calibration_factor > 0 and math.isfinite(calibration_factor)):
        raise ReductionError(f"calibration factor must be a finite number > 0, got {calibration_factor}")
    if window_s is not None and not (0 < window_s[0] < window_s[1]):
        raise ReductionError(f"window must satisfy 0 < start < end, got {window_s[0]} {window_s[1]}")
    t = data.time_s
    _, i1 = data.heating_span()
    t_off = data.heater_off_s()
    names = sensors if sensors is not None else data.sensor_names
    if not names:
        raise ReductionError("the run has no temperature columns (T_<sensor>_C)")
    for problem in (data.heating_signal_problem(n) for n in names if n in data.temps_C):
        if problem:
            raise ImplausibleRun(problem)
    steps_t, steps_dq = power_steps(t, data.q_W_per_m)
    X, Q = log_time_regressor(t, steps_t, steps_dq)
    heat = (t > 0) & (Q > 0) & (np.arange(t.size) < i1)
    if np.count_nonzero(heat) < 10:
        raise ReductionError(f"only {np.count_nonzero(heat)} heating samples; at least 10 are needed")
    heat = contiguous(heat)  # a slice: the heating arrays below are views, not copies of a long record
    heating_s = (t_off if t_off is not None else float(t[heat][-1]))
    out: dict[str, SensorResult] = {}
    for name in names:
        if name not in data.temps_C:
            raise ReductionError(f"no column T_{name}_C in the run")
        out[name] = _reduce_sensor(
            name, data, probe, method, calibration_factor, calibration_factor_u, window_s, max_rise_K,
            bulk_density_kg_per_m3, power_u_rel, steps_t, steps_dq, X, Q, heat, i1, t_off, heating_s, stable_rule)
    return RunReduction(out, heating_s)


def _reduce_sensor(name: str, data: RunData, probe: ProbeProfile | None, method: str, cal: float, cal_u: float,
                   window_s: tuple[float, float] | None, max_rise_K: float | None, bulk_density: float | None,
                   power_u_rel: float, steps_t: np.ndarray, steps_dq: np.ndarray, X: np.ndarray, Q: np.ndarray,
                   heat: slice | np.ndarray, i1: int, t_off: float | None, heating_s: float,
                   stable_rule: bool) -> SensorResult:
    t = data.time_s
    T = data.temps_C[name]
    a_m, r_m, r_u, on_heater, axial_m = _sensor_geometry(probe, name)
    probe_C = probe.heat_capacity_J_per_m3K if probe else None
    length_m = probe.length_m if probe else None
    base_sel = t < 0
    baseline = fit_baseline(t[base_sel], T[base_sel]) if np.any(base_sel) else no_baseline(float(T[heat][0]))
    dT = T - baseline.at(t)
    th, dTh, Qh, Xh = t[heat], dT[heat], Q[heat], X[heat]
    u, y = Xh / Qh, dTh / Qh
    rise = float(np.max(dTh))
    res = SensorResult(name=name, method="line", method_reason="", baseline=baseline, rise_K=rise,
                       heating_s=heating_s, calibration_factor=cal, radial_m=0.0 if on_heater else r_m)
    notes = res.notes
    if probe is not None and not probe.has_sensor(name):
        notes.append(f"sensor {name!r} not in the probe profile: taken as inside the heated needle")
    r_line = r_m if (probe is not None) else None
    want = method
    if want == "auto":
        want = "line" if on_heater else "radial"
    if want == "radial" and on_heater:
        raise ReductionError(f"sensor {name!r} is inside the heater; the radial method needs a spacing "
                             "(--spacing or radial_mm in the probe profile)")

    # --- probe model (heater sensor) --------------------------------------------------------------------
    model: ModelFit | None = None
    prelim: LateTimeFit | None = None
    try:
        pc = choose_window(th, u, y, Qh, r_m=r_line, probe_C_J_per_m3K=probe_C, length_m=length_m,
                           axial_m=axial_m)
        prelim = fit_window(th, u, y, Qh, pc.t_start, pc.t_end, r_line, r_u)
    except ValueError as e:
        notes.append(f"preliminary line fit failed: {e}")
    model_possible = on_heater and a_m is not None and probe_C is not None
    if on_heater and method in ("auto", "model") and prelim is not None:
        if model_possible:
            model = _fit_model(th, dTh, steps_t, steps_dq, a_m, probe_C, prelim, length_m, axial_m)
            if model is not None and not model.success:
                notes.append(f"probe model fit did not converge: {model.message}")
        elif method == "model":
            raise ReductionError("the probe model needs the probe radius and heat capacity "
                                 "(--probe, or --radius-mm and --probe-heat-capacity)")
    if not on_heater:
        model = _fit_radial(th, dTh, steps_t, steps_dq, a_m, r_m, probe_C, prelim, length_m)

    # --- late-time line ---------------------------------------------------------------------------------
    line: LateTimeFit | None = None
    reason_window = ""
    try:
        if window_s is not None:
            line = fit_window(th, u, y, Qh, window_s[0], min(window_s[1], float(th[-1])), r_line, r_u,
                              baseline.rate_u_K_per_s)
            reason_window = "window given"
        else:
            hint_ok = model is not None and model.success and on_heater
            wc = choose_window(th, u, y, Qh, r_m=r_line, probe_C_J_per_m3K=probe_C, length_m=length_m,
                               axial_m=axial_m, alpha_hint=model.alpha_m2_per_s if hint_ok and model else None,
                               h_hint=model.h if hint_ok and model else 0.0,
                               k_hint=model.k_W_per_mK if hint_ok and model else None)
            line = fit_window(th, u, y, Qh, wc.t_start, wc.t_end, r_line, r_u, baseline.rate_u_K_per_s)
            reason_window = wc.reason
    except ValueError as e:
        if want == "line":
            raise ReductionError(f"sensor {name!r}: late-time line fit failed: {e}") from e
        notes.append(f"line fit failed: {e}")
    res.line = line
    res.model = model

    # --- choose ------------------------------------------------------------------------------------------
    if method == "auto" and on_heater and line is not None:
        if (line.short or line.trend) and model is not None and model.success:
            want = "model"
            res.method_reason = ("late-time window too short or curved; the probe model uses the whole heating "
                                 f"({reason_window})")
        else:
            res.method_reason = f"late-time line: straight part of ΔT vs ln t ({reason_window})"
    elif method == "auto" and on_heater and line is None and model is not None and model.success:
        want = "model"
        res.method_reason = "no usable late-time window; probe model"
    elif want == "radial":
        res.method_reason = f"sensor {r_m * 1e3:.3g} mm from the heater: response fitted for k and α"
    else:
        res.method_reason = f"method {want} requested" + (f" ({reason_window})" if want == "line" else "")
    res.method = want

    flags: list[str] = []
    budget: dict[str, float] = {}
    if want == "line":
        if line is None:
            raise ReductionError(f"sensor {name!r}: no late-time fit possible")
        k_raw, u_stat = line.k_W_per_mK, line.k_u_stat_W_per_mK
        res.window_s, res.residual_rms_K, res.n_used = line.window_s, line.resid_rms_K, line.n
        res.q_mean_W_per_m = line.q_mean_W_per_m
        if line.short:
            flags.append("window_short")
        if line.trend:
            flags.append("residual_trend")
        if line.resid_rms_K > NOISE_HIGH_FRACTION * line.slope_K:
            flags.append("noise_high")
    else:
        if model is None or not model.success:
            raise ReductionError(f"sensor {name!r}: the {want} fit did not converge"
                                 + (f" ({model.message})" if model else ""))
        k_raw, u_stat = model.k_W_per_mK, model.k_u_W_per_mK
        res.window_s, res.residual_rms_K, res.n_used = model.window_s, model.resid_rms_K, model.n
        res.q_mean_W_per_m = float(np.mean(Qh))
        slope_K = res.q_mean_W_per_m / (4 * math.pi * k_raw)
        if model.resid_rms_K > NOISE_HIGH_FRACTION * slope_K:
            flags.append("noise_high")
        if line is not None and line.trend and on_heater:
            flags.append("residual_trend")
    if on_heater and model is not None and model.success:
        res.contact_m2K_per_W, res.contact_u_m2K_per_W = model.contact_m2K_per_W, model.contact_u_m2K_per_W
        if model.h > CONTACT_H_HIGH:
            flags.append("contact_resistance_high")

    # --- uncertainty -------------------------------------------------------------------------------------
    budget["statistical"] = u_stat / k_raw
    budget["drift"] = line.drift_u_rel if line is not None else 0.0
    budget["power"] = power_u_rel
    budget["calibration"] = cal_u / cal
    rel = math.sqrt(sum(v * v for v in budget.values()))
    res.u_budget_rel = budget
    res.k_raw_W_per_mK = k_raw
    res.k_raw_u_W_per_mK = k_raw * math.hypot(budget["statistical"], budget["drift"], budget["power"])
    res.k_W_per_mK = k_raw * cal
    res.k_u_W_per_mK = res.k_W_per_mK * rel

    # --- diffusivity and heat capacity -----------------------------------------------------------------
    geo_rel = 2.0 * r_u / r_m if r_m else 0.0
    if model is not None and model.success and (want != "line" or on_heater):
        res.alpha_m2_per_s = model.alpha_m2_per_s
        res.alpha_u_m2_per_s = model.alpha_m2_per_s * math.hypot(model.alpha_u_m2_per_s / model.alpha_m2_per_s,
                                                                 geo_rel)
        res.alpha_source = "radial fit" if not on_heater else "probe model"
    elif line is not None and line.alpha_m2_per_s is not None:
        # intercept absorbs contact resistance (α·e^{2h}) and the probe's heat capacity: large model term
        res.alpha_m2_per_s = line.alpha_m2_per_s
        res.alpha_u_m2_per_s = line.alpha_m2_per_s * math.hypot(line.alpha_u_rel or 0.0, 0.5)
        res.alpha_source = "time-axis intercept"
    if res.alpha_m2_per_s:
        res.rho_c_J_per_m3K = res.k_W_per_mK / res.alpha_m2_per_s
        res.rho_c_u_J_per_m3K = res.rho_c_J_per_m3K * math.hypot(rel, res.alpha_u_m2_per_s / res.alpha_m2_per_s)
        if bulk_density is not None:
            res.specific_heat_J_per_kgK = units.specific_heat_J_per_kgK(res.rho_c_J_per_m3K, bulk_density)

    # --- pulse cross-check for radial sensors ----------------------------------------------------------
    if not on_heater and t_off is not None:
        sel = t > 0
        res.pulse = pulse_check(t[sel], dT[sel], r_m, float(np.mean(Qh)), t_off)

    # --- cooling -----------------------------------------------------------------------------------------
    if t_off is not None and on_heater and res.window_s is not None:
        heat_start = line.window_s[0] if line is not None else res.window_s[0]
        after = np.nonzero((t > t_off) & (data.q_W_per_m > 0))[0]
        t_last = float(t[after[0] - 1]) if after.size else float(t[-1])
        cand = recovery_candidates(t, Q, t_off, t_last)
        # without a baseline the zero of ΔT is the first heating sample: keep a free offset, judge the slope
        free = not baseline.present
        step_models = _step_models(model, line, a_m, probe_C, length_m, axial_m)
        try:
            cw = _recovery_window(t[cand], t_off, heat_start, steps_t, steps_dq, step_models, free)
            kw = {"free_offset": free, "level_u_K": baseline.offset_u_K, "window_u_rel": cw.window_u_rel}
            res.recovery = fit_recovery(t, dT, X, Q, cw.t_start, cw.t_end, baseline.rate_u_K_per_s, **kw)
            hw = line.window_s if line is not None else res.window_s
            res.joint = fit_joint(t, dT, X, Q, hw, (cw.t_start, cw.t_end), baseline.rate_u_K_per_s, **kw)
        except ValueError as e:
            if np.count_nonzero(t > t_off) > 0:
                notes.append(f"recovery not analysed: {e}")
        if res.recovery is not None and _heat_cool_disagree(res.recovery, k_raw, budget["statistical"],
                                                            budget["drift"], line, baseline.rate_u_K_per_s):
            flags.append("heat_cool_disagree")

    # --- drift, rise -------------------------------------------------------------------------------------
    flags = baseline.flags(rise, heating_s) + flags
    if max_rise_K is not None and rise > max_rise_K:
        flags.append("rise_above_limit")
    if (model is not None and model.success and line is not None and on_heater
            and abs(model.k_W_per_mK / line.k_W_per_mK - 1) > MODEL_LINE_REL):
        notes.append(f"probe model and late-time line differ by "
                     f"{100 * (model.k_W_per_mK / line.k_W_per_mK - 1):+.1f} %")

    # --- live rule replayed ---------------------------------------------------------------------------
    if stable_rule:
        _, ests = replay(t, T, data.q_W_per_m, probe, name, calibration_factor=cal,
                         calibration_factor_u=cal_u, power_u_rel=power_u_rel)
        res.stable_at_s = ests[-1].stable_at_s if ests else None
    res.flags = list(dict.fromkeys(flags))
    return res


def _recovery_window(t_rec: np.ndarray, t_off: float, heat_start: float, steps_t: np.ndarray,
                     steps_dq: np.ndarray, step_models: list[win.StepModel], free: bool) -> RecoveryWindow:
    """The recovery window from the first step model that gives one (see ``cooling.choose_recovery_window``)."""
    if not step_models or t_rec.size == 0:
        return choose_recovery_window(t_rec, None, t_off, heat_start)
    st, sdq = compress_steps(steps_t[steps_t <= t_off], steps_dq[steps_t <= t_off])
    failed: list[ValueError] = []
    for m in step_models:
        level_err, slope_err = win.recovery_errors(t_rec, st, sdq, m)
        try:
            return choose_recovery_window(t_rec, slope_err if free else level_err, t_off, heat_start)
        except ValueError as e:
            failed.append(e)
    raise failed[0]


def _heat_cool_disagree(rec: CoolingFit, k_heat: float, u_stat_rel: float, u_drift_rel: float,
                        line: LateTimeFit | None, drift_u_K_per_s: float) -> bool:
    """Recovery and heating k differ by more than 3 % and twice the standard uncertainty of their difference.

    A baseline-slope error moves both the same way (heating and recovery both read too warm), so the difference
    carries only the difference of their sensitivities; everything else is independent.
    """
    kc = rec.k_W_per_mK
    rec_drift = kc * drift_u_K_per_s * rec.drift_coef_rel
    rec_other2 = max(rec.k_u_stat_W_per_mK**2 - rec_drift**2, 0.0) + (kc * rec.window_u_rel) ** 2
    if line is not None:
        drift_diff = drift_u_K_per_s * abs(kc * rec.drift_coef_rel - k_heat * line.drift_coef_rel)
    else:
        drift_diff = math.hypot(rec_drift, k_heat * u_drift_rel)
    u_diff = math.sqrt(rec_other2 + (k_heat * u_stat_rel) ** 2 + drift_diff**2)
    return abs(kc - k_heat) > max(2.0 * u_diff, HEAT_COOL_REL * k_heat)


def _step_models(model: ModelFit | None, line: LateTimeFit | None, a_m: float | None, probe_C: float | None,
                 length_m: float | None, axial_m: float | None) -> list[win.StepModel]:
    """Probe and medium for the recovery window, from the same sources as the heating window's rule, in order.

    The probe-model fit when it converged (α, h; α_J from its k/α). The line's intercept α with h = 0 when there
    is no model, or as a second choice when the model and the line disagree by more than 3 %: a heating the two
    read differently (a power log that was wrong for a while) can leave the model an α far off, and the recovery
    is what should show the disagreement. A Blackwell cylinder when the probe's heat capacity is known, an ideal
    line at the radius otherwise.
    """
    if a_m is None:
        return []
    sources: list[tuple[float, float, float]] = []
    if model is not None and model.success and model.alpha_m2_per_s > 0:
        sources.append((model.alpha_m2_per_s, model.h, model.k_W_per_mK))
    if line is not None and line.alpha_m2_per_s and (
            not sources or abs(sources[0][2] / line.k_W_per_mK - 1) > MODEL_LINE_REL):
        sources.append((line.alpha_m2_per_s, 0.0, line.k_W_per_mK))
    out = []
    for alpha, h, k in sources:
        alpha = min(max(alpha, ALPHA_MIN), ALPHA_MAX)
        out.append(win.StepModel(alpha, a_m, 2.0 * (k / alpha) / probe_C if probe_C else None, h, length_m, axial_m))
    return out


def _fit_model(th: np.ndarray, dTh: np.ndarray, steps_t: np.ndarray, steps_dq: np.ndarray, a_m: float,
               probe_C: float, prelim: LateTimeFit, length_m: float | None, axial_m: float | None
               ) -> ModelFit | None:
    """Probe model over the heating, stopping before axial loss; started from the preliminary line fit."""
    st, sdq = compress_steps(steps_t[steps_t < th[-1]], steps_dq[steps_t < th[-1]])
    alpha0 = (prelim.alpha_m2_per_s or 1e-7) / math.e  # intercept α carries e^{2h}; start from h ≈ 0.5
    t_end = float(th[-1])
    fit: ModelFit | None = None
    for _ in range(2):
        sel = th <= t_end
        try:
            fit = fit_probe_model(th[sel], dTh[sel], st, sdq, a_m, probe_C, k0=prelim.k_W_per_mK, alpha0=alpha0,
                                  fit_contact=True, h_fixed=0.5)
        except (ValueError, np.linalg.LinAlgError, FloatingPointError):
            return None
        if not length_m:
            break
        t_ax = win.axial_end_s(length_m, fit.alpha_m2_per_s, 0.01, axial_m)
        if t_ax >= t_end * 0.98:
            break
        t_end = max(t_ax, float(th[min(30, th.size - 1)]))
        alpha0 = fit.alpha_m2_per_s
    return fit


def _fit_radial(th: np.ndarray, dTh: np.ndarray, steps_t: np.ndarray, steps_dq: np.ndarray, a_m: float | None,
                r_m: float, probe_C: float | None, prelim: LateTimeFit | None,
                length_m: float | None) -> ModelFit | None:
    """k and α from a sensor at r: probe model evaluated in the medium (line source for a thin heater)."""
    st, sdq = compress_steps(steps_t[steps_t < th[-1]], steps_dq[steps_t < th[-1]])
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
    del length_m
    return best
