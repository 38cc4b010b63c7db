"""One explicit state machine per run.

checking → settling → heating → recovering → done, and from any live state to
aborted (operator) or faulted (safety). The controller does no I/O itself: it is
fed samples in device time and asks its ``RunActions`` to switch the heater,
record events and publish. Every change of state goes through ``_enter``.
"""

from __future__ import annotations

import enum
import math
from dataclasses import asdict, dataclass, field
from typing import Any, Protocol

import numpy as np


class RunState(enum.StrEnum):
    CHECKING = "checking"
    """Pre-checks on the first samples: sensors, supply, probe temperature."""
    SETTLING = "settling"
    """Baseline logging until the drift is small enough (or the wait times out)."""
    HEATING = "heating"
    """Constant power; the live fit runs."""
    RECOVERING = "recovering"
    """Heater off; cooling logged."""
    DONE = "done"
    ABORTED = "aborted"
    FAULTED = "faulted"


FINAL = frozenset({RunState.DONE, RunState.ABORTED, RunState.FAULTED})
ALLOWED: dict[RunState, frozenset[RunState]] = {
    RunState.CHECKING: frozenset({RunState.SETTLING, RunState.ABORTED, RunState.FAULTED}),
    RunState.SETTLING: frozenset({RunState.HEATING, RunState.ABORTED, RunState.FAULTED}),
    RunState.HEATING: frozenset({RunState.RECOVERING, RunState.ABORTED, RunState.FAULTED}),
    RunState.RECOVERING: frozenset({RunState.DONE, RunState.SETTLING, RunState.ABORTED, RunState.FAULTED}),
    RunState.DONE: frozenset(),
    RunState.ABORTED: frozenset(),
    RunState.FAULTED: frozenset(),
}


class TransitionError(RuntimeError):
    pass


@dataclass
class RunPlan:
    heat_s: float = 600.0
    recover_s: float = 600.0
    power_W_per_m: float = 5.0
    baseline_s: float = 60.0
    settle_timeout_s: float = 600.0
    max_drift_K_per_min: float = 0.02
    auto_stop: bool = False
    cycles: int = 1
    reequilibrate_s: float = 0.0
    sensor: str = "heater"

    def __post_init__(self) -> None:
        for name in ("heat_s", "recover_s", "power_W_per_m", "baseline_s", "settle_timeout_s",
                     "max_drift_K_per_min"):
            v = getattr(self, name)
            if not (isinstance(v, int | float) and math.isfinite(v) and v > 0):
                raise ValueError(f"{name} must be a positive number, got {v!r}")
        if self.recover_s < 0 or not isinstance(self.cycles, int) or self.cycles < 1:
            raise ValueError("cycles must be a whole number ≥ 1")

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


