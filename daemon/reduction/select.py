"""Which methods run for a sensor, which result stands for it, and the flags that compare them.

Adding a method: write its class (``methods/``) and add an instance to the tuple of the sensors it applies to.
Under ``auto`` the first name in ``AUTO_ORDER`` whose result converged without a blocking flag stands; if none
does, the first that converged (flagged). A named method stands if it converged, or the reduction says why not.
"""

from __future__ import annotations

import math

from . import units
from .cooling import CoolingFit
from .data import ReductionError
from .linesource import LateTimeFit
from .methods import (
    Found,
    JointMethod,
    LineMethod,
    Method,
    MethodResult,
    Options,
    ProbeModelMethod,
    PulseMethod,
    RadialMethod,
    RecoveryMethod,
    combine,
)
from .record import SensorRecord
from .result import SensorResult

METHODS = ("auto", "line", "model", "radial", "pulse")

# The methods tried for a sensor in the heater and for one in the medium, in the order they run (a later method
# may start from an earlier one's answer: the line's window from the probe model, the recovery from both).
HEATER_METHODS: tuple[Method, ...] = (ProbeModelMethod(), LineMethod(), RecoveryMethod(), JointMethod())
RADIAL_METHODS: tuple[Method, ...] = (RadialMethod(), LineMethod(), PulseMethod())
AUTO_ORDER = {"heater": ("line", "model"), "radial": ("pulse", "radial")}
BLOCKING = frozenset({"window_short", "residual_trend"})  # a result so flagged yields to the next under auto

HEAT_COOL_REL = 0.03   # heating and recovery k differ by > 3 % and > 2 combined u: heat_cool_disagree (no source)
CONTACT_H_HIGH = 1.0   # h = k/(aH) > 1: contact drop exceeds q/(2πk) (common practice, no source)
MODEL_LINE_REL = 0.03  # probe model and line differ by more than this: a note says so (no source)


def run_methods(rec: SensorRecord, opts: Options) -> Found:
    """Every applicable method's result, by name, in run order."""
    kind = "heater" if rec.geometry.on_heater else "radial"
    if opts.method == "radial" and kind == "heater":
        raise ReductionError(f"sensor {rec.name!r} is inside the heater; the radial method needs a spacing "
                             "(--spacing or radial_mm in the probe profile)")
    found = Found()
    for m in HEATER_METHODS if kind == "heater" else RADIAL_METHODS:
        r = m.fit(rec, opts, found)
        if r is not None:
            found[m.name] = r
    return found


def choose(rec: SensorRecord, opts: Options, found: Found) -> tuple[MethodResult, str]:
    """The result that stands for the sensor and why (``method_reason``)."""
    kind = "heater" if rec.geometry.on_heater else "radial"
    want = opts.method
    if want == "model" and kind == "radial":
        want = "radial"  # in the medium, the probe model is the radial fit
    if want == "auto" and kind == "radial" and found.converged("pulse") is not None:
        # a pulse record is read by the pulse, flagged or not: the radial fit sees only the heating
        pick = found["pulse"]
        return pick, _auto_reason(rec, pick, found)
    if want == "auto":
        order = [found[n] for n in AUTO_ORDER[kind] if n in found]
        standing = [r for r in order if r.converged and not BLOCKING & set(r.flags)]
        pick = standing[0] if standing else next((r for r in order if r.converged), None)
        if pick is None:
            failed = order[0] if order else None
            raise ReductionError(f"sensor {rec.name!r}: no method gave a result"
                                 + (f" ({failed.name}: {failed.why})" if failed and failed.why else ""))
        return pick, _auto_reason(rec, pick, found)
    got = found.get(want)
    if got is None or not got.converged:
        if want == "line":
            raise ReductionError(f"sensor {rec.name!r}: late-time line fit failed"
                                 + (f": {got.why}" if got and got.why else ""))
        raise ReductionError(f"sensor {rec.name!r}: the {want} fit did not converge"
                             + (f" ({got.why})" if got and got.why else ""))
    if want == "radial":
        return got, _radial_reason(rec)
    if want == "pulse":
        return got, _pulse_reason(rec, got)
    return got, f"method {want} requested" + (f" ({got.why})" if want == "line" else "")


def _radial_reason(rec: SensorRecord) -> str:
    return f"sensor {rec.geometry.sensor_radius_m * 1e3:.3g} mm from the heater: response fitted for k and α"


def _pulse_reason(rec: SensorRecord, pick: MethodResult) -> str:
    return (f"heat pulse read {rec.geometry.sensor_radius_m * 1e3:.4g} mm from the heater: the pulse model fitted "
            f"over rise, peak and decay for k, α and ρc ({pick.why})")


def _auto_reason(rec: SensorRecord, pick: MethodResult, found: Found) -> str:
    line = found.converged("line")
    if pick.name == "radial":
        return _radial_reason(rec)
    if pick.name == "pulse":
        return _pulse_reason(rec, pick)
    if pick.name == "line":
        return f"late-time line: straight part of ΔT vs ln t ({pick.why})"
    if pick.name == "model" and line is not None:
        return ("late-time window too short or curved; the probe model uses the whole heating "
                f"({line.why})")
    if pick.name == "model":
        return "no usable late-time window; probe model"
    return f"{pick.name}: first usable method"


