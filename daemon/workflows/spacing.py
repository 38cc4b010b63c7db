"""Spacing calibration of a dual needle: the effective distance between heater and sensing needle, from pulses in
a reference medium of known volumetric heat capacity, judged, stored with its history, and applied to later runs.

The pulse's ρc scales with 1/r² (a 2 % spacing error is a 4 % ρc error), and a needle pushed into soil bends, so
the spacing is measured where ρc is known: water gelled with a little agar (common practice: the gel stops
convection and holds nearly the water's ρc). The water's ρc = ρ·c_p comes from IAPWS-95 (Wagner & Pruß 2002, J.
Phys. Chem. Ref. Data 31:387) through the iapws package, at the bath temperature. The pulse fit then solves for the
spacing in place of ρc (``reduction.pulse.fit_pulse`` with ``rho_c_fixed``).
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Sequence
from dataclasses import asdict, dataclass

import numpy as np

from ..probe import ProbeProfile
from ..reduction.data import RunData
from ..reduction.live import DEFAULT_POWER_U_REL
from ..reduction.methods.pulse import spacing_fit
from ..reduction.record import HeatingRecord, SensorRecord
from .calibration import REMIND_DAYS, VALID_DAYS, CalibrationError, _utc, days_left, repeat_mean

# acceptance (judgement, no source unless named)
MAX_CHANGE_REL = 0.10       # an effective spacing more than 10 % from the nominal one is a bent needle: repair it
MAX_SPACING_U_REL = 0.01    # u(r)/r above 1 % gives more than 2 % on ρc: not a usable calibration
MAX_REPEAT_CV = 0.01        # repeat pulses should agree within 1 % in r (2 % in ρc; Campbell et al. 1991 report a
                            # 1 % CV of ρc on replicates)
MAX_CHANGE_FROM_LAST = 0.01  # a spacing that moved > 1 % since the last accepted one is flagged (no source)
BLOCKING_FLAGS = frozenset({"pulse_peak_disagree", "residual_trend", "no_peak", "not_settled", "noise_high"})
WATER_RHO_C_U_REL = 0.001   # IAPWS-95 density and isobaric heat capacity of the liquid near ambient: ≤ 0.1 %
                            # (Wagner & Pruß 2002 give 0.0001 % in density and 0.1 % in c_p; from memory)
AGAR_RHO_C_U_REL = 0.005    # ≤ 0.5 % agar by mass moves ρc by a fraction of that (common practice, no source)


@dataclass(frozen=True)
class HeatCapacityReference:
    medium: str
    rho_c_J_per_m3K: float
    rho_c_u_J_per_m3K: float
    temperature_C: float
    source: str

    @property
    def label(self) -> str:
        return f"{self.medium} at {self.temperature_C:.2f} °C"


SPACING_MEDIA = {
    "water": "still liquid water; IAPWS-95 via the iapws package. Free water convects around a heated needle: gel "
             "it, or keep the pulse short",
    "agar-water": "water gelled with a little agar (≤ 0.5 % by mass) to stop convection; taken as water (IAPWS-95) "
                  "with 0.5 % extra standard uncertainty for the gel (common practice, no source)",
}


def water_heat_capacity(temperature_C: float, pressure_MPa: float = 0.101325) -> float:
    """ρ·c_p of liquid water (J/(m³·K)) from IAPWS-95 (iapws package)."""
    try:
        from iapws import IAPWS95
    except ImportError as e:  # pragma: no cover - depends on the install
        raise CalibrationError("the water reference needs the 'iapws' package: pip install iapws") from e
    state = IAPWS95(T=temperature_C + 273.15, P=pressure_MPa)
    if "liquid" not in str(state.phase).lower():
        raise CalibrationError(f"water is not liquid at {temperature_C} °C and {pressure_MPa} MPa")
    return float(state.rho) * float(state.cp) * 1e3


def heat_capacity_reference(medium: str, temperature_C: float | None) -> HeatCapacityReference:
    """The medium's ρc at the bath temperature, with its standard uncertainty and source."""
    if medium not in SPACING_MEDIA:
        raise CalibrationError(f"{medium!r} is no reference for a spacing (its ρc must be known); choose one of "
                               f"{', '.join(SPACING_MEDIA)}")
    if temperature_C is None:
        raise CalibrationError(f"{medium}: give the bath temperature (°C); the reference ρc depends on it")
    if not 5.0 <= temperature_C <= 40.0:
        raise CalibrationError(f"{medium}: bath at {temperature_C} °C is outside 5–40 °C, the range this reference "
                               "is used for")
    rc = water_heat_capacity(temperature_C)
    u_rel = WATER_RHO_C_U_REL if medium == "water" else math.hypot(WATER_RHO_C_U_REL, AGAR_RHO_C_U_REL)
    return HeatCapacityReference(medium, rc, rc * u_rel, temperature_C, "IAPWS-95 (Wagner & Pruß 2002) via the "
                                 "iapws package: ρ·c_p of the liquid at 0.101325 MPa")


