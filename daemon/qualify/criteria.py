"""Judging the measurements: one result per criterion (per channel, sensor or medium where that applies)."""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from linerig.daemon.probe import ProbeProfile

from .config import CRITERION_IDS, Criterion, QualificationConfig
from .procedure import Measurements

PASS, FAIL, WARN, NOT_MEASURED, NOT_APPLICABLE = "pass", "fail", "warn", "not_measured", "not_applicable"


@dataclass(frozen=True)
class CriterionResult:
    """The verdict on one criterion for one item (a channel, sensor or medium; "" for the probe as a whole)."""

    id: str
    item: str
    status: str
    measured: float | None
    limit: str
    unit: str
    detail: str
    title: str
    source: str
    required: bool

    def to_dict(self) -> dict[str, object]:
        d = asdict(self)
        if isinstance(self.measured, float) and not math.isfinite(self.measured):
            d["measured"] = None
        return d

    @property
    def failed(self) -> bool:
        return self.status in (FAIL, NOT_MEASURED) and self.required


def _result(c: Criterion, ok: bool | None, measured: float | None, limit: str, unit: str, detail: str,
            item: str = "") -> CriterionResult:
    """ok None: not measured. A failed advisory criterion is a warning."""
    if ok is None:
        status = NOT_MEASURED
    elif ok:
        status = PASS
    else:
        status = FAIL if c.required else WARN
    return CriterionResult(c.id, item, status, measured, limit, unit, detail, c.title, c.source, c.required)


def _na(c: Criterion, detail: str, item: str = "") -> CriterionResult:
    return CriterionResult(c.id, item, NOT_APPLICABLE, None, "", "", detail, c.title, c.source, c.required)


def evaluate(m: Measurements, config: QualificationConfig, profile: ProbeProfile) -> list[CriterionResult]:
    """Every criterion in ``CRITERION_IDS`` order; a criterion whose measurement failed is "not measured"."""
    out: list[CriterionResult] = []
    for cid in CRITERION_IDS:
        out.extend(_JUDGES[cid](m, config.criteria[cid], config, profile))
    return out


def overall_passed(results: list[CriterionResult]) -> bool:
    return not any(r.failed for r in results)


# ---- one judge per criterion -----------------------------------------------------------------------------------

def _insulation(m: Measurements, c: Criterion, cfg: QualificationConfig, p: ProbeProfile) -> list[CriterionResult]:
    lim = c.limit("min_MOhm")
    v = c.limit("test_V")
    if m.insulation_MOhm is None:
        return [_result(c, None, None, f"≥ {lim:g} MΩ at {v:g} V", "MΩ", m.errors.get("insulation", "not entered"))]
    return [_result(c, m.insulation_MOhm >= lim, m.insulation_MOhm, f"≥ {lim:g} MΩ at {v:g} V", "MΩ",
                    f"operator's megohmmeter reading at {m.insulation_V:g} V DC")]


def _heater_resistance(m: Measurements, c: Criterion, cfg: QualificationConfig, p: ProbeProfile
                       ) -> list[CriterionResult]:
    tol = c.limit("max_rel_deviation")
    if m.heater is None:
        return [_result(c, None, None, f"±{100 * tol:g} %", "Ω", m.errors.get("heater", "not measured"))]
    r20 = m.heater.R20_ohm
    if p.heater_resistance_ohm is None:
        return [_na(c, f"measured {r20:.3f} Ω at 20 °C; the profile gives no nominal "
                       f"(add heater_resistance_ohm = {r20:.2f})")]
    dev = r20 / p.heater_resistance_ohm - 1.0
    return [_result(c, abs(dev) <= tol, r20, f"{p.heater_resistance_ohm:g} Ω ± {100 * tol:g} %", "Ω",
                    f"{r20:.3f} ± {m.heater.R20_u_ohm:.3f} Ω at 20 °C ({100 * dev:+.2f} % from the profile)")]


def _heater_tcr(m: Measurements, c: Criterion, cfg: QualificationConfig, p: ProbeProfile) -> list[CriterionResult]:
    lim = c.limit("max_abs_per_K")
    if m.heater is None:
        return [_result(c, None, None, f"|TCR| ≤ {lim:.2g} /K", "1/K", m.errors.get("heater", "not measured"))]
    h = m.heater
    extra = "" if h.drift_rel_per_h is None else (
        f"; a drift of {100 * h.drift_rel_per_h:+.2f} ± {100 * (h.drift_u_rel_per_h or 0.0):.2f} %/h over the bath "
        "sequence taken out")
    return [_result(c, abs(h.tcr_per_K) <= lim, h.tcr_per_K, f"|TCR| ≤ {lim:.2g} /K", "1/K",
                    f"{h.tcr_per_K:.3g} ± {h.tcr_u_per_K:.2g} /K from {h.n} bath points{extra}")]