class RunActions(Protocol):
    def arm(self, power_W_per_m: float) -> None: ...
    def disarm(self, reason: str) -> None: ...
    def state_changed(self, state: RunState, reason: str, device_s: float) -> None: ...
    def heating_started(self, device_s: float) -> None: ...
    def estimate(self, est: dict[str, Any]) -> None: ...
    def finished(self, state: RunState) -> None: ...


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
    reducer_factory: Any = None  # callable -> LiveReducer
    state: RunState = RunState.CHECKING
    cycle: int = 1
    started_device_s: float | None = None
    phase_start_s: float = 0.0
    heat_start_s: float | None = None
    baseline: list[tuple[float, float]] = field(default_factory=list)
    baseline_mean_C: float | None = None
    stop_requested: bool = False
    last_estimate: dict[str, Any] | None = None
    not_settled: bool = False

    def _enter(self, new: RunState, reason: str, device_s: float) -> None:
        if new not in ALLOWED[self.state]:
            raise TransitionError(f"run {self.run_id}: {self.state} → {new} is not allowed")
        if new in (RunState.ABORTED, RunState.FAULTED, RunState.RECOVERING, RunState.DONE):
            self.actions.disarm(reason)  # heater off before anything else is recorded
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
            self._enter(RunState.ABORTED, reason, device_s)

    def fault(self, reason: str, device_s: float) -> None:
        if self.active:
            self._enter(RunState.FAULTED, reason, device_s)

    def stop_heating(self) -> bool:
        if self.state != RunState.HEATING:
            return False
        self.stop_requested = True
        return True

    def precheck_failed(self, problems: list[str], device_s: float) -> None:
        self._enter(RunState.FAULTED, "pre-check failed: " + "; ".join(problems), device_s)

    # -- samples -----------------------------------------------------------
    def on_sample(self, device_s: float, temp_C: float, q_W_per_m: float) -> None:
        if self.started_device_s is None:
            self.started_device_s = device_s
            self.phase_start_s = device_s
        st = self.state
        if st == RunState.CHECKING:
            self._enter(RunState.SETTLING, "pre-checks passed", device_s)
        elif st == RunState.SETTLING:
            self._settle(device_s, temp_C)
        elif st == RunState.HEATING:
            self._heat(device_s, temp_C, q_W_per_m)
        elif st == RunState.RECOVERING and device_s - self.phase_start_s >= self.plan.recover_s:
            if self.cycle < self.plan.cycles:
                self.cycle += 1
                self.baseline.clear()
                self._enter(RunState.SETTLING, f"cycle {self.cycle} of {self.plan.cycles}: re-equilibrating", device_s)
            else:
                self._enter(RunState.DONE, "recovery logged", device_s)

    def _settle(self, device_s: float, temp_C: float) -> None:
        if math.isfinite(temp_C):
            self.baseline.append((device_s, temp_C))
        elapsed = device_s - self.phase_start_s
        wait = self.plan.baseline_s + (self.plan.reequilibrate_s if self.cycle > 1 else 0.0)
        if elapsed < wait:
            return
        recent = np.array([b for b in self.baseline if b[0] >= device_s - self.plan.baseline_s])
        drift = drift_K_per_min(recent[:, 0], recent[:, 1]) if len(recent) else math.inf
        if drift <= self.plan.max_drift_K_per_min:
            reason = f"baseline settled: drift {drift:.4f} K/min"
        elif elapsed >= self.plan.settle_timeout_s:
            self.not_settled = True
            reason = f"settling timed out with drift {drift:.4f} K/min; heating anyway (flagged not settled)"
        else:
            return
        self.baseline_mean_C = float(np.mean(recent[:, 1]))
        self._begin_heating(device_s, reason, recent)

    def _begin_heating(self, device_s: float, reason: str, recent: np.ndarray) -> None:
        self.heat_start_s = device_s
        self.stop_requested = False
        self.reducer = self.reducer_factory() if self.reducer_factory else None
        if self.reducer is not None:
            for t, temp in recent:
                self.reducer.add(float(t - device_s), float(temp) + 273.15, 0.0)
        self.actions.heating_started(device_s)
        self.actions.arm(self.plan.power_W_per_m)
        self._enter(RunState.HEATING, reason, device_s)

    def _heat(self, device_s: float, temp_C: float, q_W_per_m: float) -> None:
        assert self.heat_start_s is not None
        t = device_s - self.heat_start_s
        if self.reducer is not None and math.isfinite(temp_C) and t > 0:
            est = self.reducer.add(t, temp_C + 273.15, q_W_per_m)
            if est is not None:
                self.last_estimate = est.to_dict()
                self.actions.estimate(self.last_estimate)
                if est.stable and self.plan.auto_stop:
                    self.stop_requested = True
        if self.stop_requested:
            self._enter(RunState.RECOVERING, "heating stopped early: estimate stabilised", device_s)
        elif t >= self.plan.heat_s:
            self._enter(RunState.RECOVERING, f"planned heating time {self.plan.heat_s:.0f} s reached", device_s)

    def rise_K(self, hottest_heater_C: float) -> float | None:
        if self.baseline_mean_C is None or not math.isfinite(hottest_heater_C):
            return None
        return hottest_heater_C - self.baseline_mean_C
