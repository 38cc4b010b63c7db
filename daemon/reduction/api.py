"""One call from a recorded run to results per sensor: the reduction as a short pipeline.

    run record (power steps, regressors)  ─►  sensor record (baseline, geometry)
        ─►  methods (line, probe model, radial, recovery, joint …; each with its own budget)
        ─►  selector (the method-choice rule, the probe factor, α and ρc, flags)
        ─►  the live verdict replayed (``stable_at_s``)

See METHODS.md for the methods, the window rule, the budget and what each flag means.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from ..probe import ProbeProfile
from .data import ReductionError, RunData
from .linesource import MIN_POINTS
from .live import DEFAULT_POWER_U_REL, record_verdict
from .methods import Options
from .record import MIN_HEATING_SAMPLES, HeatingRecord, SensorRecord
from .result import RunReduction, SensorResult
from .select import METHODS, choose, run_methods, sensor_result
from .stop_rule import StopSettings

__all__ = ["METHODS", "RunReduction", "SensorResult", "reduce_run", "reduce_sensor"]


def reduce_run(data: RunData, probe: ProbeProfile | None = None, method: str = "auto",
               calibration_factor: float = 1.0, calibration_factor_u: float = 0.0,
               window_s: tuple[float, float] | None = None, max_rise_K: float | None = None,
               bulk_density_kg_per_m3: float | None = None, *, power_u_rel: float = DEFAULT_POWER_U_REL,
               sensors: list[str] | None = None, stable_rule: bool | StopSettings = True) -> RunReduction:
    """Reduce every sensor of a run. Raises ReductionError when the record cannot give any result.

    ``stable_rule``: judge the "heating can stop" verdict (``stable_at_s``) against these settings (True: 2 %
    and the heating the record shows; False: not at all)."""
    if method not in METHODS:
        raise ReductionError(f"unknown method {method!r}; choose one of {', '.join(METHODS)}")
    if not (calibration_factor > 0 and math.isfinite(calibration_factor)):
        raise ReductionError(f"calibration factor must be a finite number > 0, got {calibration_factor}")
    if window_s is not None and not (0 < window_s[0] < window_s[1]):
        raise ReductionError(f"window must satisfy 0 < start < end, got {window_s[0]} {window_s[1]}")
    opts = Options(method, calibration_factor, calibration_factor_u, window_s, max_rise_K, bulk_density_kg_per_m3,
                   power_u_rel, stable_rule)
    data.heating_span()  # "no heating" before anything else
    names = sensors if sensors is not None else data.sensor_names
    if not names:
        raise ReductionError("the run has no temperature columns (T_<sensor>_C)")
    run = HeatingRecord.of(data)
    out: dict[str, SensorResult] = {}
    failed: list[ReductionError] = []
    for name in names:
        rec = SensorRecord.of(data, run, name, probe)
        try:
            out[name] = res = reduce_sensor(rec, opts)
            if rec.geometry.on_heater and np.count_nonzero(run.heat) < MIN_HEATING_SAMPLES:
                res.flags = list(dict.fromkeys([*res.flags, "window_short"]))
                res.notes.append(f"only {np.count_nonzero(run.heat)} heating samples (a short pulse): this heater "
                                 "sensor's k is no measurement; read the pulse at the radial sensor")
        except ReductionError as e:  # one sensor that cannot give a result does not take the others with it
            failed.append(e)
            out[name] = SensorResult(name=name, method="none", method_reason=str(e), heating_s=run.heating_s,
                                     calibration_factor=opts.calibration_factor,
                                     calibration_factor_u=opts.calibration_factor_u, flags=["no_result"],
                                     notes=[str(e)])
    if len(failed) == len(names):
        raise failed[0]
    pulses = [n for n, r in out.items() if r.method == "pulse"]
    if pulses:
        for name, res in out.items():
            if res.radial_m == 0 and res.method != "none" and (res.n_used or 0) < MIN_POINTS:
                out[name] = refused_on_pulse(res, pulses[0])
    return RunReduction(out, run.heating_s)


def refused_on_pulse(res: SensorResult, pulse_sensor: str) -> SensorResult:
    """A heater sensor's own fit over a pulse's few seconds (fewer than ``MIN_POINTS`` samples in its window),
    refused: a window that short never reaches the late-time regime of a needle (on an 8 s pulse the line's u was
    near 20 %), so its k is the needle's transient, not the medium's. A longer heating read at both needles keeps
    the heater's own result (flagged ``window_short`` where it is).
    The record's k, α and ρc are the pulse result at the radial sensor; the refused fit stays in ``methods``."""
    span = f"{res.window_s[0]:.3g}–{res.window_s[1]:.3g} s" if res.window_s else "no window"
    why = (f"a heat pulse of {res.heating_s or 0:.3g} s: the heated needle's own {res.method} fit ({span}, "
           f"{res.n_used or 0} samples) never reaches the late-time line, so it is no measurement of k; this "
           f"record's k, α and ρc are the pulse result at sensor {pulse_sensor!r}")
    return replace(res, method="none", method_reason=why, k_W_per_mK=None, k_u_W_per_mK=None,
                   alpha_m2_per_s=None, alpha_u_m2_per_s=None, rho_c_J_per_m3K=None, rho_c_u_J_per_m3K=None,
                   stable_at_s=None, flags=list(dict.fromkeys(["no_result", *res.flags])))


def reduce_sensor(rec: SensorRecord, opts: Options) -> SensorResult:
    """Methods, then the selector, then the live verdict replayed on the same record (never for a pulse: a pulse
    heats for its planned time and has no stop verdict)."""
    asked_pulse = opts.method == "pulse" and rec.geometry.on_heater
    if asked_pulse:  # the pulse is read at radial sensors; the heated needle's own record by the usual rule
        opts = replace(opts, method="auto")
    found, rec = run_methods(rec, opts)
    chosen, reason = choose(rec, opts, found)
    res = sensor_result(rec, opts, found, chosen, reason)
    if asked_pulse:
        res.notes.append("the pulse method reads radial sensors: this heater sensor was reduced by auto")
    res.stable_at_s = stable_at(rec, opts) if opts.stable_rule and chosen.name != "pulse" else None
    return res


def stable_at(rec: SensorRecord, opts: Options) -> float | None:
    """When the live "heating can stop" rule would have told the operator: the same rule over the whole record
    (``live.record_verdict``: the live reducer's answer, in one pass)."""
    stop = opts.stable_rule if isinstance(opts.stable_rule, StopSettings) else None
    v = record_verdict(rec.run.t, rec.T, rec.run.q, rec.probe, rec.name, stop, opts.calibration_factor,
                       X=rec.run.X, Q=rec.run.Q)
    return v.first_at_s if v is not None else None