def sensor_result(rec: SensorRecord, opts: Options, found: Found, chosen: MethodResult,
                  reason: str) -> SensorResult:
    """The chosen result with the probe factor applied, α and ρc, and every flag."""
    g = rec.geometry
    assert chosen.k is not None
    cal, cal_u = opts.calibration_factor, opts.calibration_factor_u
    line = found.converged("line")
    model = found.converged("model") or found.converged("radial")
    res = SensorResult(name=rec.name, method=_label(chosen, opts), method_reason=reason, baseline=rec.baseline,
                       rise_K=rec.rise_K, heating_s=rec.run.heating_s, calibration_factor=cal, radial_m=g.radial_m)
    res.notes = _notes(rec, found)
    lf: LateTimeFit | None = line.fit if line is not None else None
    res.line = lf
    fitted = found.get("model") or found.get("radial")
    res.model = fitted.fit if fitted is not None else None
    res.recovery = _cooling(found, "recovery")
    res.joint = _cooling(found, "joint")
    pulse = found.get("pulse")
    res.pulse = pulse.fit if pulse is not None else None

    # k and its budget: the method's own terms (the line's drift term when the method has none), then the power
    # readback and the probe factor, which every method shares
    k_raw = chosen.k.value
    budget = {"statistical": chosen.k.budget.get("statistical", 0.0),
              "drift": chosen.k.budget.get("drift", lf.drift_u_rel if lf is not None else 0.0),
              "power": opts.power_u_rel, "calibration": cal_u / cal}
    if chosen.rho_c is not None:
        # a method that fits ρc itself (the pulse) brings every term, power included. The probe factor calibrates
        # the heated needle's own reading, not a pulse read at a spacing; the spacing calibration (in the
        # geometry) is its counterpart.
        cal, cal_u = 1.0, 0.0
        res.calibration_factor = 1.0
        budget = dict(chosen.k.budget)
    rel = combine(budget)
    res.u_budget_rel = budget
    res.k_raw_W_per_mK = k_raw
    res.k_raw_u_W_per_mK = k_raw * math.hypot(budget["statistical"], budget.get("drift", 0.0),
                                              budget.get("power", 0.0))
    res.k_W_per_mK = k_raw * cal
    res.k_u_W_per_mK = res.k_W_per_mK * rel
    res.window_s, res.residual_rms_K, res.n_used = chosen.window_s, chosen.residual_rms_K, chosen.n_used
    res.q_mean_W_per_m = chosen.q_mean_W_per_m

    # diffusivity and heat capacity: the fitted model's α when it converged (for a radial sensor unless the line
    # was asked for), else the line's intercept
    alpha = None
    if model is not None and model.alpha is not None and (g.on_heater or res.method != "line"):
        alpha = model.alpha
    elif line is not None and line.alpha is not None:
        alpha = line.alpha
    if chosen.rho_c is not None:
        alpha = chosen.alpha
    if alpha is not None:
        res.alpha_m2_per_s, res.alpha_u_m2_per_s, res.alpha_source = alpha.value, alpha.u, alpha.source
        res.rho_c_J_per_m3K = res.k_W_per_mK / alpha.value
        res.rho_c_u_J_per_m3K = res.rho_c_J_per_m3K * math.hypot(rel, alpha.u_rel)
        if chosen.rho_c is not None:  # k, α and ρc of one fit are correlated: its own ρc budget
            res.rho_c_J_per_m3K, res.rho_c_u_J_per_m3K = chosen.rho_c.value, chosen.rho_c.u
        if opts.bulk_density_kg_per_m3 is not None:
            res.specific_heat_J_per_kgK = units.specific_heat_J_per_kgK(res.rho_c_J_per_m3K,
                                                                        opts.bulk_density_kg_per_m3)
    if g.on_heater and model is not None and model.contact is not None:
        res.contact_m2K_per_W, res.contact_u_m2K_per_W = model.contact.value, model.contact.u

    res.flags = list(dict.fromkeys(_flags(rec, opts, found, chosen, budget)))
    return res


def _label(chosen: MethodResult, opts: Options) -> str:
    return "model" if opts.method == "model" and chosen.name == "radial" else chosen.name


def _cooling(found: Found, name: str) -> CoolingFit | None:
    r = found.converged(name)
    return r.fit if r is not None else None


def _notes(rec: SensorRecord, found: Found) -> list[str]:
    notes: list[str] = []
    if rec.geometry.known and not rec.geometry.in_profile:
        notes.append(f"sensor {rec.name!r} not in the probe profile: taken as inside the heated needle")
    for r in found.values():
        notes.extend(r.notes)
    model, line = found.converged("model"), found.converged("line")
    if model is not None and line is not None and rec.geometry.on_heater:
        d = model.k.value / line.k.value - 1 if model.k and line.k else 0.0
        if abs(d) > MODEL_LINE_REL:
            notes.append(f"probe model and late-time line differ by {100 * d:+.1f} %")
    return notes


def _flags(rec: SensorRecord, opts: Options, found: Found, chosen: MethodResult,
           budget: dict[str, float]) -> list[str]:
    g = rec.geometry
    line = found.converged("line")
    flags = rec.baseline.flags(rec.rise_K, rec.run.heating_s)
    flags += chosen.flags
    if chosen.name != "line" and g.on_heater and line is not None and "residual_trend" in line.flags:
        flags.append("residual_trend")
    model = found.converged("model")
    if g.on_heater and model is not None and model.fit.h > CONTACT_H_HIGH:
        flags.append("contact_resistance_high")
    recovery = found.converged("recovery")
    if recovery is not None and heat_cool_disagree(recovery.fit, chosen.k.value if chosen.k else math.nan,
                                                   budget["statistical"], budget.get("drift", 0.0),
                                                   line.fit if line is not None else None,
                                                   rec.baseline.rate_u_K_per_s):
        flags.append("heat_cool_disagree")
    if opts.max_rise_K is not None and rec.rise_K > opts.max_rise_K:
        flags.append("rise_above_limit")
    return flags


def heat_cool_disagree(rec: CoolingFit, k_heat: float, u_stat_rel: float, u_drift_rel: float,
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