@dataclass(frozen=True)
class SpacingPulse:
    """One pulse in the reference medium: the effective spacing the fit found, its standard uncertainty."""

    spacing_m: float
    spacing_u_m: float
    run_id: int | None = None
    flags: tuple[str, ...] = ()


def measure_spacing(data: RunData, probe: ProbeProfile, sensor: str, reference: HeatCapacityReference,
                    run_id: int | None = None, flags: tuple[str, ...] = ()) -> SpacingPulse:
    """The effective spacing of one pulse in the reference medium (the pulse fit with ρc held at the reference's).

    Raises ``reduction.pulse.PulseFitError`` (a ValueError) when the record holds no pulse to read.
    """
    rec = SensorRecord.of(data, HeatingRecord.of(data), sensor, probe)
    fit = spacing_fit(rec, reference.rho_c_J_per_m3K, reference.rho_c_u_J_per_m3K / reference.rho_c_J_per_m3K,
                      DEFAULT_POWER_U_REL)
    return SpacingPulse(fit.spacing_m, fit.spacing_u_m, run_id, tuple(sorted({*fit.flags, *flags})))


def baseline_temperature_C(data: RunData, sensor: str) -> float | None:
    """Mean temperature of a sensor before the heater came on: the bath temperature of a calibration pulse."""
    base = data.temps_C[sensor][data.time_s < 0] if sensor in data.temps_C else np.zeros(0)
    return float(np.mean(base)) if base.size else None


@dataclass(frozen=True)
class SpacingOutcome:
    probe_serial: str
    sensor: str
    reference: HeatCapacityReference
    nominal_m: float
    spacing_m: float
    spacing_u_m: float
    n_runs: int
    repeat_cv: float | None
    accepted: bool
    reasons: tuple[str, ...]
    warnings: tuple[str, ...]
    created_utc: str
    expires_utc: str
    run_ids: tuple[int, ...] = ()

    def to_dict(self) -> dict[str, object]:
        d = asdict(self)
        d["reference"] = asdict(self.reference)
        return d


