"""One explicit state machine per run, and the schedule that strings runs into cycles.

checking → settling → heating → recovering → done, and from any live state to
aborted (operator) or faulted (safety). The controller does no I/O itself: it is
fed samples in device time and asks its ``RunActions`` to switch the heater,
record events and publish. Every change of state goes through ``transition``.

A run is one heating: repeat cycles are separate runs tied by a series, each
reduced and stored on its own, and a series resumes only at a cycle boundary.
"""

from __future__ import annotations

import enum
import math
from collections import deque
from dataclasses import asdict, dataclass, field, fields
from typing import Any, Protocol

import numpy as np

from .reduction.stop_rule import DEFAULT_TOLERANCE, StopSettings, recovery_after_stop_s

MAX_STOP_TOLERANCE = 0.2
"""Beyond 20 % an early stop is no longer a measurement worth reporting (common practice, no source)."""

class RunState(enum.StrEnum):
    CHECKING = "checking"
    """Pre-checks on the first sample: sensors, supply, probe temperature, heater off."""
    SETTLING = "settling"
    """Baseline logging until the drift is small enough (or the wait times out)."""
    HEATING = "heating"
    """Constant power; the live fit runs."""
    RECOVERING = "recovering"
    """Heater off; cooling logged."""
    DONE = "done"
    ABORTED = "aborted"
    FAULTED = "faulted"


INTERRUPTED = "interrupted"
"""Not a controller state: the store gives it to a run found open when the daemon starts."""

FINAL = frozenset({RunState.DONE, RunState.ABORTED, RunState.FAULTED})
ALLOWED: dict[RunState, frozenset[RunState]] = {
    RunState.CHECKING: frozenset({RunState.SETTLING, RunState.ABORTED, RunState.FAULTED}),
    RunState.SETTLING: frozenset({RunState.HEATING, RunState.ABORTED, RunState.FAULTED}),
    RunState.HEATING: frozenset({RunState.RECOVERING, RunState.ABORTED, RunState.FAULTED}),
    RunState.RECOVERING: frozenset({RunState.DONE, RunState.ABORTED, RunState.FAULTED}),
    RunState.DONE: frozenset(),
    RunState.ABORTED: frozenset(),
    RunState.FAULTED: frozenset(),
}
HEATER_OFF_STATES = frozenset({RunState.RECOVERING, *FINAL})


class TransitionError(RuntimeError):
    """A state change the table does not allow: a bug, never an operator mistake."""


class PlanError(ValueError):
    """A run plan value is out of range: ``key`` names it and ``problem`` says what it must be."""

    def __init__(self, key: str, problem: str, value: object = None) -> None:
        super().__init__(f"{key} must be {problem}, got {value!r}")
        self.key = key
        self.problem = problem
        self.value = value


PLAN_KINDS = ("line", "pulse")
PLAN_HELP: dict[str, str] = {
    "kind": "line (heat until the late-time line is steady, with a live fit and stop verdict) or pulse (a short heat "
            "pulse read at a radial sensor: heat for heat_s, record the decay; no stop verdict)",
    "heat_s": "maximum heating time, s (heating may stop earlier on a stable estimate)",
    "recover_s": "recovery (cooling) logging time after the heater goes off, s",
    "power_W_per_m": "heater power per metre, W/m",
    "baseline_s": "baseline logged before heating, and the span the drift is measured over, s",
    "settle_timeout_s": "longest wait for the drift to fall under max_drift_K_per_min before heating anyway, s",
    "max_drift_K_per_min": "baseline drift that counts as settled, K/min",
    "auto_stop": "stop heating by itself once the verdict says it can (otherwise the operator confirms)",
    "stop_tolerance": "the change of k an early stop may cause, as a fraction (0.02 = 2 %): heating can stop when "
                      "the k of a stop now is predicted within this of the full heating's",
    "cycles": "heating–recovery cycles in a series",
    "reequilibrate_s": "extra wait before the baseline of a later cycle (or a resumed series), s",
    "min_rest_ratio": "before a later cycle heats, the ground rests at least this many heating times since the heater "
                      "went off (0: no such minimum)",
    "sensor": "sensor whose record drives the live fit and the stop verdict",
}