def _heater_drift(m: Measurements, c: Criterion, cfg: QualificationConfig, p: ProbeProfile) -> list[CriterionResult]:
    lim = c.limit("max_abs_rel_per_h")
    if m.drift is None:
        return [_result(c, None, None, f"≤ {100 * lim:g} %/h", "%/h", m.errors.get("drift", "not measured"))]
    d = m.drift
    return [_result(c, abs(d.rate_rel_per_h) <= lim, 100 * d.rate_rel_per_h, f"|drift| ≤ {100 * lim:g} %/h", "%/h",
                    f"{100 * d.rate_rel_per_h:+.3f} ± {100 * d.rate_u_rel_per_h:.3f} %/h over "
                    f"{d.span_s / 60:.0f} min of heating at constant temperature")]


def _per_channel(m: Measurements, c: Criterion, name: str) -> CriterionResult | None:
    ch = m.channels.get(name)
    if ch is None:
        return _result(c, None, None, "", "", "channel not logged in a bath", name)
    if ch.faulted:
        bits = 0
        for b in ch.baths:
            bits |= b.faults
        return _result(c, False, None, "", "", f"channel faulted in the bath (fault bits 0x{bits:02x})", name)
    return None


def _tc_offset(m: Measurements, c: Criterion, cfg: QualificationConfig, p: ProbeProfile) -> list[CriterionResult]:
    lim = c.limit("max_abs_K")
    out = []
    for s in p.sensors:
        bad = _per_channel(m, c, s.name)
        if bad is not None:
            out.append(bad)
            continue
        ch = m.channels[s.name]
        each = ", ".join(f"{b.offset_K:+.3f} K at {b.bath_C:g} °C" for b in ch.baths)
        out.append(_result(c, abs(ch.worst_offset_K) <= lim, ch.worst_offset_K, f"|offset| ≤ {lim:g} K", "K", each,
                           s.name))
    return out


def _tc_noise(m: Measurements, c: Criterion, cfg: QualificationConfig, p: ProbeProfile) -> list[CriterionResult]:
    lim = c.limit("max_rms_mK")
    out = []
    for s in p.sensors:
        bad = _per_channel(m, c, s.name)
        if bad is not None:
            out.append(bad)
            continue
        ch = m.channels[s.name]
        n = sum(b.n for b in ch.baths)
        out.append(_result(c, ch.noise_mK <= lim, ch.noise_mK, f"≤ {lim:g} mK RMS", "mK",
                           f"{ch.noise_mK:.1f} mK RMS about a line, {n} samples in {len(ch.baths)} baths", s.name))
    return out


def _runs_by_medium(m: Measurements, cfg: QualificationConfig) -> list[tuple[str, list]]:
    return [(ref.name, [r for r in m.runs if r.medium == ref.name]) for ref in cfg.references]


def _response_time(m: Measurements, c: Criterion, cfg: QualificationConfig, p: ProbeProfile
                   ) -> list[CriterionResult]:
    frac = c.limit("max_fraction_of_heating")
    tol = c.limit("slope_tolerance")
    out = []
    for name, runs in _runs_by_medium(m, cfg):
        times = [r.response_s for r in runs if r.response_s is not None]
        if not times:
            out.append(_result(c, None, None, "", "s", m.errors.get(f"reference:{name}", "probe model not fitted"),
                               name))
            continue
        typical = float(np.median(times))
        heat = min(r.heat_s for r in runs)
        out.append(_result(c, typical <= frac * heat, typical, f"≤ {frac:.3g} × {heat:.0f} s = {frac * heat:.0f} s",
                           "s", f"slope within {100 * tol:g} % of q/(4πk) after {typical:.0f} s (median of "
                           f"{len(times)} runs: {', '.join(f'{x:.0f}' for x in times)} s)", name))
    return out


