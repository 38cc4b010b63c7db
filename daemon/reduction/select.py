"""Which methods run for a sensor, which result stands for it, and the flags that compare them.

Adding a method: write its class (``methods/``) and add an instance to the tuple of the sensors it applies to.
Under ``auto`` the result in ``AUTO_ORDER`` with the smallest u(k) among the credible ones stands, except that a
radial sensor's heat pulse is read by the pulse method whenever it converged. A named method stands if it
converged, or the reduction says why not.
"""

from __future__ import annotations

import math

from . import units
from .cooling import CoolingFit
from .data import ReductionError
from .methods import (
    Estimate,
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
from .methods.probe import time_zero_bounds
from .record import SensorRecord
from .result import SensorResult

METHODS = ("auto", "line", "model", "radial", "recovery", "joint", "pulse")

# The methods tried for a sensor in the heater and for one in the medium, in the order they run (a later method
# may start from an earlier one's answer: the line's window from the probe model, the recovery from both).
HEATER_METHODS: tuple[Method, ...] = (ProbeModelMethod(), LineMethod(), RecoveryMethod(), JointMethod())
RADIAL_METHODS: tuple[Method, ...] = (RadialMethod(), LineMethod(), PulseMethod())
# Under auto, of these the one with the smallest uncertainty of k stands, among those that converged and whose
# model describes the record (``MethodResult.credible``): on the resolved-probe reference records the lumped probe
# model never did, and read k worse than the line (METHODS.md, "Method choice").
AUTO_ORDER = {"heater": ("line", "model"), "radial": ("radial",)}

HEAT_COOL_REL = 0.03   # heating and recovery k differ by > 3 % and > 2 combined u: heat_cool_disagree (no source)
CONTACT_H_HIGH = 1.0   # h = k/(aH) > 1: contact drop exceeds q/(2πk) (common practice, no source)


def run_methods(rec: SensorRecord, opts: Options) -> tuple[Found, SensorRecord]:
    """Every applicable method's result, by name, in run order; and the record as the later methods saw it.

    When the temperature rose before the power column's switch-on (``timezero``), the probe model fits the
    switch-on within the bound; every later method sees the power moved there (to the middle of the bound when
    no model fitted it).
    """
    kind = "heater" if rec.geometry.on_heater else "radial"
    if opts.method == "radial" and kind == "heater":
        raise ReductionError(f"sensor {rec.name!r} is inside the heater; the radial method needs a spacing "
                             "(--spacing or radial_mm in the probe profile)")
    found = Found()
    for m in HEATER_METHODS if kind == "heater" else RADIAL_METHODS:
        if m.name != "model" and rec.run.shift_s == 0.0 and time_zero_bounds(rec) is not None:
            rec = rec.shifted(_switch_on(rec, found))
        r = m.fit(rec, opts, found)
        if r is not None:
            found[m.name] = r
    return found, rec


def _switch_on(rec: SensorRecord, found: Found) -> float:
    model = found.credible("model")
    if model is not None and model.fit.shift_s != 0.0:
        return float(model.fit.shift_s)
    assert rec.time_zero is not None
    return rec.time_zero.mid_s


def choose(rec: SensorRecord, opts: Options, found: Found) -> tuple[MethodResult, str]:
    """The result that stands for the sensor and why (``method_reason``)."""
    kind = "heater" if rec.geometry.on_heater else "radial"
    want = opts.method
    if want == "model" and kind == "radial":
        want = "radial"  # in the medium, the probe model is the radial fit
    if want == "auto" and kind == "radial" and found.converged("pulse") is not None:
        # a pulse record is read by the pulse, flagged or not: it models what the radial fit leaves out (the
        # sensing needle, the heater's finite length, the drift fitted with it) and carries those terms in its u
        pick = found["pulse"]
        return pick, _auto_reason(rec, pick, found)
    if want == "auto":
        order = [found[n] for n in AUTO_ORDER[kind] if n in found]
        usable = [r for r in order if r.converged and r.credible and r.k is not None]
        pick = min(usable, key=lambda r: r.k.u_rel) if usable else None  # type: ignore[union-attr]
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
    pulse_stands = chosen.name == "pulse"
    if pulse_stands:
        # the probe factor calibrates the heated needle's own reading, not a pulse read at a spacing; the spacing
        # calibration (in the geometry) is its counterpart
        cal, cal_u = 1.0, 0.0
    line = found.converged("line")
    model = found.credible("model") or found.converged("radial")
    res = SensorResult(name=rec.name, method=_label(chosen, opts), method_reason=reason, baseline=rec.baseline,
                       rise_K=rec.rise_K, heating_s=rec.run.heating_s, calibration_factor=cal,
                       calibration_factor_u=cal_u, radial_m=g.radial_m)
    res.notes = _notes(rec, found)
    res.line = line.fit if line is not None else None
    fitted = found.get("model") or found.get("radial")
    res.model = fitted.fit if fitted is not None else None
    res.recovery = _cooling(found, "recovery")
    res.joint = _cooling(found, "joint")
    pulse = found.get("pulse")
    res.pulse = pulse.fit if pulse is not None else None

    # k and its budget: the method's own terms (the line's drift term when the method has none), then the power
    # readback and the probe factor, which every method shares
    k_raw = chosen.k.value
    budget = dict(chosen.k.budget)
    if "drift" not in budget and not pulse_stands:  # the pulse fits its drift: it is in its statistical term
        budget["drift"] = line.k.budget.get("drift", 0.0) if line is not None and line.k is not None else 0.0
    budget["power"] = opts.power_u_rel
    budget["calibration"] = cal_u / cal
    rel = combine(budget)
    res.u_budget_rel = budget
    res.k_raw_W_per_mK = k_raw
    res.k_raw_u_W_per_mK = k_raw * combine({k: v for k, v in budget.items() if k != "calibration"})
    res.k_W_per_mK = k_raw * cal
    res.k_u_W_per_mK = res.k_W_per_mK * rel
    res.window_s, res.residual_rms_K, res.n_used = chosen.window_s, chosen.residual_rms_K, chosen.n_used
    res.q_mean_W_per_m = chosen.q_mean_W_per_m

    # diffusivity and heat capacity: only from a fit whose model describes the record (a credible probe model at
    # the heater, the radial fit in the medium), with that fit's own k/α for ρc; the line's intercept gives
    # α·e^{2h} only (contact and the probe's own resistance), which is not α: a note says what it is
    source = model if (model is not None and (g.on_heater or res.method != "line")) else None
    if pulse_stands:
        source = chosen
    if source is not None and source.alpha is not None and source.rho_c is not None:
        alpha, rc = source.alpha, source.rho_c
        res.alpha_m2_per_s, res.alpha_u_m2_per_s, res.alpha_source = alpha.value, alpha.u, alpha.source
        rc_budget = {**rc.budget, "power": opts.power_u_rel, "calibration": cal_u / cal}
        res.rho_c_J_per_m3K = rc.value * cal
        res.rho_c_u_J_per_m3K = res.rho_c_J_per_m3K * combine(rc_budget)
        res.u_budget_alpha_rel, res.u_budget_rho_c_rel = dict(alpha.budget), rc_budget
        if opts.bulk_density_kg_per_m3 is not None:
            res.specific_heat_J_per_kgK = units.specific_heat_J_per_kgK(res.rho_c_J_per_m3K,
                                                                        opts.bulk_density_kg_per_m3)
    elif line is not None and line.fit.alpha_m2_per_s and g.on_heater:
        res.notes.append(f"α and ρc not reported: the line's intercept gives α·e^(2h) = "
                         f"{line.fit.alpha_m2_per_s * 1e6:.3g} mm²/s, where h holds the contact and the probe's own "
                         "resistance, unknown here; only a probe model that describes the record separates them")
    if g.on_heater and model is not None and model.contact is not None:
        res.contact_m2K_per_W, res.contact_u_m2K_per_W = model.contact.value, model.contact.u

    res.flags = list(dict.fromkeys(_flags(rec, opts, found, chosen, budget)))
    disagree = line_disagreement(chosen, found, opts)
    if disagree is not None:
        res.notes.append(disagree)
    res.methods = {name: _summary(r, opts) for name, r in found.items() if r.k is not None}
    return res


def _summary(r: MethodResult, opts: Options) -> dict[str, object]:
    """One method's values in SI with their standard uncertainties: its own budget, the power readback and the
    probe factor (the factor scales k and ρc)."""
    cal, shared = opts.calibration_factor, {"power": opts.power_u_rel,
                                             "calibration": opts.calibration_factor_u / opts.calibration_factor}
    out: dict[str, object] = {"credible": r.credible, "window_s": list(r.window_s) if r.window_s else None}
    for key, est, scale, common in (("k_W_per_mK", r.k, cal, True), ("alpha_m2_per_s", r.alpha, 1.0, False),
                                    ("rho_c_J_per_m3K", r.rho_c, cal, True),
                                    ("contact_m2K_per_W", r.contact, 1.0, False)):
        if est is None:
            continue
        budget = {**est.budget, **shared} if common else dict(est.budget)
        out[key] = est.value * scale
        out[key.replace("_W_per", "_u_W_per").replace("_m2_per", "_u_m2_per").replace("_J_per", "_u_J_per")
            .replace("_m2K_per", "_u_m2K_per")] = est.value * scale * combine(budget)
    return out


def _label(chosen: MethodResult, opts: Options) -> str:
    return "model" if opts.method == "model" and chosen.name == "radial" else chosen.name


def _cooling(found: Found, name: str) -> CoolingFit | None:
    r = found.converged(name)
    return r.fit if r is not None else None


def _notes(rec: SensorRecord, found: Found) -> list[str]:
    notes: list[str] = []
    if rec.geometry.known and not rec.geometry.in_profile:
        notes.append(f"sensor {rec.name!r} not in the probe profile: taken as inside the heated needle")
    tz = rec.time_zero
    if tz is not None and rec.run.shift_s != 0.0:
        model = found.credible("model")
        fitted = model is not None and model.fit.shift_s == rec.run.shift_s
        notes.append(tz.note(rec.run.shift_s, "fitted by the probe model" if fitted
                             else "the middle of the bound; no probe model fitted it"))
    elif tz is not None:
        notes.append(f"time zero: ΔT had risen {tz.risen_K:.3g} K at t = {tz.risen_at_s:.4g} s, "
                     f"{tz.samples:.0f} samples before the power column shows the heater on at "
                     f"{tz.power_on_s:.4g} s: more than a late power reading; check the record's time axis")
    for r in found.values():
        notes.extend(r.notes)
    return notes


def line_disagreement(chosen: MethodResult, found: Found, opts: Options) -> str | None:
    """When the result that stands is not the late-time line and differs from it by more than twice the standard
    uncertainty of the difference (each method's own terms; power and probe factor move both alike): a note that
    names both values. None when they agree or there is no line to compare with."""
    line = found.converged("line")
    if line is None or line is chosen or line.k is None or chosen.k is None or chosen.name == "pulse":
        return None  # (a radial sensor's line over a pulse's heating is no measurement to compare with)
    own = [{k: v for k, v in e.budget.items() if k not in ("power", "calibration")} for e in (chosen.k, line.k)]
    u_diff = math.hypot(chosen.k.value * combine(own[0]), line.k.value * combine(own[1]))
    if abs(chosen.k.value - line.k.value) <= 2.0 * u_diff:
        return None
    f = opts.calibration_factor
    return (f"{chosen.name} k = {f * chosen.k.value:.4g} ± {2 * f * chosen.k.value * combine(own[0]):.2g} and the "
            f"late-time line k = {f * line.k.value:.4g} ± {2 * f * line.k.value * combine(own[1]):.2g} W/(m·K) "
            f"(U, k = 2, own terms) disagree")


def _flags(rec: SensorRecord, opts: Options, found: Found, chosen: MethodResult,
           budget: dict[str, float]) -> list[str]:
    g = rec.geometry
    line = found.converged("line")
    flags = rec.baseline.flags(rec.rise_K, rec.run.heating_s)
    if rec.time_zero is not None and rec.run.shift_s == 0.0:
        flags.append("time_zero_mismatch")
    flags += chosen.flags
    if chosen.name != "line" and g.on_heater and line is not None and "residual_trend" in line.flags:
        flags.append("residual_trend")
    model = found.credible("model")
    if g.on_heater and model is not None and model.fit.h > CONTACT_H_HIGH:
        flags.append("contact_resistance_high")
    recovery = found.converged("recovery")
    if recovery is not None and chosen.k is not None and heat_cool_disagree(recovery.k, chosen.k, budget):
        flags.append("heat_cool_disagree")
    if opts.max_rise_K is not None and rec.rise_K > opts.max_rise_K:
        flags.append("rise_above_limit")
    if line_disagreement(chosen, found, opts) is not None:
        flags.append("line_disagree")
    return flags


def heat_cool_disagree(recovery: Estimate, heating: Estimate, heating_budget: dict[str, float]) -> bool:
    """Recovery and heating k differ by more than 3 % and twice the standard uncertainty of their difference.

    Each k's own terms (noise, drift, window) count as independent; power and calibration move both alike and
    drop out. A baseline shared by both makes their drift errors alike too, so this overstates the difference's
    uncertainty a little: the flag errs towards silence, never towards a false alarm.
    """
    own = {k: v for k, v in heating_budget.items() if k not in ("power", "calibration")}
    u_diff = math.hypot(recovery.value * recovery.u_rel, heating.value * combine(own))
    return abs(recovery.value - heating.value) > max(2.0 * u_diff, HEAT_COOL_REL * heating.value)