@dataclass(frozen=True)
class RunPlan:
    kind: str = "line"
    heat_s: float = 600.0
    recover_s: float = 600.0
    power_W_per_m: float = 5.0
    baseline_s: float = 120.0  # long enough that the drift it measures stays a small term (METHODS.md)
    settle_timeout_s: float = 600.0
    max_drift_K_per_min: float = 0.02
    auto_stop: bool = False
    stop_tolerance: float = DEFAULT_TOLERANCE
    cycles: int = 1
    reequilibrate_s: float = 0.0
    min_rest_ratio: float = 4.0
    sensor: str = "heater"

    def __post_init__(self) -> None:
        for f in fields(self):
            problem = plan_problem(f.name, getattr(self, f.name))
            if problem:
                raise PlanError(f.name, problem, getattr(self, f.name))
        if self.kind == "pulse" and self.auto_stop:
            raise PlanError("auto_stop", "false for a pulse (a pulse has no stop verdict: it heats for heat_s)",
                            self.auto_stop)

    @property
    def pulse(self) -> bool:
        return self.kind == "pulse"

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)

    def with_changes(self, changes: dict[str, Any]) -> RunPlan:
        """A copy with ``changes``; unknown keys and bad values raise PlanError naming the key."""
        known = {f.name for f in fields(self)}
        for key in changes:
            if key not in known:
                raise PlanError(key, f"one of the plan settings ({', '.join(sorted(known))})", key)
        return RunPlan(**{**self.to_dict(), **changes})


def plan_problem(name: str, value: object) -> str | None:
    """What a plan value must be, when it is not."""
    if name == "kind":
        return None if value in PLAN_KINDS else f"one of {', '.join(PLAN_KINDS)}"
    if name == "auto_stop":
        return None if isinstance(value, bool) else "true or false"
    if name == "sensor":
        return None if isinstance(value, str) and value else "a sensor name"
    if name == "cycles":
        ok = isinstance(value, int) and not isinstance(value, bool) and 1 <= value <= 1000
        return None if ok else "a whole number from 1 to 1000"
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        return "a finite number"
    if name in ("reequilibrate_s", "min_rest_ratio"):
        return None if value >= 0 else "a number ≥ 0"
    if name == "stop_tolerance":
        return None if 0 < value <= MAX_STOP_TOLERANCE else f"a fraction above 0 and at most {MAX_STOP_TOLERANCE:g}"
    return None if value > 0 else "a number > 0"


class RunActions(Protocol):
    def arm(self, power_W_per_m: float) -> None: ...
    def disarm(self, reason: str) -> None: ...
    def state_changed(self, state: RunState, reason: str, device_s: float) -> None: ...
    def heating_started(self, device_s: float) -> None: ...
    def heating_ended(self, device_s: float) -> None: ...
    def estimate(self, est: dict[str, Any]) -> None: ...
    def verdict(self, est: dict[str, Any]) -> None: ...
    def finished(self, state: RunState) -> None: ...


def estimate_dict(est: Any) -> dict[str, Any]:
    """A live estimate as plain JSON-ready values: its own ``to_dict`` deep-copies, too slow per sample."""
    names = _EST_FIELDS.get(type(est))
    if names is None:
        names = _EST_FIELDS[type(est)] = tuple(f.name for f in fields(est))
    out: dict[str, Any] = {}
    for name in names:
        v = getattr(est, name)
        if isinstance(v, tuple):
            v = list(v)
        elif isinstance(v, float) and not math.isfinite(v):
            v = None
        elif hasattr(v, "item"):
            v = v.item()
        out[name] = v
    return out


_EST_FIELDS: dict[type, tuple[str, ...]] = {}


def drift_K_per_min(t_s: np.ndarray, temp: np.ndarray) -> float:
    if len(t_s) < 3 or t_s[-1] - t_s[0] <= 0:
        return math.inf
    slope = np.polyfit(t_s - t_s[0], temp, 1)[0]
    return float(abs(slope) * 60.0)