def _probe_heat_capacity(m: Measurements, c: Criterion, cfg: QualificationConfig, p: ProbeProfile
                         ) -> list[CriterionResult]:
    tol = c.limit("max_rel_deviation")
    fits = [r.probe for r in m.runs if r.probe is not None]
    if not fits:
        return [_result(c, None, None, f"±{100 * tol:g} %", "MJ/(m³·K)", "probe model not fitted in any run")]
    vals = [f.probe_rho_c_J_per_m3K / 1e6 for f in fits]
    mean = sum(vals) / len(vals)
    spread = f"{min(vals):.2f}–{max(vals):.2f}"
    if p.heat_capacity_MJ_per_m3K is None:
        return [_result(c, False, mean, "profile value needed", "MJ/(m³·K)",
                        f"fitted {mean:.2f} MJ/(m³·K) ({spread}); the profile gives none, so the reduction cannot "
                        f"use the probe model: add heat_capacity_MJ_per_m3K = {mean:.2f}")]
    dev = mean / p.heat_capacity_MJ_per_m3K - 1.0
    return [_result(c, abs(dev) <= tol, mean, f"{p.heat_capacity_MJ_per_m3K:g} ± {100 * tol:g} %", "MJ/(m³·K)",
                    f"fitted {mean:.2f} MJ/(m³·K) over {len(vals)} runs ({spread}), {100 * dev:+.1f} % from the "
                    "profile")]


def _contact_resistance(m: Measurements, c: Criterion, cfg: QualificationConfig, p: ProbeProfile
                        ) -> list[CriterionResult]:
    lim = c.limit("max_h")
    out = []
    for name, runs in _runs_by_medium(m, cfg):
        fits = [r.probe for r in runs if r.probe is not None]
        if not fits:
            out.append(_result(c, None, None, f"h ≤ {lim:g}", "", "probe model not fitted", name))
            continue
        worst = max(fits, key=lambda f: f.h)
        rc = [f.contact_m2K_per_W for f in fits]
        out.append(_result(c, worst.h <= lim, worst.h, f"h ≤ {lim:g}", "",
                           f"R_c = {min(rc):.2e}–{max(rc):.2e} m²·K/W over {len(fits)} runs (h = k·R_c/a, worst "
                           f"{worst.h:.2f})", name))
    return out


def _reference_media(m: Measurements, c: Criterion, cfg: QualificationConfig, p: ProbeProfile
                     ) -> list[CriterionResult]:
    need = int(c.limit("min_count"))
    ratio_min = c.limit("min_k_ratio")
    done = [ref for ref in cfg.references if any(r.medium == ref.name and r.k_raw_W_per_mK for r in m.runs)]
    ks = [ref.k_W_per_mK for ref in done]
    ratio = max(ks) / min(ks) if ks else 0.0
    ok = len(done) >= need and ratio >= ratio_min
    return [_result(c, ok, ratio, f"≥ {need} media, k ratio ≥ {ratio_min:g}", "",
                    f"{len(done)} media with results ({', '.join(r.name for r in done) or 'none'}), "
                    f"k ratio {ratio:.2f}")]


def _calibration_factor(m: Measurements, c: Criterion, cfg: QualificationConfig, p: ProbeProfile
                        ) -> list[CriterionResult]:
    lo, hi = c.limit("min"), c.limit("max")
    cal = m.calibration
    if cal is None:
        return [_result(c, None, None, f"{lo:g}–{hi:g}", "", m.errors.get("calibration", "not measured"))]
    each = ", ".join(f"{x.name} {x.factor:.4f}" for x in cal.media)
    return [_result(c, lo <= cal.factor <= hi, cal.factor, f"{lo:g}–{hi:g}", "",
                    f"F = {cal.factor:.4f} ± {cal.factor_u:.4f} (per medium: {each})")]


def _calibration_bias(m: Measurements, c: Criterion, cfg: QualificationConfig, p: ProbeProfile
                      ) -> list[CriterionResult]:
    lim = c.limit("max_abs_rel")
    cal = m.calibration
    if cal is None:
        return [_result(c, None, None, f"≤ {100 * lim:g} %", "%", m.errors.get("calibration", "not measured"))]
    return [_result(c, abs(x.residual_bias_rel) <= lim, 100 * x.residual_bias_rel, f"|bias| ≤ {100 * lim:g} %", "%",
                    f"measured {x.k_mean_W_per_mK:.4f} vs reference {x.k_ref_W_per_mK:.4f} W/(m·K): "
                    f"{100 * x.bias_rel:+.2f} % raw, {100 * x.residual_bias_rel:+.2f} % after F", x.name)
            for x in cal.media]


def _repeatability(m: Measurements, c: Criterion, cfg: QualificationConfig, p: ProbeProfile
                   ) -> list[CriterionResult]:
    lim = c.limit("max_rel_sd")
    cal = m.calibration
    if cal is None:
        return [_result(c, None, None, f"≤ {100 * lim:g} %", "%", m.errors.get("calibration", "not measured"))]
    out = []
    for x in cal.media:
        if x.n < 2 or math.isnan(x.k_rel_sd):
            out.append(_result(c, None, None, f"≤ {100 * lim:g} %", "%", f"only {x.n} run(s) gave k", x.name))
        else:
            out.append(_result(c, x.k_rel_sd <= lim, 100 * x.k_rel_sd, f"RSD ≤ {100 * lim:g} %", "%",
                               f"{x.n} runs, k = {x.k_mean_W_per_mK:.4f} W/(m·K), RSD {100 * x.k_rel_sd:.2f} %",
                               x.name))
    return out


