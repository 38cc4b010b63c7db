"""Probe calibration in reference media: what the medium's conductivity is (and where that number comes from),
whether a calibration is acceptable, and when it falls due again.

The probe factor itself is F = k_reference / k_measured with relative uncertainties in quadrature
(``daemon.reduction.calibration.probe_factor``; the probe constant of ASTM D5334 and D5930).
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Sequence
from dataclasses import asdict, dataclass, field

import numpy as np

from linerig.daemon.reduction.calibration import probe_factor

# --- acceptance and expiry -----------------------------------------------------------------------------------
FACTOR_LIMITS = (0.90, 1.10)        # beyond ±10 % means a probe or set-up fault (common practice, no source)
MAX_FACTOR_U_REL = 0.03             # u(F)/F above 3 % is not a usable calibration (common practice, no source)
MAX_REPEAT_CV = 0.035               # repeat runs should agree within ±3.5 % (Manohar, Yarbrough & Booth 2000,
                                    # J. Testing & Evaluation 28(5):345–351, their reported repeatability)
MAX_CHANGE_FROM_LAST = 0.03         # a factor that moved > 3 % since the last accepted one is flagged (no source)
VALID_DAYS = 365                    # recalibrate every 12 months (common practice, no source)
REMIND_DAYS = 30                    # remind a month before expiry (common practice, no source)
BLOCKING_RESULT_FLAGS = frozenset({"not_settled", "residual_trend", "window_short", "noise_high"})
# Heating and cooling disagreeing in a liquid can mean convection, but the recovery fit ignores the probe's heat
# capacity, so it is reported as a warning, not a rejection (judgement, no source).
WARNING_RESULT_FLAGS = frozenset({"heat_cool_disagree", "drift", "rise_above_limit", "contact_resistance_high"})


class CalibrationError(ValueError):
    """A reference medium or calibration input is unusable; the message says what to change."""


@dataclass(frozen=True)
class ReferenceValue:
    medium: str
    k_W_per_mK: float
    k_u_W_per_mK: float          # standard uncertainty
    temperature_C: float | None
    source: str
    notes: tuple[str, ...] = ()

    @property
    def label(self) -> str:
        at = "" if self.temperature_C is None else f" at {self.temperature_C:.2f} °C"
        return f"{self.medium}{at}"


@dataclass(frozen=True)
class ReferenceMedium:
    name: str
    description: str
    source: str
    valid_C: tuple[float, float]
    notes: tuple[str, ...] = ()


MEDIA: dict[str, ReferenceMedium] = {
    "water": ReferenceMedium(
        "water", "still liquid water at atmospheric pressure",
        "IAPWS Formulation 2011 for the thermal conductivity of ordinary water substance (Huber et al. 2012, "
        "J. Phys. Chem. Ref. Data 41:033102), evaluated with the iapws package at the bath temperature",
        (5.0, 40.0),
        ("free water convects: keep the rise small and the heating short, or gel it with agar",)),
    "agar-water": ReferenceMedium(
        "agar-water", "water gelled with a little agar (≤ 0.5 % by mass) to stop convection",
        "taken as water, IAPWS 2011 via the iapws package, with 1 % extra standard uncertainty for the gel "
        "(common practice, no source)",
        (5.0, 40.0)),
    "glycerol": ReferenceMedium(
        "glycerol", "anhydrous glycerol (glycerin)",
        "handbook value 0.285 W/(m·K) near 20–25 °C, quoted from memory (literature spread 0.28–0.29 W/(m·K)); "
        "glycerol named as a reference liquid in ASTM D5334 (clause and value not checked)",
        (15.0, 35.0),
        ("glycerol takes up water from the air, which raises its conductivity: use a fresh, sealed supply",)),
}
GLYCEROL_K = 0.285
GLYCEROL_K_U = 0.006     # standard; covers the 0.28–0.29 spread and the from-memory status
AGAR_EXTRA_U_REL = 0.01
WATER_K_U_REL = 0.005    # IAPWS 2011 quotes about 1 % (k = 2) for the liquid near ambient (from memory)


def water_conductivity(temperature_C: float, pressure_MPa: float = 0.101325) -> float:
    """k of liquid water from the IAPWS 2011 formulation (iapws package: IAPWS-95 density, then _ThCond)."""
    try:
        from iapws import IAPWS95
    except ImportError as e:  # pragma: no cover - depends on the install
        raise CalibrationError("the water reference needs the 'iapws' package: pip install iapws") from e
    state = IAPWS95(T=temperature_C + 273.15, P=pressure_MPa)
    if "liquid" not in str(state.phase).lower():
        raise CalibrationError(f"water is not liquid at {temperature_C} °C and {pressure_MPa} MPa")
    return float(state.k)


def reference_value(medium: str, temperature_C: float | None) -> ReferenceValue:
    """The medium's conductivity at the bath temperature, with its standard uncertainty and source."""
    if medium not in MEDIA:
        raise CalibrationError(f"unknown reference medium {medium!r}; choose one of {', '.join(MEDIA)}")
    m = MEDIA[medium]
    if temperature_C is None:
        if medium == "glycerol":
            temperature_C = None
        else:
            raise CalibrationError(f"{medium}: give the bath temperature (°C); the reference value depends on it")
    notes = list(m.notes)
    if temperature_C is not None and not (m.valid_C[0] <= temperature_C <= m.valid_C[1]):
        raise CalibrationError(f"{medium}: bath at {temperature_C} °C is outside the range this reference is "
                               f"used for ({m.valid_C[0]:g}–{m.valid_C[1]:g} °C)")
    if medium == "water":
        assert temperature_C is not None
        k = water_conductivity(temperature_C)
        return ReferenceValue(medium, k, k * WATER_K_U_REL, temperature_C, m.source, tuple(notes))
    if medium == "agar-water":
        assert temperature_C is not None
        k = water_conductivity(temperature_C)
        return ReferenceValue(medium, k, k * math.hypot(WATER_K_U_REL, AGAR_EXTRA_U_REL), temperature_C, m.source,
                              tuple(notes))
    return ReferenceValue(medium, GLYCEROL_K, GLYCEROL_K_U, temperature_C, m.source, tuple(notes))