@dataclass
class RunController:
    run_id: int
    plan: RunPlan
    actions: RunActions
    sensor_index: int = 0
    reducer_factory: Any = None  # callable(StopSettings) -> LiveReducer
    cycle: int = 1
    reequilibrate: bool = False  # a later cycle or a resumed series: wait plan.reequilibrate_s first
    state: RunState = RunState.CHECKING
    started_device_s: float | None = None
    phase_start_s: float = 0.0
    arm_device_s: float | None = None  # when the controller asked for heat
    heat_start_s: float | None = None  # the last sample before the front end first reported the heater on
    heat_end_s: float | None = None
    device_on_s: float | None = None  # the front end's own report of when the heater went on (its P reply)
    device_off_s: float | None = None  # and went off (its O reply), when it sends them
    baseline_mean_C: float | None = None
    stop_requested: str | None = None
    last_estimate: dict[str, Any] | None = None
    stable_at_s: float | None = None
    withdrawn_at_s: float | None = None
    recover_s: float | None = None  # the cooling logged after this heating (the stop plan after an early stop)
    not_settled: bool = False
    reducer: Any = None
    _recent: deque[tuple[float, float]] = field(default_factory=deque)
    _prev_device_s: float | None = None

    # -- the one way to change state ---------------------------------------
    def transition(self, new: RunState, reason: str, device_s: float) -> None:
        if new not in ALLOWED[self.state]:
            raise TransitionError(f"run {self.run_id}: {self.state} → {new} is not allowed")
        if new in HEATER_OFF_STATES:
            self.actions.disarm(reason)  # heater off before anything else is recorded
            if self.state == RunState.HEATING:
                self.heat_end_s = device_s
                self.actions.heating_ended(device_s)
        self.state = new
        self.phase_start_s = device_s
        self.actions.state_changed(new, reason, device_s)
        if new in FINAL:
            self.actions.finished(new)

    @property
    def active(self) -> bool:
        return self.state not in FINAL

    @property
    def heating(self) -> bool:
        return self.state == RunState.HEATING

    # -- operator and safety ----------------------------------------------
    def abort(self, reason: str, device_s: float) -> None:
        if self.active:
            self.transition(RunState.ABORTED, reason, device_s)

    def fault(self, reason: str, device_s: float) -> None:
        if self.active:
            self.transition(RunState.FAULTED, reason, device_s)

    def stop_heating(self) -> bool:
        """The operator confirms heating can stop; acted on at the next sample."""
        if self.state != RunState.HEATING:
            return False
        if self.plan.pulse:
            self.stop_requested = "operator ended the pulse early (the power record keeps the heat given)"
        elif self.stable_at_s is not None and self.withdrawn_at_s is None:
            self.stop_requested = f"operator stopped heating: heating could stop since t = {self.stable_at_s:.0f} s"
        elif self.stable_at_s is not None:
            self.stop_requested = "operator stopped heating after the verdict was withdrawn"
        else:
            self.stop_requested = "operator stopped heating before the verdict"
        return True

    def precheck_failed(self, problems: list[str], device_s: float) -> None:
        self.transition(RunState.FAULTED, "pre-check failed: " + "; ".join(problems), device_s)

    # -- samples -----------------------------------------------------------
    def on_sample(self, device_s: float, temp_C: float, q_W_per_m: float, heater_on: bool = False) -> None:
        if self.started_device_s is None:
            self.started_device_s = device_s
            self.phase_start_s = device_s
        st = self.state
        if st == RunState.CHECKING:
            self.transition(RunState.SETTLING, "pre-checks passed", device_s)
            self._settle(device_s, temp_C)
        elif st == RunState.SETTLING:
            self._settle(device_s, temp_C)
        elif st == RunState.HEATING:
            self._heat(device_s, temp_C, q_W_per_m, heater_on)
        elif st == RunState.RECOVERING and device_s - self.phase_start_s >= self.recovery_s():
            self.transition(RunState.DONE, "recovery logged", device_s)
        self._prev_device_s = device_s

    def recovery_s(self) -> float:
        """How long the cooling is logged: as planned, or what the stop plan set when heating stopped early."""
        return self.recover_s if self.recover_s is not None else self.plan.recover_s

    def rest_before_baseline_s(self) -> float:
        """The wait before a later cycle's baseline. The previous heating's residual decays like 1/t and a
        straight baseline cannot follow it: on the line-source solution, a heating that starts 1.1, 2, 3, 4 and
        6 heating times after the last switch-off reads k low by about 13, 3.9, 1.5, 0.7 and 0.2 % (E1
        superposition with a linear drift removed, scipy's exp1; see tests). ``min_rest_ratio`` (default 4)
        keeps that under 1 %, counting the recovery already logged and taking the planned (longest) heating."""
        p = self.plan
        return max(p.reequilibrate_s, p.min_rest_ratio * p.heat_s - p.recover_s - p.baseline_s)

    def _settle(self, device_s: float, temp_C: float) -> None:
        if math.isfinite(temp_C):
            self._recent.append((device_s, temp_C))
        while self._recent and self._recent[0][0] < device_s - self.plan.baseline_s:
            self._recent.popleft()
        elapsed = device_s - self.phase_start_s
        wait = self.plan.baseline_s + (self.rest_before_baseline_s() if self.reequilibrate else 0.0)
        if elapsed < wait:
            return
        recent = np.array(self._recent)
        drift = drift_K_per_min(recent[:, 0], recent[:, 1]) if len(recent) else math.inf
        if drift <= self.plan.max_drift_K_per_min:
            reason = f"baseline settled: drift {drift:.4f} K/min"
        elif elapsed >= self.plan.settle_timeout_s:
            self.not_settled = True
            reason = f"settling timed out with drift {drift:.4f} K/min; heating anyway (flagged not settled)"
        else:
            return
        self.baseline_mean_C = float(np.mean(recent[:, 1])) if len(recent) else None
        self.arm_device_s = device_s
        self.stop_requested = None
        self.actions.arm(self.plan.power_W_per_m)
        self.transition(RunState.HEATING, reason, device_s)

    def _heat(self, device_s: float, temp_C: float, q_W_per_m: float, heater_on: bool) -> None:
        if self.heat_start_s is None:
            if not (heater_on and q_W_per_m > 0):
                if math.isfinite(temp_C):
                    self._recent.append((device_s, temp_C))  # still baseline: no heat has gone in yet
                return
            self._heater_came_on(q_W_per_m, device_s)
        assert self.heat_start_s is not None
        t = device_s - self.heat_start_s
        if self.reducer is not None and math.isfinite(temp_C) and t > 0:
            est = self.reducer.add(t, temp_C + 273.15, q_W_per_m)
            if est is not None:
                self.last_estimate = estimate_dict(est)
                self.actions.estimate(self.last_estimate)
                self._follow_verdict(t, est)
        if self.stop_requested:
            self.recover_s = recovery_after_stop_s(t, self.plan.heat_s, self.plan.recover_s)
            self.transition(RunState.RECOVERING, f"{self.stop_requested}; the cooling is logged for "
                            f"{self.recover_s:.0f} s for the heat–cool cross-check", device_s)
        elif t >= self.plan.heat_s:
            self.transition(RunState.RECOVERING, f"planned heating time {self.plan.heat_s:.0f} s reached", device_s)

    def _follow_verdict(self, t: float, est: Any) -> None:
        """Latch the first "heating can stop" (and stop if the plan says so); note a withdrawal once."""
        v = est.verdict or {}
        if est.stable and self.stable_at_s is None:
            # the verdict's own time: its checkpoint, which a judgement run off the loop may report a little later
            self.stable_at_s = est.stable_at_s if est.stable_at_s is not None else t
            self.actions.verdict(self.last_estimate or {})
            if self.plan.auto_stop:
                self.stop_requested = (f"heating can stop since t = {self.stable_at_s:.0f} s: automatic stop "
                                       "(auto_stop)")
        elif v.get("withdrawn") and self.stable_at_s is not None and self.withdrawn_at_s is None:
            self.withdrawn_at_s = t
            self.actions.verdict(self.last_estimate or {})
        elif est.stable and self.withdrawn_at_s is not None:
            self.withdrawn_at_s = None  # given again
            self.actions.verdict(self.last_estimate or {})

    def _heater_came_on(self, q_W_per_m: float, device_s: float) -> None:
        """The heater went on between the previous sample and this one. Time zero is the instant the front end
        reported in its reply to the power command when it sent one (PROTOCOL.md §4.2), else the previous sample;
        the power this sample measured is the power held from time zero on."""
        prev = self._prev_device_s if self._prev_device_s is not None else 0.0
        on = self.device_on_s
        t0 = on if on is not None and prev - 1e-6 <= on <= device_s + 1e-6 else prev
        self.heat_start_s = t0
        stop = StopSettings(self.plan.stop_tolerance, self.plan.heat_s)
        self.reducer = self.reducer_factory(stop) if self.reducer_factory else None
        if self.reducer is not None:
            lo = (self.arm_device_s or prev) - self.plan.baseline_s
            for t, temp in self._recent:
                if lo <= t <= prev:
                    self.reducer.add(float(t - t0), float(temp) + 273.15, q_W_per_m if t >= t0 else 0.0)
        self._recent.clear()
        self.actions.heating_started(t0)

    def rise_K(self, hottest_heater_C: float) -> float | None:
        if self.baseline_mean_C is None or not math.isfinite(hottest_heater_C):
            return None
        return hottest_heater_C - self.baseline_mean_C

    def heating_elapsed_s(self, device_s: float) -> float:
        """Heating time by the device clock, from the moment heat was asked for (the safe side)."""
        if self.state != RunState.HEATING or self.arm_device_s is None:
            return 0.0
        return max(device_s - self.arm_device_s, 0.0)

    def snapshot(self) -> dict[str, Any]:
        return {"id": self.run_id, "state": str(self.state), "plan": self.plan.to_dict(), "cycle": self.cycle,
                "heat_start_device_s": self.heat_start_s, "estimate": self.last_estimate,
                "phase_start_device_s": self.phase_start_s, "stable_at_s": self.stable_at_s,
                "withdrawn_at_s": self.withdrawn_at_s, "recover_s": self.recovery_s(), "not_settled": self.not_settled}


@dataclass
class CycleSchedule:
    """Which cycle comes next in a series. A series advances only when a cycle ends ``done``."""

    cycles: int
    done: int = 0
    cycle: int = 1  # number of the cycle now running

    def after_run(self, state: RunState) -> int | None:
        """The number of the next cycle to start now, or None when the series ends."""
        if state != RunState.DONE:
            return None
        self.done += 1
        if self.done >= self.cycles:
            return None
        self.cycle += 1
        return self.cycle

    def series_state(self, last: RunState) -> str:
        if last == RunState.DONE and self.done >= self.cycles:
            return "done"
        return str(last) if last in FINAL else "running"
