"""The qualification procedure as a generator of requests, and the drivers that answer them.

Steps, in order (see hardware/QUALIFICATION.md for the same in words):

1. geometry against practice and the intended use (no measurement);
2. insulation: the operator's megohmmeter reading;
3. isothermal baths at the set points: heater-off logging (thermocouple offset and noise per channel), then a gentle
   heater check (resistance at that temperature); together the points give R at 20 °C and its coefficient;
4. reference media, each with fresh insertions: baseline, constant-power heating; per run the full probe model,
   the response time, k for the calibration and the heater-resistance drift.

``qualification_steps`` does no I/O: it yields a request and receives the answer. ``run_sync`` answers with a
blocking rig (the in-process simulator), ``run_async`` with a rig whose methods may be coroutines (the daemon).
"""

from __future__ import annotations

import asyncio
import inspect
import math
from collections.abc import Callable, Generator
from dataclasses import dataclass, field
from typing import Any, Protocol

from linerig.daemon.probe import ProbeProfile

from . import analysis as an
from .config import QualificationConfig
from .requests import AskNumber, PlaceInBath, PlaceInMedium, Progress, Record, Recording, Request


@dataclass
class Measurements:
    """Everything the procedure measured, ready to be judged against the criteria."""

    sensor: str
    geometry: an.Geometry
    insulation_MOhm: float | None = None
    insulation_V: float | None = None
    resistance_points: list[an.ResistancePoint] = field(default_factory=list)
    heater: an.HeaterFit | None = None
    channel_stats: dict[str, list[an.ChannelStats]] = field(default_factory=dict)
    channels: dict[str, an.ChannelSummary] = field(default_factory=dict)
    runs: list[an.ReferenceRun] = field(default_factory=list)
    drift: an.DriftFit | None = None
    references: list[an.ReferenceConductivity] = field(default_factory=list)
    """The reference conductivity each medium's runs were compared with."""
    calibration: an.Calibration | None = None
    errors: dict[str, str] = field(default_factory=dict)
    """Step name → why it gave no result (the criteria that need it report "not measured")."""
    notes: list[str] = field(default_factory=list)
    bath_traces: list[dict[str, Any]] = field(default_factory=list)
    """Down-sampled heater-off logging per bath, for the report."""


Steps = Generator[Request, Any, Measurements]


def qualification_steps(profile: ProbeProfile, config: QualificationConfig) -> Steps:
    """Yield the requests of a qualification of ``profile``; return the measurements."""
    proc = config.procedure
    crit = config.criteria
    sensor = an.primary_sensor(profile, proc.sensor)
    m = Measurements(sensor=sensor, geometry=an.geometry_checks(
        profile, config.intended_use, crit["axial_loss"].limit("slope_tolerance"),
        crit["sample_radius"].limit("slope_tolerance")))
    n_steps = 2 + len(proc.bath_temperatures_C) + len(config.references) * proc.repeats
    step = 0

    def progress(name: str, text: str) -> Progress:
        nonlocal step
        step += 1
        return Progress(name, f"[{step}/{n_steps}] {text}")

    yield progress("geometry", f"geometry: L/d = {m.geometry.length_to_diameter:.0f}")

    # ---- insulation ------------------------------------------------------------------------------------------
    test_V = crit["insulation"].limit("test_V")
    yield progress("insulation", "insulation resistance (operator reading)")
    answer = yield AskNumber("insulation_MOhm",
                             f"Insulation resistance at {test_V:.0f} V DC, heater and each thermocouple to the sheath "
                             "(enter the lowest reading)", "MΩ", 0.0)
    if answer is None:
        m.errors["insulation"] = "no megohmmeter reading was entered"
    else:
        m.insulation_MOhm, m.insulation_V = float(answer), test_V

    # ---- baths: thermocouples and heater resistance -------------------------------------------------------------
    for setpoint in proc.bath_temperatures_C:
        yield progress("bath", f"isothermal bath at {setpoint:g} °C: offsets, noise, heater resistance")
        ref_C = yield PlaceInBath(setpoint)
        rec: Recording = yield Record(proc.bath_log_s, proc.heater_check_s, proc.heater_check_W_per_m,
                                      proc.sample_interval_s, f"bath {setpoint:g} °C")
        off = rec.t_s < 0
        trace: dict[str, Any] = {"bath_C": float(ref_C), "t_s": rec.t_s[off].tolist(), "temps_C": {}}
        for name, T in rec.temps_C.items():
            st = an.bath_channel_stats(name, rec.t_s[off], T[off], float(ref_C), rec.faults.get(name, 0))
            m.channel_stats.setdefault(name, []).append(st)
            trace["temps_C"][name] = [None if not math.isfinite(x) else x for x in T[off].tolist()]
        m.bath_traces.append(trace)
        try:
            m.resistance_points.append(an.resistance_point(rec, float(ref_C), sensor))
        except an.QualificationDataError as e:
            m.errors.setdefault("heater", f"bath {setpoint:g} °C: {e}")
    m.channels = {name: an.summarise_channel(stats) for name, stats in m.channel_stats.items()}
    try:
        m.heater = an.fit_heater_resistance(m.resistance_points)
    except an.QualificationDataError as e:
        m.errors.setdefault("heater", str(e))
    tcr = m.heater.tcr_per_K if m.heater is not None else profile.heater_tcr_per_K

    # ---- reference media -----------------------------------------------------------------------------------------
    tol = crit["response_time"].limit("slope_tolerance")
    for ref in config.references:
        for i in range(1, proc.repeats + 1):
            yield progress("reference", f"{ref.name}: run {i} of {proc.repeats} at {ref.power_W_per_m:g} W/m")
            yield PlaceInMedium(ref, i, proc.repeats)
            rec = yield Record(proc.baseline_s, proc.heat_s, ref.power_W_per_m, proc.sample_interval_s,
                               f"{ref.name} run {i}")
            try:
                m.runs.append(an.analyse_reference_run(rec, profile, sensor, ref, i, tcr, tol))
            except an.QualificationDataError as e:
                m.errors.setdefault(f"reference:{ref.name}", str(e))
                m.notes.append(f"{ref.name} run {i}: {e}")
    drifts = [r.drift for r in m.runs if r.drift is not None]
    if drifts:
        m.drift = an.pool_drift(drifts)
    else:
        m.errors.setdefault("drift", "no reference run gave heater readings")
    for ref in config.references:
        temps = [r.baseline_C for r in m.runs if r.medium == ref.name]
        try:
            m.references.append(an.reference_conductivity(ref, float(sum(temps) / len(temps)) if temps else None))
        except an.QualificationDataError as e:
            m.errors.setdefault(f"reference:{ref.name}", str(e))
    try:
        m.calibration = an.summarise_calibration(m.runs, m.references)
    except an.QualificationDataError as e:
        m.errors["calibration"] = str(e)
    return m