# --- one calibration -----------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Measurement:
    """One run in the reference medium: the probe's uncalibrated k and its standard uncertainty."""

    k_W_per_mK: float
    k_u_W_per_mK: float
    run_id: int | None = None
    flags: tuple[str, ...] = ()


@dataclass(frozen=True)
class CalibrationOutcome:
    probe_serial: str
    reference: ReferenceValue
    measured_k_W_per_mK: float
    measured_k_u_W_per_mK: float
    factor: float
    factor_u: float
    n_runs: int
    repeat_cv: float | None
    accepted: bool
    reasons: tuple[str, ...]
    warnings: tuple[str, ...]
    created_utc: str
    expires_utc: str
    run_ids: tuple[int, ...] = field(default_factory=tuple)

    def to_dict(self) -> dict[str, object]:
        d = asdict(self)
        d["reference"] = asdict(self.reference)
        return d


def _utc(now: dt.datetime | None) -> dt.datetime:
    now = now or dt.datetime.now(dt.UTC)
    return now if now.tzinfo else now.replace(tzinfo=dt.UTC)


def repeat_mean(values: Sequence[float], us: Sequence[float]) -> tuple[float, float, float | None]:
    """(mean, its standard uncertainty, CV or None for one value) of repeat calibration runs.

    u² = s²/n + ū²: the spread of the mean plus the mean per-run uncertainty, which holds the parts that do not
    average out (the reference, the power reading).
    """
    v = np.asarray(values, dtype=float)
    n = v.size
    mean = float(v.mean())
    spread2 = float(np.var(v, ddof=1)) / n if n >= 2 else 0.0
    cv = float(np.std(v, ddof=1) / mean) if n >= 2 else None
    return mean, math.sqrt(spread2 + float(np.mean(np.asarray(us, dtype=float))) ** 2), cv


def days_left(expires_utc: str, now: dt.datetime | None = None) -> float:
    """Days from ``now`` to a stored expiry (negative once expired)."""
    exp = dt.datetime.fromisoformat(expires_utc)
    exp = exp if exp.tzinfo else exp.replace(tzinfo=dt.UTC)
    return (exp - _utc(now)).total_seconds() / 86400.0


