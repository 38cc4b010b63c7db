"""What this client knows about the daemon and the current run, built only from status replies and events.

The link worker feeds it; screens read it at their own pace. Nothing here does I/O or touches widgets, so it
is driven directly by tests with recorded events. Times are device seconds (the front end's clock), never the
wall clock, so a replayed stream always gives the same picture.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

FINAL_STATES = frozenset({"done", "aborted", "faulted"})
STATE_WORDS = {
    "checking": "CHECKING", "settling": "SETTLING", "heating": "HEATING", "recovering": "RECOVERING",
    "done": "DONE", "aborted": "ABORTED", "faulted": "FAULTED",
}
STATE_SYMBOLS = {
    "checking": "?", "settling": "~", "heating": "▲", "recovering": "▼", "done": "■", "aborted": "×",
    "faulted": "!",
}


def _num(x: Any) -> float:
    return float(x) if isinstance(x, int | float) and x is not None else math.nan


@dataclass
class RunTrace:
    """The samples and estimates of one heating cycle of one run, as received by this client."""

    run_id: int
    sensors: list[str]
    primary: int = 0
    baseline_s: float = 120.0
    heat_start_device_s: float | None = None
    heat_end_device_s: float | None = None
    device_s: list[float] = field(default_factory=list)
    temps: list[list[float]] = field(default_factory=list)
    q: list[float] = field(default_factory=list)
    estimates: list[tuple[float, float, float, bool]] = field(default_factory=list)
    last_estimate: dict[str, Any] | None = None
    pulse_fit: dict[str, Any] | None = None  # the daemon's latest pulse fit (a heat pulse's radial sensor)
    baseline_hint_C: float | None = None
    _cache: tuple[Any, np.ndarray, np.ndarray] | None = field(default=None, repr=False, compare=False)

    def add_sample(self, ev: dict[str, Any]) -> None:
        temps = [_num(v) for v in ev.get("temps_C") or []]
        names = ev.get("sensors")
        if names and names != self.sensors:
            self.sensors = list(names)
        self.device_s.append(float(ev["device_s"]))
        self.temps.append(temps)
        self.q.append(float(ev.get("q_W_per_m") or 0.0))

    def add_estimate(self, ev: dict[str, Any]) -> None:
        t = _num(ev.get("t_s"))
        k = _num(ev.get("k_W_per_mK"))
        if math.isfinite(t) and math.isfinite(k):
            if self.estimates and t <= self.estimates[-1][0]:
                return  # a late duplicate after a reconnect
            self.estimates.append((t, k, _num(ev.get("k_u_W_per_mK")), bool(ev.get("stable"))))
        self.last_estimate = ev

    # -- arrays ----------------------------------------------------------------------------------------------
    def _arrays(self) -> tuple[np.ndarray, np.ndarray]:
        """Device times and a (samples × sensors) array; rebuilt only when samples were added or put in front."""
        key = (len(self.device_s), self.device_s[0] if self.device_s else None)
        cached = self._cache
        if cached is not None and cached[0] == key:
            return cached[1], cached[2]
        width = max((len(r) for r in self.temps), default=0)
        temps = np.full((len(self.temps), width), np.nan)
        for i, row in enumerate(self.temps):
            temps[i, :len(row)] = row
        dev = np.asarray(self.device_s, dtype=float)
        self._cache = (key, dev, temps)
        return dev, temps

    def baseline_C(self) -> np.ndarray:
        """Temperature of each sensor before heater on (NaN where unknown); see ``baseline_source``."""
        return self._baseline()[0]

    @property
    def baseline_source(self) -> str:
        """Where the baseline came from: 'measured', 'daemon', 'fit' (extrapolated) or 'none'."""
        return self._baseline()[1]

    def _baseline(self) -> tuple[np.ndarray, str]:
        dev, temps = self._arrays()
        if temps.size == 0:
            return np.zeros(0), "none"
        if self.heat_start_device_s is None:
            sel = dev >= dev[-1] - self.baseline_s
        else:
            sel = (dev < self.heat_start_device_s) & (dev >= self.heat_start_device_s - self.baseline_s)
        if np.any(sel) and np.any(np.isfinite(temps[sel])):
            with np.errstate(all="ignore"):
                return np.nanmean(temps[sel], axis=0), "measured"
        base = np.full(temps.shape[1], np.nan)
        if self.baseline_hint_C is not None and self.primary < base.size:
            base[self.primary] = self.baseline_hint_C
            return base, "daemon"
        # Joined mid-run without the early samples: extrapolate the fitted line back to the first sample seen.
        est = self.last_estimate or {}
        slope, icpt = est.get("slope_K"), est.get("intercept_K")
        t_first = dev[0] - self.heat_start_device_s if self.heat_start_device_s is not None else math.nan
        if isinstance(slope, int | float) and isinstance(icpt, int | float) and t_first > 0:
            t_off = self.heat_off_t_s
            if t_off is not None and t_first > t_off:  # joined while cooling: the late-cooling line instead
                return temps[0] - slope * math.log(t_first / (t_first - t_off)), "fit"
            return temps[0] - (slope * math.log(t_first) + icpt), "fit"
        return base, "none"

    def t_rel(self) -> np.ndarray:
        """Seconds from heater on for every sample (baseline negative); NaN before heating is known."""
        dev = np.asarray(self.device_s, dtype=float)
        if self.heat_start_device_s is None:
            return np.full(dev.shape, np.nan)
        return dev - self.heat_start_device_s

    def rise(self) -> tuple[np.ndarray, np.ndarray]:
        """t from heater on (s) and ΔT over the baseline (K) for every sample and sensor."""
        _, temps = self._arrays()
        base = self.baseline_C()
        return self.t_rel(), temps - base[None, :] if temps.size else temps

    @property
    def heat_off_t_s(self) -> float | None:
        if self.heat_start_device_s is None or self.heat_end_device_s is None:
            return None
        return self.heat_end_device_s - self.heat_start_device_s

    def heating(self) -> tuple[np.ndarray, np.ndarray]:
        """Heating samples only (t > 0 up to heater off)."""
        t, dT = self.rise()
        if t.size == 0:
            return t, dT
        end = self.heat_off_t_s
        sel = (t > 0) & (t <= (end if end is not None else math.inf))
        return t[sel], dT[sel]

    def cooling(self) -> tuple[np.ndarray, np.ndarray]:
        """Recovery samples against ln(t / (t − t_off)): a straight line of slope q/(4πk) through the origin."""
        t, dT = self.rise()
        end = self.heat_off_t_s
        if end is None or t.size == 0:
            return np.zeros(0), np.zeros((0, dT.shape[1] if dT.ndim == 2 else 0))
        sel = t > end
        ts = t[sel]
        return np.log(ts / (ts - end)), dT[sel]

    def max_rise_K(self) -> float:
        _, dT = self.heating()
        if dT.size == 0 or dT.shape[1] <= self.primary:
            return math.nan
        col = dT[:, self.primary]
        return float(np.nanmax(col)) if np.any(np.isfinite(col)) else math.nan


@dataclass
class LiveState:
    """The client's picture of the daemon. ``version`` goes up on every change a screen should redraw for."""

    connected: bool = False
    lost_reason: str | None = None
    status: dict[str, Any] = field(default_factory=dict)
    frontend_up: bool = False
    frontend_reason: str = ""
    run_id: int | None = None
    run_state: str | None = None
    state_reason: str = ""
    plan: dict[str, Any] = field(default_factory=dict)
    cycle: int = 1
    phase_start_device_s: float | None = None
    device_s: float | None = None
    last_sample: dict[str, Any] | None = None
    trace: RunTrace | None = None
    fault: str | None = None
    finished: dict[str, Any] | None = None
    version: int = 0
    events_seen: int = 0
    pending_plan: dict[str, Any] | None = None
    """The plan this client just asked for, shown with a new run until a status reply confirms it."""
    recover_s: float | None = None
    """The cooling the daemon logs after this heating (the stop plan's, after an early stop)."""

    # -- inputs ----------------------------------------------------------------------------------------------
    def apply_status(self, st: dict[str, Any], fresh: bool = False) -> None:
        """Fold in a status reply. A reply older than the events already seen (its device time is earlier)
        only fills gaps, so a slow reply never winds the picture back. ``fresh``: a new connection, where
        the daemon's clock may have restarted and the reply is the truth."""
        self.connected = True
        self.lost_reason = None
        self.status = st
        dev = st.get("device_s")
        stale = not fresh and self.device_s is not None and isinstance(dev, int | float) and dev < self.device_s
        run = st.get("run")
        if not stale:
            self.frontend_up = bool(st.get("link_up"))
            self.fault = st.get("fault")
            self.device_s = dev
            self.last_sample = st.get("last_sample") or self.last_sample
        if run is not None and (not stale or run["id"] == self.run_id):
            if not stale:
                self.run_id = run["id"]
                self.run_state = run["state"]
                self.cycle = run.get("cycle") or 1
                self.phase_start_device_s = run.get("phase_start_device_s")
            self.plan = run.get("plan") or self.plan
            tr = self.trace
            if tr is None or tr.run_id != run["id"]:
                tr = self.trace = self._new_trace(run["id"])
            if tr.heat_start_device_s is None or not stale:
                tr.heat_start_device_s = run.get("heat_start_device_s") or tr.heat_start_device_s
            if run["state"] == "recovering" and tr.heat_end_device_s is None:
                tr.heat_end_device_s = run.get("heat_end_device_s", run.get("phase_start_device_s"))
            if isinstance(run.get("baseline_mean_C"), int | float):
                tr.baseline_hint_C = float(run["baseline_mean_C"])
            if run.get("estimate"):
                tr.add_estimate(run["estimate"])
            if isinstance(run.get("recover_s"), int | float):
                self.recover_s = float(run["recover_s"])
        self.version += 1

    def mark_lost(self, reason: str) -> None:
        if self.connected or self.lost_reason != reason:
            self.version += 1
        self.connected = False
        self.lost_reason = reason

    def apply_event(self, ev: dict[str, Any]) -> str:
        """Fold one event in; returns its kind."""
        kind = str(ev.get("event"))
        self.events_seen += 1
        handler = getattr(self, f"_on_{kind}", None)
        if handler is not None:
            handler(ev)
            self.version += 1
        return kind

    def _new_trace(self, run_id: int) -> RunTrace:
        sensors = list((self.status.get("probe") or {}).get("sensors") or [])
        chosen = self.plan.get("sensor")
        primary = sensors.index(chosen) if chosen in sensors else 0
        return RunTrace(run_id, sensors, primary, baseline_s=float(self.plan.get("baseline_s") or 120.0))

    def _on_sample(self, ev: dict[str, Any]) -> None:
        self.device_s = ev.get("device_s", self.device_s)
        self.last_sample = ev
        rid = ev.get("run_id")
        if rid is None or rid != self.run_id or self.trace is None:
            return
        self.trace.add_sample(ev)

    def _on_estimate(self, ev: dict[str, Any]) -> None:
        if self.trace is not None and ev.get("run_id") == self.run_id:
            self.trace.add_estimate(ev)

    def _on_pulse_fit(self, ev: dict[str, Any]) -> None:
        if self.trace is not None and ev.get("run_id") == self.run_id:
            self.trace.pulse_fit = ev

    def _on_state(self, ev: dict[str, Any]) -> None:
        rid, state = ev.get("run_id"), str(ev.get("state"))
        dev = ev.get("device_s")
        if rid != self.run_id:  # a new run
            self.run_id = rid
            self.recover_s = None
            self.finished = None
            self.fault = None
            self.cycle = 1
            self.plan = self._plan_hint(ev)
            self.trace = self._new_trace(rid) if rid is not None else None
        prev = self.run_state
        self.run_state = state
        self.state_reason = str(ev.get("reason") or "")
        if isinstance(ev.get("recover_s"), int | float):
            self.recover_s = float(ev["recover_s"])
        self.phase_start_device_s = dev if dev is not None else self.device_s
        tr = self.trace
        if tr is None:
            return
        if state == "settling" and prev == "recovering":
            self.cycle += 1
            old = tr
            self.trace = tr = self._new_trace(old.run_id)
        if state == "heating":
            tr.heat_start_device_s = dev if dev is not None else self.device_s
            tr.heat_end_device_s = None
        elif state in ("recovering", "done", "aborted", "faulted") and tr.heat_start_device_s is not None \
                and tr.heat_end_device_s is None and prev == "heating":
            tr.heat_end_device_s = dev if dev is not None else self.device_s

    def _plan_hint(self, ev: dict[str, Any]) -> dict[str, Any]:
        return dict(self.pending_plan) if self.pending_plan else {}

    def _on_fault(self, ev: dict[str, Any]) -> None:
        self.fault = str(ev.get("reason") or "fault")

    def _on_link(self, ev: dict[str, Any]) -> None:
        self.frontend_up = bool(ev.get("up"))
        self.frontend_reason = str(ev.get("reason") or "")

    def _on_run_finished(self, ev: dict[str, Any]) -> None:
        self.finished = ev
        if ev.get("run_id") == self.run_id:
            self.run_state = str(ev.get("state"))

    # -- derived ---------------------------------------------------------------------------------------------
    @property
    def limits(self) -> dict[str, Any]:
        return self.status.get("limits") or {}

    @property
    def active(self) -> bool:
        return self.run_state is not None and self.run_state not in FINAL_STATES

    @property
    def phase_elapsed_s(self) -> float | None:
        if self.phase_start_device_s is None or self.device_s is None:
            return None
        return max(0.0, self.device_s - self.phase_start_device_s)

    @property
    def heating_elapsed_s(self) -> float | None:
        tr = self.trace
        if tr is None or tr.heat_start_device_s is None or self.device_s is None:
            return None
        end = tr.heat_end_device_s if tr.heat_end_device_s is not None else self.device_s
        return max(0.0, end - tr.heat_start_device_s)

    def remaining_s(self) -> tuple[float | None, bool]:
        """Expected device seconds to the end of the run, and whether it is only a lower bound."""
        if not self.active or not self.plan:
            return None, False
        p = self.plan
        heat, rec, base = float(p.get("heat_s", 0)), float(p.get("recover_s", 0)), float(p.get("baseline_s", 0))
        # the daemon's rest before a later cycle (RunController.rest_before_baseline_s)
        ratio = float(p.get("min_rest_ratio", 0) or 0)
        reeq = max(float(p.get("reequilibrate_s", 0) or 0), ratio * heat - rec - base)
        later = max(0, int(p.get("cycles", 1) or 1) - self.cycle) * (base + reeq + heat + rec)
        el = self.phase_elapsed_s or 0.0
        st = self.run_state
        if st == "checking":
            return base + heat + rec + later, True
        if st == "settling":
            wait = base + (reeq if self.cycle > 1 else 0.0)
            return max(0.0, wait - el) + heat + rec + later, True
        if st == "heating":
            return max(0.0, heat - (self.heating_elapsed_s or 0.0)) + rec + later, bool(p.get("auto_stop"))
        if st == "recovering":
            return max(0.0, (self.recover_s if self.recover_s is not None else rec) - el) + later, False
        return None, False

    @property
    def estimate(self) -> dict[str, Any] | None:
        return self.trace.last_estimate if self.trace is not None else None

    @property
    def pulse(self) -> bool:
        """The run is a heat pulse (no live line fit, no stop verdict; the pulse view and fit instead)."""
        return self.plan.get("kind") == "pulse"

    @property
    def stable_at_s(self) -> float | None:
        """When the daemon first said heating can stop in this heating (latched, as its ``auto_stop`` is);
        None before that."""
        est = self.estimate
        at = _num(est.get("stable_at_s")) if est is not None else math.nan
        return at if math.isfinite(at) else None

    @property
    def verdict(self) -> dict[str, Any] | None:
        """The daemon's "heating can stop" verdict as of the latest estimate (``stop_rule.Verdict.to_dict``)."""
        est = self.estimate
        v = est.get("verdict") if est is not None else None
        return v if isinstance(v, dict) else None

    @property
    def verdict_withdrawn(self) -> bool:
        """A verdict was given and k has since moved by more than the tolerance."""
        v = self.verdict
        return bool(v and v.get("withdrawn"))

    @property
    def can_stop_heating(self) -> bool:
        """The daemon has said heating can stop, the heater is still on, and the verdict stands.

        Latched rather than following each judgement: near the tolerance the judgement can flicker from one
        checkpoint to the next, and a prompt that comes and goes under the operator's finger turns a deliberate
        key press into a question about a different state. Only a withdrawal (k moved beyond the tolerance)
        takes it away."""
        return self.run_state == "heating" and self.stable_at_s is not None and not self.verdict_withdrawn

    def stop_now_saves(self) -> tuple[float, float | None] | None:
        """Heating time and heater energy (Wh, None when the heater length is unknown) a stop now saves."""
        v, el = self.verdict, self.heating_elapsed_s
        heat = _num(self.plan.get("heat_s"))
        if self.run_state != "heating" or el is None or not math.isfinite(heat):
            return None
        left = max(heat - el, 0.0)
        power = _num((v or {}).get("power_W"))
        return left, (power * left / 3600.0 if math.isfinite(power) else None)

    def supply_V(self) -> float | None:
        s = self.last_sample
        v = s.get("supply_V") if s else None
        return float(v) if isinstance(v, int | float) else None

    def hottest_C(self) -> float | None:
        s = self.last_sample
        vals = [v for v in (s.get("temps_C") or []) if isinstance(v, int | float)] if s else []
        return max(vals) if vals else None