def evaluate_spacing(probe_serial: str, sensor: str, nominal_m: float, reference: HeatCapacityReference,
                     pulses: Sequence[SpacingPulse], *, previous_m: float | None = None,
                     now: dt.datetime | None = None, valid_days: int = VALID_DAYS) -> SpacingOutcome:
    """The effective spacing from one or more pulses, judged against the limits above.

    Several pulses: their mean, with u² = s²/n + ū² (spread of the mean plus the mean per-pulse uncertainty, which
    holds the parts that do not average out: the reference's ρc, the power reading, the needles).
    """
    if not pulses:
        raise CalibrationError("no reference pulse given: calibrate from at least one pulse in the reference medium")
    rs = np.array([p.spacing_m for p in pulses], dtype=float)
    us = np.array([p.spacing_u_m for p in pulses], dtype=float)
    if np.any(~np.isfinite(rs)) or np.any(rs <= 0):
        raise CalibrationError("a reference pulse gave no spacing: reduce it first, or leave it out")
    n = rs.size
    mean, u, cv = repeat_mean(rs, us)
    reasons: list[str] = []
    warnings: list[str] = []
    change = mean / nominal_m - 1.0
    if abs(change) > MAX_CHANGE_REL:
        reasons.append(f"effective spacing {mean * 1e3:.3f} mm is {100 * change:+.1f} % from the nominal "
                       f"{nominal_m * 1e3:.3g} mm: straighten or replace the needle")
    if u / mean > MAX_SPACING_U_REL:
        reasons.append(f"spacing uncertainty {100 * u / mean:.2f} % above {100 * MAX_SPACING_U_REL:.0f} % (that is "
                       f"{200 * u / mean:.1f} % on ρc)")
    if cv is not None and cv > MAX_REPEAT_CV:
        reasons.append(f"repeat pulses scatter {100 * cv:.2f} % (limit {100 * MAX_REPEAT_CV:.0f} %)")
    for p in pulses:
        bad = sorted(set(p.flags) & BLOCKING_FLAGS)
        if bad:
            reasons.append(f"run {p.run_id}: result flagged {', '.join(bad)}")
    if n == 1:
        warnings.append("a single pulse: repeat it (three are usual, minutes apart) to see the spacing's "
                        "repeatability")
    if previous_m and abs(mean / previous_m - 1) > MAX_CHANGE_FROM_LAST:
        warnings.append(f"spacing moved {100 * (mean / previous_m - 1):+.2f} % since the last accepted calibration: "
                        "has the needle been bent?")
    created = _utc(now)
    expires = created + dt.timedelta(days=valid_days)
    return SpacingOutcome(probe_serial, sensor, reference, nominal_m, mean, u, n, cv, not reasons, tuple(reasons),
                          tuple(warnings), created.isoformat(timespec="seconds"), expires.isoformat(timespec="seconds"),
                          tuple(p.run_id for p in pulses if p.run_id is not None))


@dataclass(frozen=True)
class SpacingStatus:
    state: str                       # "none" | "valid" | "due-soon" | "expired"
    message: str
    spacing_m: float | None = None
    spacing_u_m: float | None = None
    calibration_id: int | None = None


def spacing_status(history: Sequence[dict[str, object]], sensor: str, now: dt.datetime | None = None,
                   remind_days: int = REMIND_DAYS) -> SpacingStatus:
    """The spacing to apply now for one sensor, from a probe's spacing rows (as stored), with the expiry reminder.

    An expired calibration is still applied (it is the best spacing known) but says so loudly.
    """
    accepted = [h for h in history if h.get("accepted") and h.get("sensor") == sensor]
    if not accepted:
        return SpacingStatus("none", f"{sensor}: no accepted spacing calibration: the profile's nominal spacing is "
                                     "used (its uncertainty in the budget)")
    last = max(accepted, key=lambda h: (str(h.get("created_utc") or ""), int(h.get("id") or 0)))  # type: ignore[call-overload]
    r, u = float(last["spacing_m"]), float(last.get("spacing_u_m") or 0.0)  # type: ignore[arg-type]
    cid = int(last["id"]) if last.get("id") is not None else None  # type: ignore[call-overload]
    head = f"{sensor}: spacing {r * 1e3:.3f} ± {u * 1e3:.3f} mm (calibration {cid})"
    exp_s = str(last.get("expires_utc") or "")
    if not exp_s:
        return SpacingStatus("valid", head, r, u, cid)
    left = days_left(exp_s, now)
    if left < 0:
        return SpacingStatus("expired", f"{head} expired {-left:.0f} days ago: recalibrate the spacing", r, u, cid)
    if left <= remind_days:
        return SpacingStatus("due-soon", f"{head}, expires in {left:.0f} days", r, u, cid)
    return SpacingStatus("valid", f"{head}, valid until {exp_s[:10]}", r, u, cid)
