"""A finished qualification: verdicts, the numbers behind them, and the JSON kept in the database.

The JSON holds everything the report draws (down-sampled curves included), so a stored qualification can be
reported again without the recordings.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from datetime import UTC, datetime
from typing import Any

from linerig.daemon.probe import ProbeProfile

from .config import QualificationConfig
from .criteria import CriterionResult, evaluate, overall_passed
from .procedure import Measurements

RESULTS_VERSION = 1


def _clean(v: Any) -> Any:
    """JSON-safe: NaN and infinities become None, tuples lists, nested all the way down."""
    if isinstance(v, float):
        return v if math.isfinite(v) else None
    if isinstance(v, dict):
        return {str(k): _clean(x) for k, x in v.items()}
    if isinstance(v, list | tuple):
        return [_clean(x) for x in v]
    return v


def profile_summary(p: ProbeProfile) -> dict[str, Any]:
    return {"name": p.name, "serial": p.serial, "kind": p.kind, "heater_length_mm": p.heater_length_mm,
            "radius_mm": p.radius_mm, "heat_capacity_MJ_per_m3K": p.heat_capacity_MJ_per_m3K,
            "heater_resistance_ohm": p.heater_resistance_ohm, "heater_tcr_per_K": p.heater_tcr_per_K,
            "thermocouple": p.thermocouple,
            "sensors": [{"name": s.name, "radial_mm": s.radial_mm, "axial_mm": s.axial_mm} for s in p.sensors]}


def measurements_summary(m: Measurements, config: QualificationConfig) -> dict[str, Any]:
    runs = []
    for r in m.runs:
        d = asdict(r)
        if r.probe is not None:
            d["probe"] = {"k_W_per_mK": r.probe.k_W_per_mK,
                          "probe_rho_c_MJ_per_m3K": r.probe.probe_rho_c_J_per_m3K / 1e6,
                          "probe_rho_c_u_MJ_per_m3K": r.probe.probe_rho_c_u_J_per_m3K / 1e6, "h": r.probe.h,
                          "h_u": r.probe.h_u, "contact_m2K_per_W": r.probe.contact_m2K_per_W,
                          "alpha_J": r.probe.alpha_J, "alpha_mm2_per_s": r.probe.alpha_m2_per_s * 1e6,
                          "resid_rms_K": r.probe.resid_rms_K, "n": r.probe.n, "t_end_s": r.probe.t_end_s,
                          "success": r.probe.success}
        runs.append(d)
    return {
        "sensor": m.sensor,
        "insulation": {"MOhm": m.insulation_MOhm, "test_V": m.insulation_V},
        "heater": None if m.heater is None else asdict(m.heater),
        "resistance_points": [asdict(p) for p in m.resistance_points],
        "drift": None if m.drift is None else asdict(m.drift),
        "channels": {n: {"worst_offset_K": c.worst_offset_K, "noise_mK": c.noise_mK,
                         "baths": [asdict(b) for b in c.baths]} for n, c in m.channels.items()},
        "runs": runs,
        "calibration": None if m.calibration is None else asdict(m.calibration),
        "geometry": asdict(m.geometry),
        "intended_use": asdict(config.intended_use),
        "references": [asdict(r) for r in config.references],
        "reference_values": [asdict(r) for r in m.references],
        "procedure": asdict(config.procedure),
        "errors": dict(m.errors),
        "notes": list(m.notes),
        "bath_traces": m.bath_traces,
    }


@dataclass
class Qualification:
    profile: ProbeProfile
    config: QualificationConfig
    measurements: Measurements
    results: list[CriterionResult]
    simulated: bool = False
    notes: str = ""
    created_utc: str = field(default_factory=lambda: datetime.now(UTC).isoformat(timespec="seconds"))

    @property
    def passed(self) -> bool:
        return overall_passed(self.results)

    @property
    def failed_ids(self) -> list[str]:
        """Criteria that decide against the probe (failed or not measured), each once, in report order."""
        return list(dict.fromkeys(r.id for r in self.results if r.failed))

    def to_json(self) -> dict[str, Any]:
        return _clean({
            "version": RESULTS_VERSION,
            "created_utc": self.created_utc,
            "simulated": self.simulated,
            "passed": self.passed,
            "probe": profile_summary(self.profile),
            "criteria": [r.to_dict() for r in self.results],
            "summary": measurements_summary(self.measurements, self.config),
            "notes": self.notes,
        })


def judge(profile: ProbeProfile, config: QualificationConfig, m: Measurements, *, simulated: bool = False,
          notes: str = "") -> Qualification:
    """Evaluate every criterion and wrap it all up."""
    return Qualification(profile, config, m, evaluate(m, config, profile), simulated, notes)
