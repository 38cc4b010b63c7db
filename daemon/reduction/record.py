"""What every method sees of one sensor: its samples, the measured power as steps, the baseline and the geometry.

Built once per run (``HeatingRecord``: power steps, superposition regressors, heating span) and once per sensor
(``SensorRecord``: baseline removed, geometry from the probe profile), so the methods never repeat that work or
disagree about it.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ..probe import ProbeProfile
from .data import ImplausibleRun, ReductionError, RunData, contiguous, heating_signal_problem
from .drift import Baseline, fit_baseline, no_baseline
from .superposition import log_time_regressor, power_steps
from .timezero import TimeZero, early_rise

MIN_HEATING_SAMPLES = 10
MIN_PULSE_SAMPLES = 2


@dataclass(frozen=True)
class Geometry:
    """Where a sensor sits and what the probe around it is made of (SI; None where the profile does not say)."""

    probe_radius_m: float | None
    sensor_radius_m: float
    sensor_radius_u_m: float
    on_heater: bool
    axial_m: float | None
    probe_C_J_per_m3K: float | None
    length_m: float | None
    known: bool       # a probe profile was given (r is a measured radius, not a stand-in)
    in_profile: bool  # the profile names this sensor (else it is taken as inside the heated needle)
    spacing_calibrated: bool = False  # the radius is an effective spacing from a pulse in a medium of known ρc
    sample_radius_m: float | None = None  # a finite sample around the probe (None: the ground, unbounded)

    @classmethod
    def of(cls, probe: ProbeProfile | None, name: str) -> Geometry:
        if probe is None:
            return cls(None, 0.0, 0.0, True, None, None, None, False, False)
        cap, length = probe.heat_capacity_J_per_m3K, probe.length_m
        if probe.has_sensor(name):
            s = probe.sensor(name)
            axial = s.axial_mm * 1e-3 if s.axial_mm is not None else None
            return cls(probe.radius_m, probe.sensor_radius_m(name), probe.sensor_radius_u_m(name), s.is_on_heater,
                       axial, cap, length, True, True, s.spacing_calibrated, probe.sample_radius_m)
        return cls(probe.radius_m, probe.radius_m, probe.radius_u_m, True, None, cap, length, True, False,
                   sample_radius_m=probe.sample_radius_m)

    @property
    def line_radius_m(self) -> float | None:
        """The radius the late-time line's intercept refers to (None without a profile: no intercept α)."""
        return self.sensor_radius_m if self.known else None

    @property
    def radial_m(self) -> float:
        return 0.0 if self.on_heater else self.sensor_radius_m


@dataclass(frozen=True)
class HeatingRecord:
    """The run's power as steps (Duhamel), its superposition regressors and the heating span, shared by sensors."""

    t: np.ndarray
    q: np.ndarray
    steps_t: np.ndarray
    steps_dq: np.ndarray
    X: np.ndarray
    Q: np.ndarray
    heat: np.ndarray      # heating samples used by every heating fit (t > 0, power on, before switch-off)
    heat_span: slice | np.ndarray  # the same as a slice when contiguous: views, not copies, of a long record
    t_off: float | None   # heater switch-off (None: still heating at the end of the record)
    heating_s: float
    i_off: int            # index of the first sample after switch-off (the record's length if none)
    shift_s: float = 0.0  # how far the power column's steps were moved (``timezero``)

    @classmethod
    def of(cls, data: RunData) -> HeatingRecord:
        t = data.time_s
        _, i1 = data.heating_span()
        steps_t, steps_dq = power_steps(t, data.q_W_per_m)
        return cls._build(t, data.q_W_per_m, steps_t, steps_dq, data.heater_off_s(), i1, 0.0)

    @classmethod
    def _build(cls, t: np.ndarray, q: np.ndarray, steps_t: np.ndarray, steps_dq: np.ndarray,
               t_off: float | None, i_off: int, shift_s: float) -> HeatingRecord:
        X, Q = log_time_regressor(t, steps_t, steps_dq)
        heat = (t > 0) & (Q > 0) & (np.arange(t.size) < i_off)
        n = int(np.count_nonzero(heat))
        decay = np.count_nonzero(t > t_off) if t_off is not None else 0
        # a short pulse logged at 1 Hz has few heating samples; its decay is what a radial sensor reads
        pulse = t_off is not None and decay >= MIN_HEATING_SAMPLES and t[-1] - t_off >= t_off
        if n < (MIN_PULSE_SAMPLES if pulse else MIN_HEATING_SAMPLES):
            raise ReductionError(f"only {n} heating samples; at least {MIN_HEATING_SAMPLES} are needed"
                                 + (f" ({MIN_PULSE_SAMPLES} for a pulse)" if pulse else ""))
        span = contiguous(heat)
        heating_s = t_off if t_off is not None else float(t[span][-1])
        return cls(t, q, steps_t, steps_dq, X, Q, heat, span, t_off, heating_s, i_off, shift_s)

    def shifted(self, shift_s: float) -> HeatingRecord:
        """The same run with every power step moved by ``shift_s`` from where the power column put it."""
        d = shift_s - self.shift_s
        if d == 0.0:
            return self
        t_off = self.t_off + d if self.t_off is not None else None
        return self._build(self.t, self.q, self.steps_t + d, self.steps_dq, t_off, self.i_off, shift_s)