def evaluate_calibration(probe_serial: str, reference: ReferenceValue, runs: Sequence[Measurement], *,
                         previous_factor: float | None = None, now: dt.datetime | None = None,
                         valid_days: int = VALID_DAYS) -> CalibrationOutcome:
    """Factor from one or more runs in the reference medium, judged against the acceptance limits above.

    Several runs: the measured k is their mean, with u² = s²/n + ū² (spread of the mean plus the mean per-run
    uncertainty, which holds parts that do not average out).
    """
    if not runs:
        raise CalibrationError("no reference run given: calibrate from at least one run in the reference medium")
    ks = np.array([r.k_W_per_mK for r in runs], dtype=float)
    us = np.array([r.k_u_W_per_mK for r in runs], dtype=float)
    if np.any(~np.isfinite(ks)) or np.any(ks <= 0):
        raise CalibrationError("a reference run has no valid conductivity: reduce it first, or leave it out")
    n = ks.size
    k_m, u_m, cv = repeat_mean(ks, us)
    f, f_u = probe_factor(k_m, reference.k_W_per_mK, reference.k_u_W_per_mK, u_m)
    reasons: list[str] = []
    warnings: list[str] = list(reference.notes)
    lo, hi = FACTOR_LIMITS
    if not lo <= f <= hi:
        reasons.append(f"factor {f:.4f} outside {lo:.2f}–{hi:.2f}: check probe geometry, power reading and medium")
    if f_u / f > MAX_FACTOR_U_REL:
        reasons.append(f"factor uncertainty {100 * f_u / f:.2f} % above {100 * MAX_FACTOR_U_REL:.0f} %")
    if cv is not None and cv > MAX_REPEAT_CV:
        reasons.append(f"repeat runs scatter {100 * cv:.2f} % (limit {100 * MAX_REPEAT_CV:.1f} %)")
    for r in runs:
        bad = sorted(set(r.flags) & BLOCKING_RESULT_FLAGS)
        if bad:
            reasons.append(f"run {r.run_id}: result flagged {', '.join(bad)}")
        soft = sorted(set(r.flags) & WARNING_RESULT_FLAGS)
        if soft:
            warnings.append(f"run {r.run_id}: result flagged {', '.join(soft)} (check for convection or drift)")
    if n == 1:
        warnings.append("a single run: repeat it (three runs are usual) to see the probe's repeatability")
    if previous_factor and abs(f / previous_factor - 1) > MAX_CHANGE_FROM_LAST:
        warnings.append(f"factor moved {100 * (f / previous_factor - 1):+.1f} % since the last accepted "
                        "calibration: look for probe damage or a changed set-up")
    created = _utc(now)
    expires = created + dt.timedelta(days=valid_days)
    return CalibrationOutcome(
        probe_serial, reference, k_m, u_m, f, f_u, n, cv, not reasons, tuple(reasons), tuple(warnings),
        created.isoformat(timespec="seconds"), expires.isoformat(timespec="seconds"),
        tuple(r.run_id for r in runs if r.run_id is not None))


# --- history and reminders -----------------------------------------------------------------------------------
@dataclass(frozen=True)
class CalibrationStatus:
    state: str                    # "none" | "valid" | "due-soon" | "expired"
    message: str
    factor: float | None = None
    factor_u: float | None = None
    calibration_id: int | None = None
    expires_utc: str | None = None
    days_left: float | None = None


def calibration_status(history: Sequence[dict[str, object]], now: dt.datetime | None = None,
                       remind_days: int = REMIND_DAYS) -> CalibrationStatus:
    """The factor to apply now, from a probe's calibration rows (as stored), with the expiry reminder."""
    accepted = [h for h in history if h.get("accepted")]
    if not accepted:
        return CalibrationStatus("none", "no accepted calibration: results are uncalibrated (factor 1)")
    last = max(accepted, key=lambda h: str(h.get("created_utc") or ""))
    exp_s = str(last.get("expires_utc") or "")
    factor = float(last["factor"])  # type: ignore[arg-type]
    fu = float(last.get("factor_u") or 0.0)  # type: ignore[arg-type]
    cid = int(last["id"]) if last.get("id") is not None else None  # type: ignore[call-overload]
    if not exp_s:
        return CalibrationStatus("valid", f"factor {factor:.4f} (no expiry recorded)", factor, fu, cid)
    left = days_left(exp_s, now)
    if left < 0:
        return CalibrationStatus("expired", f"calibration expired {-left:.0f} days ago ({exp_s[:10]}): "
                                 "recalibrate before trusting results", factor, fu, cid, exp_s, left)
    if left <= remind_days:
        return CalibrationStatus("due-soon", f"calibration expires in {left:.0f} days ({exp_s[:10]}): "
                                 "plan a recalibration", factor, fu, cid, exp_s, left)
    return CalibrationStatus("valid", f"factor {factor:.4f} valid until {exp_s[:10]}", factor, fu, cid, exp_s, left)
