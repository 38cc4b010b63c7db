"""What a reduction returns: per sensor the chosen values with their uncertainty, the flags, and every method's fit.

SI inside; ``to_json`` gives the interface keys (DESIGN.md, ``linerig reduce --json``) in trade units.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from . import units
from .cooling import CoolingFit
from .drift import Baseline
from .linesource import LateTimeFit
from .probe_model import ModelFit
from .pulse import PulseFit


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
    u_budget_alpha_rel: dict[str, float] = field(default_factory=dict)
    u_budget_rho_c_rel: dict[str, float] = field(default_factory=dict)
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
    pulse: PulseFit | None = None
    calibration_factor: float = 1.0
    calibration_factor_u: float = 0.0
    specific_heat_J_per_kgK: float | None = None
    radial_m: float = 0.0
    notes: list[str] = field(default_factory=list)
    methods: dict[str, dict[str, object]] = field(default_factory=dict)  # every method's values with their own u

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
            "u_budget_alpha_rel": dict(self.u_budget_alpha_rel) or None,
            "u_budget_rho_c_rel": dict(self.u_budget_rho_c_rel) or None,
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
            "calibration_factor_u": self.calibration_factor_u,
            "drift_K_per_h": (self.baseline.to_dict()["rate_K_per_h"] if self.baseline and self.baseline.present
                              else None),
            "drift_removed": bool(self.baseline and self.baseline.present and self.baseline.rate_K_per_s != 0.0),
            "k_line_W_per_mK": self.line.k_W_per_mK * self.calibration_factor if self.line else None,
            "k_model_W_per_mK": self.model.k_W_per_mK * self.calibration_factor if self.model else None,
            "k_recovery_W_per_mK": (self.recovery.k_W_per_mK * self.calibration_factor
                                    if self.recovery else None),
            "k_joint_W_per_mK": self.joint.k_W_per_mK * self.calibration_factor if self.joint else None,
            "pulse_check": self.pulse.peak.to_dict() if self.pulse and self.pulse.peak else None,
            "pulse_fit": self.pulse.to_dict() if self.pulse else None,
            "methods": {name: {key: _clean(v) for key, v in m.items()} for name, m in self.methods.items()},
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