def _length_to_diameter(m: Measurements, c: Criterion, cfg: QualificationConfig, p: ProbeProfile
                        ) -> list[CriterionResult]:
    lim = c.limit("min_ratio")
    g = m.geometry
    return [_result(c, g.length_to_diameter >= lim, g.length_to_diameter, f"L/d ≥ {lim:g}", "",
                    f"heater {g.length_mm:g} mm × {g.diameter_mm:g} mm")]


def _sensor_spacing(m: Measurements, c: Criterion, cfg: QualificationConfig, p: ProbeProfile
                    ) -> list[CriterionResult]:
    lo = c.limit("min_spacing_to_radius")
    hi = c.limit("max_spacing_to_length")
    radial = [s for s in p.sensors if not s.is_on_heater]
    if not radial:
        return [_na(c, "no sensor beside the heater (all sensors are inside the heated needle)")]
    out = []
    a = p.radius_mm
    length = p.heater_length_mm or math.nan
    for s in radial:
        r_a, r_l = s.radial_mm / a, s.radial_mm / length
        out.append(_result(c, r_a >= lo and r_l <= hi, s.radial_mm, f"{lo:g}·a ≤ r ≤ {hi:g}·L", "mm",
                           f"r = {s.radial_mm:g} mm = {r_a:.1f} needle radii = {r_l:.3f} L", s.name))
    return out


def _axial_loss(m: Measurements, c: Criterion, cfg: QualificationConfig, p: ProbeProfile) -> list[CriterionResult]:
    tol = c.limit("slope_tolerance")
    g = m.geometry
    out = []
    for s in g.sensors:
        where = "mid-length assumed" if s.axial_mm is None else f"{s.axial_mm:g} mm from the tip"
        out.append(_result(c, g.heating_s <= s.axial_limit_s, s.axial_limit_s, f"≥ intended heating {g.heating_s:g} s",
                           "s", f"slope within {100 * tol:g} % until {s.axial_limit_s:.0f} s in κ = "
                           f"{1e6 * g.intended_alpha_m2_per_s:.3g} mm²/s ({where})", s.name))
    return out


def _sample_radius(m: Measurements, c: Criterion, cfg: QualificationConfig, p: ProbeProfile
                   ) -> list[CriterionResult]:
    g = m.geometry
    if g.sample_radius_mm is None or g.boundary_time_s is None:
        return [_na(c, "no sample boundary in the intended use (field)")]
    tol = c.limit("slope_tolerance")
    return [_result(c, g.heating_s <= g.boundary_time_s, g.boundary_time_s, f"≥ intended heating {g.heating_s:g} s",
                    "s", f"a boundary at R = {g.sample_radius_mm:g} mm moves the slope by {100 * tol:g} % after "
                    f"{g.boundary_time_s:.0f} s (the medium is still warming at {100 * tol:g} % of the probe's rate "
                    f"out to {g.penetration_radius_mm:.1f} mm at {g.heating_s:g} s)")]


def _sample_height(m: Measurements, c: Criterion, cfg: QualificationConfig, p: ProbeProfile
                   ) -> list[CriterionResult]:
    g = m.geometry
    if g.sample_height_mm is None or g.required_height_mm is None:
        return [_na(c, "no sample boundary in the intended use (field)")]
    return [_result(c, g.sample_height_mm >= g.required_height_mm, g.sample_height_mm,
                    f"≥ L + R = {g.required_height_mm:g} mm", "mm",
                    f"sample {g.sample_height_mm:g} mm high for a {g.length_mm:g} mm heater")]


_JUDGES = {
    "insulation": _insulation, "heater_resistance": _heater_resistance, "heater_tcr": _heater_tcr,
    "heater_drift": _heater_drift, "tc_offset": _tc_offset, "tc_noise": _tc_noise, "response_time": _response_time,
    "probe_heat_capacity": _probe_heat_capacity, "contact_resistance": _contact_resistance,
    "reference_media": _reference_media, "calibration_factor": _calibration_factor,
    "calibration_bias": _calibration_bias, "repeatability": _repeatability,
    "length_to_diameter": _length_to_diameter, "sensor_spacing": _sensor_spacing, "axial_loss": _axial_loss,
    "sample_radius": _sample_radius, "sample_height": _sample_height,
}
assert set(_JUDGES) == set(CRITERION_IDS)