# ---- drivers -----------------------------------------------------------------------------------------------------

class Operator(Protocol):
    """Answers what only a person can: a megohmmeter reading, a reference thermometer, "probe is in place"."""

    def ask_number(self, request: AskNumber) -> float | None: ...


class SyncRig(Protocol):
    def place_in_bath(self, request: PlaceInBath) -> float: ...
    def place_in_medium(self, request: PlaceInMedium) -> None: ...
    def record(self, request: Record) -> Recording: ...


class ScriptedOperator:
    """Answers from a dict (key → value); keys not in it are "not measured". For tests, --simulate and batch use."""

    def __init__(self, answers: dict[str, float | None] | None = None) -> None:
        self.answers = dict(answers or {})
        self.asked: list[AskNumber] = []

    def ask_number(self, request: AskNumber) -> float | None:
        self.asked.append(request)
        return self.answers.get(request.key)


ProgressFn = Callable[[Progress], None]


def _check_number(request: AskNumber, value: Any) -> float | None:
    if value is None:
        return None
    v = float(value)
    if not math.isfinite(v) or (request.minimum is not None and v < request.minimum):
        raise ValueError(f"{request.key}: {value!r} is not a valid reading ({request.unit}, >= {request.minimum})")
    return v


def run_sync(profile: ProbeProfile, config: QualificationConfig, rig: SyncRig, operator: Operator,
             on_progress: ProgressFn | None = None) -> Measurements:
    """Drive the procedure with a blocking rig."""
    gen = qualification_steps(profile, config)
    answer: Any = None
    while True:
        try:
            req = gen.send(answer)
        except StopIteration as stop:
            return stop.value  # type: ignore[no-any-return]
        answer = None
        if isinstance(req, Progress):
            if on_progress is not None:
                on_progress(req)
        elif isinstance(req, AskNumber):
            answer = _check_number(req, operator.ask_number(req))
        elif isinstance(req, PlaceInBath):
            answer = rig.place_in_bath(req)
        elif isinstance(req, PlaceInMedium):
            rig.place_in_medium(req)
        elif isinstance(req, Record):
            answer = rig.record(req)
        else:  # pragma: no cover - the request union is closed
            raise TypeError(f"unknown request {req!r}")


async def _call(fn: Callable[..., Any], arg: Any, blocking: bool) -> Any:
    if blocking:
        return await asyncio.to_thread(fn, arg)
    out = fn(arg)
    return await out if inspect.isawaitable(out) else out


async def run_async(profile: ProbeProfile, config: QualificationConfig, rig: Any, operator: Any,
                    on_progress: ProgressFn | None = None) -> Measurements:
    """Drive the procedure from an event loop: rig and operator methods may be coroutines. A rig whose
    ``blocking`` attribute is true (the simulator) is run off the loop so the caller's loop stays responsive."""
    blocking = bool(getattr(rig, "blocking", False))
    gen = qualification_steps(profile, config)
    answer: Any = None
    while True:
        try:
            req = gen.send(answer)
        except StopIteration as stop:
            return stop.value  # type: ignore[no-any-return]
        answer = None
        if isinstance(req, Progress):
            if on_progress is not None:
                on_progress(req)
        elif isinstance(req, AskNumber):
            answer = _check_number(req, await _call(operator.ask_number, req, False))
        elif isinstance(req, PlaceInBath):
            answer = await _call(rig.place_in_bath, req, blocking)
        elif isinstance(req, PlaceInMedium):
            await _call(rig.place_in_medium, req, blocking)
        elif isinstance(req, Record):
            answer = await _call(rig.record, req, blocking)
        else:  # pragma: no cover
            raise TypeError(f"unknown request {req!r}")


__all__ = ["Measurements", "Operator", "ScriptedOperator", "SyncRig", "qualification_steps", "run_async", "run_sync"]