@dataclass(frozen=True)
class SensorRecord:
    """One sensor: raw temperatures, ΔT above the baseline, and views of the heating samples for the line fits."""

    name: str
    run: HeatingRecord
    probe: ProbeProfile | None
    T: np.ndarray
    dT: np.ndarray
    baseline: Baseline
    geometry: Geometry
    time_zero: TimeZero | None = None  # the temperature rose before the power column's switch-on

    @classmethod
    def of(cls, data: RunData, run: HeatingRecord, name: str, probe: ProbeProfile | None) -> SensorRecord:
        if name not in data.temps_C:
            raise ReductionError(f"no column T_{name}_C in the run")
        t, T = run.t, data.temps_C[name]
        base = t < 0
        baseline = fit_baseline(t[base], T[base]) if np.any(base) else no_baseline(float(T[run.heat_span][0]))
        geometry = Geometry.of(probe, name)
        dT = T - baseline.at(t)
        if geometry.on_heater:
            problem = heating_signal_problem(name, t[run.heat_span], dT[run.heat_span])
        else:  # a sensor away from the heater may peak after a short pulse: judge its rise up to its peak
            after = np.flatnonzero((t > 0) & np.isfinite(dT))
            n = int(np.argmax(dT[after])) + 1 if after.size else 0
            upto = after[: max(n, int(np.count_nonzero(run.heat)))]
            problem = heating_signal_problem(name, t[upto], dT[upto], "after the heater came on",
                                             "after heater on, up to its highest reading")
        if problem:
            raise ImplausibleRun(problem)
        tz = None
        if geometry.on_heater and baseline.present and run.steps_t.size:
            tz = early_rise(t, dT, float(run.steps_t[0]), baseline.resid_rms_K)
        return cls(name, run, probe, T, dT, baseline, geometry, tz)

    def shifted(self, shift_s: float) -> SensorRecord:
        """This sensor with the run's power steps moved by ``shift_s`` (see ``HeatingRecord.shifted``)."""
        return replace(self, run=self.run.shifted(shift_s))

    # heating samples, and y = ΔT/Q against u = X/Q (the superposed late-time line; see superposition.py)
    @property
    def th(self) -> np.ndarray:
        return self.run.t[self.run.heat_span]

    @property
    def dTh(self) -> np.ndarray:
        return self.dT[self.run.heat_span]

    @property
    def Qh(self) -> np.ndarray:
        return self.run.Q[self.run.heat_span]

    @property
    def u(self) -> np.ndarray:
        return self.run.X[self.run.heat_span] / self.Qh

    @property
    def y(self) -> np.ndarray:
        return self.dTh / self.Qh

    @property
    def noise_K(self) -> float | None:
        """The baseline's residual RMS: what the record's noise is (None without a baseline)."""
        return self.baseline.resid_rms_K if self.baseline.present and self.baseline.n >= 5 else None

    @property
    def rise_K(self) -> float:
        return float(np.max(self.dTh))
