"""The qualification's measurements, as pure functions of recorded arrays (no I/O).

Heater resistance and its temperature coefficient come from a few bath points fitted together with a linear drift
term, so a resistance that creeps while the baths change cannot pose as a temperature coefficient. Thermocouple
offset and noise come from heater-off logging in an isothermal bath. In each reference medium the full probe model
(Blackwell 1954; Jaeger 1956; Carslaw & Jaeger 1959 §13.7) is fitted with the medium's volumetric heat capacity
known, which leaves the conductivity scale, the probe's own heat capacity and the contact resistance free; the
fitted model gives the thermal response time, and the late-time line fit on the window that physics allows gives
the conductivity for the calibration factor.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import least_squares

from linerig.daemon.probe import ProbeProfile
from linerig.daemon.reduction import window as win
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.data import ReductionError, RunData
from linerig.daemon.reduction.drift import Baseline, fit_baseline
from linerig.daemon.reduction.probe_model import ResponseTable, response_stehfest, superpose
from linerig.daemon.reduction.superposition import compress_steps, power_steps
from linerig.daemon.workflows.calibration import CalibrationError, reference_value

from .config import IntendedUse, ReferenceMedium
from .requests import Recording

MIN_HEATER_A = 1e-3
"""Below this current the heater is taken as off (no resistance reading)."""
SKIP_FRACTION = 0.2
"""Share of a heater check discarded at its start, while the heater warms (common practice, no source)."""
MIN_WINDOW_LN = 0.5
"""A reference-run window never spans less than half a unit of ln t (the reduction's own fallback)."""
MIN_TCR_SPAN_K = 5.0
"""Bath temperatures closer than this cannot give a temperature coefficient worth the name (common practice)."""
DRIFT_Z = 3.0
"""A reference run's baseline drift is removed only when it exceeds 3 standard uncertainties (common practice)."""


class QualificationDataError(ValueError):
    """A recording cannot give the measurement asked of it; the message says what is missing."""


def _probe_sensor_geometry(profile: ProbeProfile, sensor: str) -> tuple[float, float | None]:
    """(heater length m, sensor distance from the tip m or None)."""
    s = profile.sensor(sensor)
    length = profile.length_m
    if length is None:
        raise QualificationDataError(f"probe {profile.name!r} has no heater length")
    return length, None if s.axial_mm is None else s.axial_mm * 1e-3


def primary_sensor(profile: ProbeProfile, wanted: str = "") -> str:
    """The heater sensor used for calibration: ``wanted`` if given, else the first sensor inside the heater."""
    if wanted:
        s = profile.sensor(wanted)
        if not s.is_on_heater:
            raise QualificationDataError(f"sensor {wanted!r} is {s.radial_mm} mm from the heater; calibration and "
                                         "the probe model need a sensor inside the heated needle (radial_mm = 0)")
        return wanted
    for s in profile.sensors:
        if s.is_on_heater:
            return s.name
    raise QualificationDataError(f"probe {profile.name!r} has no sensor inside the heater (radial_mm = 0); the "
                                 "qualification needs one for the probe model and the calibration")


# ---- heater resistance --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class ResistancePoint:
    """Heater resistance at one bath temperature: the mean of V/I while heating gently."""

    bath_C: float
    heater_C: float
    R_ohm: float
    R_u_ohm: float
    n: int
    session_s: float


def resistance_point(rec: Recording, bath_C: float, heater_sensor: str | None) -> ResistancePoint:
    """R from the heating part of a bath recording; the heater's temperature is the bath reading plus the rise
    its sensor saw over the logged (heater-off) level, so a thermocouple offset does not enter."""
    on = rec.heating & (rec.heater_A > MIN_HEATER_A)
    idx = np.nonzero(on)[0]
    if idx.size < 3:
        raise QualificationDataError("the heater check has fewer than 3 samples with current flowing: is the heater "
                                     "open or disconnected?")
    idx = idx[int(SKIP_FRACTION * idx.size):]
    r = rec.heater_V[idx] / rec.heater_A[idx]
    heater_C = bath_C
    if heater_sensor is not None and heater_sensor in rec.temps_C:
        T = rec.temps_C[heater_sensor]
        off = (rec.t_s < 0) & np.isfinite(T)
        if np.any(off) and np.all(np.isfinite(T[idx])):
            heater_C = bath_C + float(np.mean(T[idx]) - np.mean(T[off]))
    u = float(np.std(r, ddof=1) / math.sqrt(r.size)) if r.size > 1 else 0.0
    return ResistancePoint(bath_C, heater_C, float(np.mean(r)), u, int(r.size), float(np.mean(rec.session_s[idx])))


@dataclass(frozen=True)
class HeaterFit:
    """R(T, t) = R20·(1 + TCR·(T − 20 °C)) + drift·(t − t̄), the drift term only when the design can separate it."""

    R20_ohm: float
    R20_u_ohm: float
    tcr_per_K: float
    tcr_u_per_K: float
    drift_rel_per_h: float | None
    drift_u_rel_per_h: float | None
    n: int
    resid_rms_ohm: float


def fit_heater_resistance(points: list[ResistancePoint]) -> HeaterFit:
    temps = [p.heater_C for p in points]
    if len(points) < 2 or max(temps) - min(temps) < MIN_TCR_SPAN_K:
        raise QualificationDataError(
            f"the temperature coefficient needs resistance at temperatures at least {MIN_TCR_SPAN_K:g} K apart "
            f"(heater at {', '.join(f'{t:.2f}' for t in temps)} °C): use baths further apart")
    T = np.array([p.heater_C - 20.0 for p in points])
    ts = np.array([p.session_s for p in points])
    R = np.array([p.R_ohm for p in points])
    u = np.array([max(p.R_u_ohm, 1e-6 * p.R_ohm) for p in points])
    cols = [np.ones_like(T), T]
    with_drift = False
    if len(points) >= 3:
        cand = np.column_stack([*cols, ts - ts.mean()])
        if np.linalg.matrix_rank(cand / np.abs(cand).max(axis=0).clip(min=1e-300)) == 3:
            cols.append(ts - ts.mean())
            with_drift = True
    A = np.column_stack(cols)
    w = 1.0 / u
    coef, *_ = np.linalg.lstsq(A * w[:, None], R * w, rcond=None)
    resid = R - A @ coef
    dof = len(points) - A.shape[1]
    chi2 = float(np.sum((resid * w) ** 2)) / dof if dof > 0 else 1.0
    cov = np.linalg.inv((A * w[:, None]).T @ (A * w[:, None])) * max(chi2, 1.0)
    r20 = float(coef[0])
    tcr = float(coef[1]) / r20
    tcr_u = math.hypot(math.sqrt(cov[1, 1]) / r20, tcr * math.sqrt(cov[0, 0]) / r20)
    drift = float(coef[2]) * 3600.0 / r20 if with_drift else None
    drift_u = math.sqrt(cov[2, 2]) * 3600.0 / r20 if with_drift else None
    return HeaterFit(r20, math.sqrt(cov[0, 0]), tcr, tcr_u, drift, drift_u, len(points),
                     float(np.sqrt(np.mean(resid**2))))


@dataclass(frozen=True)
class DriftFit:
    """Relative rate of change of the heater resistance corrected to 20 °C, per hour."""

    rate_rel_per_h: float
    rate_u_rel_per_h: float
    n: int
    span_s: float


def resistance_drift(session_s: np.ndarray, R_ohm: np.ndarray, heater_C: np.ndarray, tcr_per_K: float) -> DriftFit:
    """Straight line through R20(t) = R/(1 + TCR·(T − 20)); the heater's own warming is taken out by the TCR."""
    t = np.asarray(session_s, dtype=float)
    r20 = np.asarray(R_ohm, dtype=float) / (1.0 + tcr_per_K * (np.asarray(heater_C, dtype=float) - 20.0))
    ok = np.isfinite(t) & np.isfinite(r20)
    t, r20 = t[ok], r20[ok]
    if t.size < 10 or float(t.max() - t.min()) <= 0:
        raise QualificationDataError("a resistance drift needs at least 10 readings spread in time")
    tc = t - t.mean()
    slope = float(tc @ (r20 - r20.mean())) / float(tc @ tc)
    resid = r20 - r20.mean() - slope * tc
    s2 = float(resid @ resid) / (t.size - 2)
    u = math.sqrt(s2 / float(tc @ tc))
    mean = float(r20.mean())
    return DriftFit(slope * 3600.0 / mean, u * 3600.0 / mean, int(t.size), float(t.max() - t.min()))


def pool_drift(fits: list[DriftFit]) -> DriftFit:
    """Inverse-variance mean of several drift estimates (one per reference run)."""
    if not fits:
        raise QualificationDataError("no resistance drift was measured")
    w = np.array([1.0 / max(f.rate_u_rel_per_h, 1e-12) ** 2 for f in fits])
    rate = float(np.sum(w * [f.rate_rel_per_h for f in fits]) / w.sum())
    return DriftFit(rate, float(1.0 / math.sqrt(w.sum())), sum(f.n for f in fits), sum(f.span_s for f in fits))


def heating_resistance(rec: Recording) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(indices, R, session time) of the samples with current flowing, after the first seconds of heating."""
    on = rec.heating & (rec.heater_A > MIN_HEATER_A)
    idx = np.nonzero(on)[0]
    return idx, rec.heater_V[idx] / rec.heater_A[idx], rec.session_s[idx]


# ---- thermocouples in the bath ------------------------------------------------------------------------------------

@dataclass(frozen=True)
class ChannelStats:
    """One channel in one bath: offset against the reference thermometer, RMS about a straight line."""

    name: str
    bath_C: float
    offset_K: float
    noise_mK: float
    n: int
    faults: int = 0


def bath_channel_stats(name: str, t_s: np.ndarray, temp_C: np.ndarray, bath_C: float, faults: int = 0
                       ) -> ChannelStats:
    """A straight line absorbs the bath's slow drift, so the RMS is the channel's own noise and quantisation."""
    t = np.asarray(t_s, dtype=float)
    T = np.asarray(temp_C, dtype=float)
    ok = np.isfinite(T)
    if np.count_nonzero(ok) < 10:
        return ChannelStats(name, bath_C, math.nan, math.nan, int(np.count_nonzero(ok)), faults or 1)
    t, T = t[ok], T[ok]
    A = np.column_stack([np.ones_like(t), t - t.mean()])
    coef, *_ = np.linalg.lstsq(A, T, rcond=None)
    resid = T - A @ coef
    noise = math.sqrt(float(resid @ resid) / (T.size - 2))
    return ChannelStats(name, bath_C, float(T.mean()) - bath_C, 1000.0 * noise, int(T.size), faults)


@dataclass(frozen=True)
class ChannelSummary:
    """A channel over all baths: the worst offset and the pooled noise decide its criteria."""

    name: str
    worst_offset_K: float
    noise_mK: float
    baths: tuple[ChannelStats, ...]

    @property
    def faulted(self) -> bool:
        return any(b.faults for b in self.baths) or not math.isfinite(self.noise_mK)


def summarise_channel(stats: list[ChannelStats]) -> ChannelSummary:
    if not stats:
        raise QualificationDataError("no bath logging for this channel")
    offs = [s.offset_K for s in stats]
    worst = max(offs, key=lambda x: abs(x) if math.isfinite(x) else math.inf)
    n = np.array([s.n for s in stats], dtype=float)
    noise = np.array([s.noise_mK for s in stats])
    pooled = float(np.sqrt(np.sum(n * noise**2) / n.sum())) if np.all(np.isfinite(noise)) else math.nan
    return ChannelSummary(stats[0].name, float(worst), pooled, tuple(stats))


# ---- probe model in a medium of known heat capacity ----------------------------------------------------------------

@dataclass(frozen=True)
class ProbeFit:
    """Full probe model fitted in a reference medium (SI). α_J = 2πa²ρc/S, h = k/(aH); R_c = 1/H = a·h/k."""

    k_W_per_mK: float
    k_u_W_per_mK: float
    probe_rho_c_J_per_m3K: float
    probe_rho_c_u_J_per_m3K: float
    h: float
    h_u: float
    contact_m2K_per_W: float
    alpha_J: float
    alpha_m2_per_s: float
    resid_rms_K: float
    n: int
    t_end_s: float
    success: bool
    message: str


def _model(t: np.ndarray, step_t: np.ndarray, step_dq: np.ndarray, radius_m: float, rho_c: float,
           x: np.ndarray) -> np.ndarray:
    k, aj, h = math.exp(x[0]), math.exp(x[1]), float(x[2])
    tau_per_s = (k / rho_c) / radius_m**2
    ages = t[:, None] - step_t[None, :]
    ages = ages[ages > 0]
    table = ResponseTable(float(ages.min()) * tau_per_s, float(ages.max()) * tau_per_s, aj, h)
    return superpose(t, step_t, step_dq, table, tau_per_s) / (4.0 * math.pi * k)


def fit_probe_in_medium(t: np.ndarray, dT: np.ndarray, step_t: np.ndarray, step_dq: np.ndarray, radius_m: float,
                        medium_rho_c_J_per_m3K: float, k0: float, max_points: int = 1000) -> ProbeFit:
    """Fit ln k, ln α_J and h to the heater sensor's rise ΔT(t) with the medium's ρc fixed (α = k/ρc).

    A coarse grid over (α_J, h) at k0 picks the start, because the least-squares surface has shallow valleys.
    """
    t = np.asarray(t, dtype=float)
    dT = np.asarray(dT, dtype=float)
    if t.size < 10:
        raise QualificationDataError("the probe model needs at least 10 heating samples")
    if t.size > max_points:
        keep = np.unique(np.geomspace(1, t.size, max_points).astype(int) - 1)
        t, dT = t[keep], dT[keep]
    rc = float(medium_rho_c_J_per_m3K)

    def resid(x: np.ndarray) -> np.ndarray:
        return _model(t, step_t, step_dq, radius_m, rc, x) - dT

    lk = math.log(k0)
    starts = [np.array([lk, math.log(aj), h]) for aj in (0.5, 1.0, 2.0, 4.0, 8.0) for h in (0.05, 0.3, 1.0, 3.0)]
    x0 = min(starts, key=lambda x: float(np.sum(resid(x) ** 2)))
    lo = [lk - 2.0, math.log(0.05), 0.0]
    hi = [lk + 2.0, math.log(50.0), 20.0]
    res = least_squares(resid, x0, bounds=(lo, hi), diff_step=1e-4, xtol=1e-10, ftol=1e-10, max_nfev=200)
    k, aj, h = math.exp(res.x[0]), math.exp(res.x[1]), float(res.x[2])
    n = res.fun.size
    s2 = float(res.fun @ res.fun) / max(n - 3, 1)
    try:
        cov = np.linalg.pinv(res.jac.T @ res.jac) * s2
    except np.linalg.LinAlgError:
        cov = np.full((3, 3), np.nan)
    probe_rc = 2.0 * rc / aj
    return ProbeFit(
        k_W_per_mK=k, k_u_W_per_mK=k * math.sqrt(max(cov[0, 0], 0.0)),
        probe_rho_c_J_per_m3K=probe_rc, probe_rho_c_u_J_per_m3K=probe_rc * math.sqrt(max(cov[1, 1], 0.0)),
        h=h, h_u=math.sqrt(max(cov[2, 2], 0.0)), contact_m2K_per_W=radius_m * h / k, alpha_J=aj,
        alpha_m2_per_s=k / rc, resid_rms_K=math.sqrt(float(res.fun @ res.fun) / n), n=n, t_end_s=float(t[-1]),
        success=bool(res.success), message=str(res.message))


_TAU = np.logspace(-2, 6, 8 * 48 + 1)


def response_time_s(radius_m: float, alpha_m2_per_s: float, alpha_J: float, h: float, tol: float = 0.01) -> float:
    """Time after which the probe's local slope dΔT/d ln t stays within ``tol`` of q/(4πk).

    Exact: the slope of the inverted probe-model response on a fine grid of τ = αt/a² (no long-time expansion),
    so it holds for large contact resistance and light or heavy probes alike.
    """
    f = response_stehfest(_TAU, alpha_J, h)
    slope = np.gradient(f, np.log(_TAU))
    bad = np.nonzero(np.abs(slope - 1.0) > tol)[0]
    if bad.size == 0:
        tau = float(_TAU[0])
    elif bad[-1] + 1 >= _TAU.size:
        return math.inf
    else:
        tau = float(_TAU[bad[-1] + 1])
    return tau * radius_m**2 / alpha_m2_per_s


# ---- one reference run --------------------------------------------------------------------------------------------

@dataclass
class ReferenceRun:
    """What one heating in a reference medium gave."""

    medium: str
    repeat: int
    baseline_C: float
    k_raw_W_per_mK: float | None
    k_raw_u_W_per_mK: float | None
    window_s: tuple[float, float] | None
    probe: ProbeFit | None
    response_s: float | None
    drift: DriftFit | None
    rise_K: float
    q_mean_W_per_m: float
    heat_s: float
    axial_end_s: float
    flags: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    curve: dict[str, list[float]] = field(default_factory=dict)
    """Down-sampled heating curve for the report: t_s, dT_K, model_K."""


def run_data(rec: Recording, from_heater_on: bool = False) -> RunData:
    """The recording as the reduction's RunData; ``from_heater_on`` drops the baseline (no drift to remove)."""
    keep = rec.t_s >= 0 if from_heater_on else np.ones(rec.t_s.size, dtype=bool)
    return RunData(rec.t_s[keep], rec.q_W_per_m[keep], {k: v[keep] for k, v in rec.temps_C.items()})


def analyse_reference_run(rec: Recording, profile: ProbeProfile, sensor: str, medium: ReferenceMedium, repeat: int,
                          tcr_per_K: float, slope_tol: float = 0.01) -> ReferenceRun:
    """Probe model, response time, calibration k and resistance drift from one reference heating."""
    if sensor not in rec.temps_C:
        raise QualificationDataError(f"the recording has no channel {sensor!r}")
    T = rec.temps_C[sensor]
    heat = rec.heating
    if np.count_nonzero(heat) < 10:
        raise QualificationDataError(f"reference run in {medium.name}: fewer than 10 heating samples")
    base = (rec.t_s < 0) & np.isfinite(T)
    if np.count_nonzero(base) < 5:
        raise QualificationDataError(f"reference run in {medium.name}: fewer than 5 baseline samples")
    if not np.all(np.isfinite(T[heat])):
        raise QualificationDataError(f"reference run in {medium.name}: channel {sensor!r} faulted while heating")
    baseline = fit_baseline(rec.t_s[base], T[base])
    notes: list[str] = []
    flags: list[str] = []
    drift_seen = abs(baseline.rate_K_per_s) > DRIFT_Z * baseline.rate_u_K_per_s
    if not drift_seen:
        # a thermostatted medium that shows no drift: extrapolating a slope fitted to noise only adds scatter
        baseline = Baseline(float(np.mean(T[base])), 0.0, 0.0, baseline.n, baseline.span_s, baseline.resid_rms_K)
        notes.append("baseline drift not significant: not subtracted")
    dT = T - baseline.at(rec.t_s)
    length, axial = _probe_sensor_geometry(profile, sensor)
    a = profile.radius_m
    heat_end = float(rec.t_s[heat][-1])
    t_ax = win.axial_end_s(length, medium.alpha_m2_per_s, slope_tol, axial)

    # probe model up to where axial loss starts to bend the curve
    st, sdq = power_steps(rec.t_s, rec.q_W_per_m)
    st, sdq = compress_steps(st, sdq)
    t_fit_end = min(heat_end, t_ax)
    sel = heat & (rec.t_s > 0) & (rec.t_s <= t_fit_end)
    probe: ProbeFit | None = None
    response: float | None = None
    try:
        probe = fit_probe_in_medium(rec.t_s[sel], dT[sel], st, sdq, a, medium.rho_c_J_per_m3K, medium.k_W_per_mK)
        response = response_time_s(a, probe.alpha_m2_per_s, probe.alpha_J, probe.h, slope_tol)
        if not probe.success:
            notes.append(f"probe model fit did not converge: {probe.message}")
    except (QualificationDataError, ValueError, np.linalg.LinAlgError, FloatingPointError) as e:
        notes.append(f"probe model not fitted: {e}")

    # late-time window from physics (the medium is known), then the reduction's line fit on it
    end = min(heat_end, t_ax)
    start = max(response if response is not None and math.isfinite(response) else 0.1 * end, 0.1 * end)
    if math.log(end / start) < MIN_WINDOW_LN:
        start = end / math.exp(MIN_WINDOW_LN)
        flags.append("window_short")
        notes.append(f"late-time window only {start:.0f}–{end:.0f} s: response and axial-loss limits leave little")
    k_raw = k_u = None
    window = None
    try:
        data = run_data(rec) if drift_seen else run_data(rec, from_heater_on=True)
        red = reduce_run(data, profile, method="line", window_s=(start, end), sensors=[sensor], stable_rule=False)
        r = red.sensors[sensor]
        k_raw, k_u, window = r.k_raw_W_per_mK, r.k_raw_u_W_per_mK, r.window_s
        flags.extend(f for f in r.flags if f not in flags and not (f == "no_baseline" and not drift_seen))
    except ReductionError as e:
        notes.append(f"late-time fit failed: {e}")

    # heater resistance during the run, corrected to 20 °C
    drift = None
    idx, R, ts = heating_resistance(rec)
    if idx.size >= 10:
        skip = idx.size // 10
        try:
            drift = resistance_drift(ts[skip:], R[skip:], T[idx][skip:], tcr_per_K)
        except QualificationDataError as e:
            notes.append(str(e))

    th, dTh = rec.t_s[heat & (rec.t_s > 0)], dT[heat & (rec.t_s > 0)]
    keep = np.unique(np.geomspace(1, th.size, min(th.size, 150)).astype(int) - 1)
    curve = {"t_s": th[keep].tolist(), "dT_K": dTh[keep].tolist()}
    if probe is not None:
        curve["model_K"] = _model(th[keep], st, sdq, a, medium.rho_c_J_per_m3K,
                                  np.array([math.log(probe.k_W_per_mK), math.log(probe.alpha_J), probe.h])).tolist()
    return ReferenceRun(medium.name, repeat, float(np.mean(T[base])), k_raw, k_u, window, probe, response, drift,
                        float(np.max(dTh)),
                        float(np.mean(rec.q_W_per_m[heat])), heat_end, t_ax, flags, notes, curve)


# ---- calibration over media ----------------------------------------------------------------------------------------

@dataclass(frozen=True)
class ReferenceConductivity:
    name: str
    k_W_per_mK: float
    k_u_W_per_mK: float
    temperature_C: float | None
    source: str


def reference_conductivity(ref: ReferenceMedium, temperature_C: float | None) -> ReferenceConductivity:
    """The medium's k: from the calibration table `linerig calibrate` uses when the medium names one (water via
    IAPWS 2011 at the measured temperature), else the settings file's value."""
    if ref.calibration_medium:
        try:
            v = reference_value(ref.calibration_medium, temperature_C)
        except CalibrationError as e:
            raise QualificationDataError(f"reference {ref.name}: {e}") from e
        return ReferenceConductivity(ref.name, v.k_W_per_mK, v.k_u_W_per_mK, v.temperature_C, v.source)
    return ReferenceConductivity(ref.name, ref.k_W_per_mK, ref.k_u_W_per_mK, temperature_C, ref.source)


@dataclass(frozen=True)
class MediumSummary:
    name: str
    k_ref_W_per_mK: float
    k_ref_u_W_per_mK: float
    n: int
    k_mean_W_per_mK: float
    k_rel_sd: float
    factor: float
    bias_rel: float
    residual_bias_rel: float


@dataclass(frozen=True)
class Calibration:
    """F minimises Σ(F·k̄_m/k_ref,m − 1)² over the media; u(F) combines the media's scatter and reference values."""

    factor: float
    factor_u: float
    media: tuple[MediumSummary, ...]


def summarise_calibration(runs: list[ReferenceRun], references: list[ReferenceConductivity]) -> Calibration:
    per: list[tuple[ReferenceConductivity, np.ndarray]] = []
    for ref in references:
        ks = np.array([r.k_raw_W_per_mK for r in runs if r.medium == ref.name and r.k_raw_W_per_mK is not None])
        if ks.size:
            per.append((ref, ks))
    if not per:
        raise QualificationDataError("no reference run gave a conductivity")
    x = np.array([ks.mean() / ref.k_W_per_mK for ref, ks in per])
    F = float(x.sum() / (x * x).sum())
    media = []
    var_terms = []
    for (ref, ks), xm in zip(per, x, strict=True):
        sd = float(ks.std(ddof=1) / ks.mean()) if ks.size > 1 else math.nan
        media.append(MediumSummary(ref.name, ref.k_W_per_mK, ref.k_u_W_per_mK, int(ks.size), float(ks.mean()), sd,
                                   float(1.0 / xm), float(xm - 1.0), float(F * xm - 1.0)))
        var_terms.append((ref.k_u_W_per_mK / ref.k_W_per_mK) ** 2 + (0.0 if math.isnan(sd) else sd**2 / ks.size))
    m = len(per)
    spread = float(np.std(1.0 / x, ddof=1) / F) ** 2 / m if m > 1 else 0.0
    u_rel = math.sqrt(spread + float(np.mean(var_terms)) / m)
    return Calibration(F, F * u_rel, tuple(media))


# ---- geometry and intended use ------------------------------------------------------------------------------------

@dataclass(frozen=True)
class SensorGeometry:
    name: str
    radial_mm: float
    axial_mm: float | None
    on_heater: bool
    axial_limit_s: float
    """Heating time after which axial loss bends this sensor's slope by more than the tolerance (intended medium)."""


@dataclass(frozen=True)
class Geometry:
    length_mm: float
    diameter_mm: float
    length_to_diameter: float
    sensors: tuple[SensorGeometry, ...]
    intended_alpha_m2_per_s: float
    heating_s: float
    sample_radius_mm: float | None
    sample_height_mm: float | None
    boundary_time_s: float | None
    """Time at which a boundary at the sample radius has moved the centre's slope by the tolerance."""
    penetration_radius_mm: float
    """√(4κt·ln(1/tol)): beyond it the medium warms at less than tol of the probe's rate (for reference)."""
    required_height_mm: float | None


def boundary_time_s(sample_radius_m: float, probe_radius_m: float, alpha_m2_per_s: float, tol: float = 0.01
                    ) -> float:
    """When a boundary held at the initial temperature at radius R moves the probe's slope by ``tol``.

    Line source of the probe's radius in a cylinder (Laplace solution K0 − K0(βR)/I0(βR)·I0, Carslaw & Jaeger
    1959), inverted numerically and compared with the unbounded slope. An insulated boundary acts on about the same
    time scale (with the opposite sign).
    """
    rho = sample_radius_m / probe_radius_m
    if rho <= 1.01:
        return 0.0
    tau = np.logspace(math.log10(rho**2 * 1e-3), math.log10(rho**2 * 10.0), 800)
    lt = np.log(tau)
    sb = np.gradient(response_stehfest(tau, None, 0.0, 1.0, rho), lt)
    si = np.gradient(response_stehfest(tau, None, 0.0), lt)
    dev = np.abs(sb / si - 1.0)
    j = int(np.argmax(dev > tol))
    if dev[j] <= tol:
        return math.inf
    return float(tau[max(j - 1, 0)]) * probe_radius_m**2 / alpha_m2_per_s


def geometry_checks(profile: ProbeProfile, intended: IntendedUse, axial_tol: float = 0.01,
                    boundary_tol: float = 0.01) -> Geometry:
    length = profile.length_m
    if length is None:
        raise QualificationDataError(f"probe {profile.name!r} has no heater length")
    alpha = intended.alpha_m2_per_s
    sensors = []
    for s in profile.sensors:
        axial = None if s.axial_mm is None else s.axial_mm * 1e-3
        sensors.append(SensorGeometry(s.name, s.radial_mm, s.axial_mm, s.is_on_heater,
                                      win.axial_end_s(length, alpha, axial_tol, axial)))
    t = intended.heating_s
    pen = math.sqrt(4.0 * alpha * t * math.log(1.0 / boundary_tol))
    R = H = tb = need_h = None
    if intended.has_sample:
        R = 0.5 * intended.sample_diameter_mm
        H = intended.sample_height_mm
        tb = boundary_time_s(R * 1e-3, profile.radius_m, alpha, boundary_tol)
        need_h = profile.heater_length_mm + R if profile.heater_length_mm is not None else None
    d = 2.0 * profile.radius_mm
    return Geometry(length * 1e3, d, length * 1e3 / d, tuple(sensors), alpha, t, R, H, tb, pen * 1e3, need_h)
