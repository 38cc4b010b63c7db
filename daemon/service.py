"""The daemon's running parts and who owns what.

Tasks (all in one asyncio loop):
- link: opens the front end, reads frames, reconnects after an unplug; never re-arms.
- lease: renews the heater lease while the heater should be on.
- watch: stale data and frame-loss limits; pings the systemd watchdog while healthy.
- flush: commits pending samples at least every FLUSH_INTERVAL_S.
The run controller is the only thing that asks for heater power; ``trip`` is the
one path to the safe state and may be called any number of times.
"""

from __future__ import annotations

import asyncio
import contextlib
import json
import logging
import math
import time
from collections import deque
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from daemon import sdnotify
from daemon.api import Hub, RequestError
from daemon.controller import FINAL, RunController, RunPlan, RunState
from daemon.errors import RigError
from daemon.probe import ProbeProfile
from daemon.rig import messages as m
from daemon.rig.frontend import FrontEnd, FrontEndHandlers
from daemon.rig.transport import SerialTransport
from daemon.safety import Limits, SampleView, check_link, check_precheck, check_sample
from daemon.store.writer import FLUSH_INTERVAL_S, Store, StoreError

log = logging.getLogger("linerigd")

RUN_METADATA_KEYS = ("site", "location", "depth_m", "sample", "material", "moisture_pct",
                     "dry_density_kg_per_m3", "notes", "operator")


@dataclass
class DaemonSettings:
    frontend_url: str
    probe: ProbeProfile
    limits: Limits = field(default_factory=Limits)
    rate_hz: float = 1.0
    default_plan: RunPlan = field(default_factory=RunPlan)
    simulated_material: str | None = None


class RigService:
    def __init__(self, settings: DaemonSettings, store: Store, hub: Hub) -> None:
        self.s = settings
        self.store = store
        self.hub = hub
        self.transport = SerialTransport(settings.frontend_url)
        self.frontend = FrontEnd(self.transport, FrontEndHandlers(
            on_sample=self._on_sample, on_boot=self._on_boot, on_fault=self._on_fault,
            on_link_lost=self._on_link_lost, on_bad_message=lambda why: log.warning("bad message: %s", why)))
        self.run: RunController | None = None
        self.link_up = False
        self.armed_power: float | None = None
        self.last_sample: dict[str, Any] | None = None
        self.last_sample_wall = time.monotonic()
        self.device_s = 0.0
        self._ms_offset = 0
        self._last_ms: int | None = None
        self._n = 0
        self._tasks: list[asyncio.Task[Any]] = []
        self._bad_frames: deque[tuple[float, int]] = deque()
        self._stopping = asyncio.Event()
        self._background: set[asyncio.Task[Any]] = set()
        self.fault: str | None = None
        self.run_arrays: dict[str, list[Any]] = {}

    # -- life cycle ---------------------------------------------------------
    async def start(self) -> None:
        closed = self.store.close_interrupted_runs()
        if closed:
            log.warning("closed interrupted runs %s; the heater stays off until an operator starts a run", closed)
        for coro in (self._link_loop(), self._lease_loop(), self._watch_loop(), self._flush_loop()):
            self._tasks.append(asyncio.create_task(coro))

    async def stop(self, reason: str = "daemon stopping") -> None:
        self._stopping.set()
        self.trip(reason, fault=False)
        with contextlib.suppress(Exception):
            await asyncio.wait_for(self.frontend.heater_off(), 0.5)
        for t in self._tasks:
            t.cancel()
        for t in self._tasks:
            with contextlib.suppress(asyncio.CancelledError, Exception):
                await t
        with contextlib.suppress(StoreError):
            self.store.flush()
        self.transport.close()

    def _spawn(self, coro: Any) -> None:
        task = asyncio.create_task(coro)
        self._background.add(task)
        task.add_done_callback(self._background.discard)

    # -- the safe state -----------------------------------------------------
    def trip(self, reason: str, fault: bool = True) -> None:
        """Heater off first, then record why. Safe to call twice."""
        was_armed = self.armed_power is not None
        self.armed_power = None
        self._spawn(self._heater_off())
        run = self.run
        if run is not None and run.active:
            if fault:
                run.fault(reason, self.device_s)
            else:
                run.abort(reason, self.device_s)
        elif fault and (was_armed or self.link_up):
            self._event(None, "safety", None, reason)
        if fault:
            self.fault = reason
            self.hub.publish({"event": "fault", "reason": reason})
            log.error("safety trip: %s", reason)

    async def _heater_off(self) -> None:
        try:
            await self.frontend.heater_off()
        except (RigError, OSError) as exc:
            log.warning("heater off not acknowledged (%s); the front end's lease will turn it off", exc)
            await self.frontend.heater_off_best_effort()

    # -- link ---------------------------------------------------------------
    async def _link_loop(self) -> None:
        while not self._stopping.is_set():
            try:
                self.transport.open()
            except RigError as exc:
                self._note_link(False, str(exc))
                await asyncio.sleep(0.5)
                continue
            reader = asyncio.create_task(self.frontend.read_forever())
            try:
                await self._bring_up()
            except (RigError, TimeoutError) as exc:
                log.warning("front end did not come up: %s", exc)
                reader.cancel()
                self.transport.close()
                await asyncio.sleep(0.5)
                continue
            self._note_link(True, f"front end {self.frontend.identity.serial if self.frontend.identity else '?'} "
                                  "connected")
            await reader
            self._note_link(False, "front end link lost")
            await asyncio.sleep(0.2)

    async def _bring_up(self) -> None:
        await self.frontend.heater_off()  # whatever state it was left in, it starts off
        await self.frontend.identify()
        await self.frontend.configure(self.s.rate_hz, self.s.probe.thermocouple or "T", "T",
                                      self.s.probe.length_m or 0.1)
        self.last_sample_wall = time.monotonic()

    def _note_link(self, up: bool, why: str) -> None:
        if up == self.link_up:
            return
        self.link_up = up
        self.hub.publish({"event": "link", "up": up, "reason": why})
        run_id = self.run.run_id if self.run and self.run.active else None
        self._event(run_id, "link", None, why)
        if not up and self.run is not None and self.run.heating:
            self.trip(f"front end lost while heating: {why}")

    def _on_link_lost(self, why: str) -> None:
        log.warning("link lost: %s", why)

    def _on_boot(self, boot: m.Boot) -> None:
        self._last_ms = None
        why = f"front end restarted (boot id {boot.boot_id}, cause {boot.reset_cause})"
        if self.run is not None and self.run.heating:
            self.trip(why)
        else:
            self._event(self.run.run_id if self.run and self.run.active else None, "link", None, why)
        if self.link_up:
            self._spawn(self._reconfigure())

    async def _reconfigure(self) -> None:
        try:
            await self._bring_up()  # configuration again; never the heater
        except (RigError, TimeoutError) as exc:
            log.warning("reconfigure after reset failed: %s", exc)

    def _on_fault(self, fault: m.Fault) -> None:
        why = f"front end reports {fault.code}: {fault.detail}"
        if self.run is not None and self.run.active and (self.run.heating or fault.code != "LEASE"):
            self.trip(why)
        else:
            self._event(None, "device", None, why)

    # -- samples ------------------------------------------------------------
    def _device_seconds(self, ms: int) -> float:
        if self._last_ms is not None and ms < self._last_ms - (1 << 31):
            self._ms_offset += 1 << 32  # the 32-bit millisecond counter wrapped
        self._last_ms = ms
        return (ms + self._ms_offset) / 1000.0

    def _on_sample(self, s: m.Sample) -> None:
        now = time.monotonic()
        self.last_sample_wall = now
        self.device_s = self._device_seconds(s.device_ms)
        names = [x.name for x in self.s.probe.sensors]
        temps = tuple(float("nan") if c.fault else c.value for c in s.channels)
        faults = tuple(c.fault for c in s.channels)
        length = self.s.probe.length_m or 0.1
        power = s.heater_V * s.heater_A / length if s.heater_on else 0.0
        ohm = s.heater_V / s.heater_A if s.heater_on and s.heater_A > 1e-3 else None
        run = self.run
        active = run is not None and run.active
        heater_temps = [temps[i] for i, x in enumerate(self.s.probe.sensors)
                        if i < len(temps) and x.is_on_heater and math.isfinite(temps[i])]
        rise = run.rise_K(max(heater_temps)) if (run is not None and heater_temps) else None
        elapsed = self.device_s - run.heat_start_s if run is not None and run.heat_start_s is not None else 0.0
        view = SampleView(heating=self.armed_power is not None, heater_on=s.heater_on,
                          power_set_W_per_m=self.armed_power or 0.0, power_W_per_m=power, heater_ohm=ohm,
                          supply_V=s.supply_V, temps_C=temps, faults=faults, rise_K=rise,
                          heating_elapsed_s=elapsed if run is not None and run.heating else 0.0)
        self.last_sample = {"device_s": self.device_s, "temps_C": [None if math.isnan(t) else t for t in temps],
                            "faults": list(faults), "sensors": names, "q_W_per_m": power, "heater_on": s.heater_on,
                            "heater_V": s.heater_V, "heater_A": s.heater_A, "supply_V": s.supply_V, "cj_C": s.cj_C}
        if active and run is not None and run.state == RunState.CHECKING:
            problems = check_precheck(temps, faults, s.supply_V, self.s.limits)
            if problems:
                run.precheck_failed(problems, self.device_s)
                return
        reason = check_sample(view, self.s.limits, self.s.probe.heater_resistance_ohm)
        if reason and (active or s.heater_on):
            self.trip(reason)
        run = self.run
        if run is None or (not run.active and run.state != RunState.FAULTED):
            self._publish_sample(None, None)
            return
        if not run.active:
            self._publish_sample(None, None)
            return
        phase = str(run.state)
        self._n += 1
        self.store.add_sample((run.run_id, self._n, s.seq, s.device_ms, self.device_s, phase, int(s.heater_on),
                               s.heater_V, s.heater_A, s.supply_V, power, s.cj_C,
                               json.dumps(self.last_sample["temps_C"]), json.dumps(list(faults))))
        arr = self.run_arrays
        arr["device_s"].append(self.device_s)
        arr["q"].append(power)
        arr["temps"].append(temps)
        primary = run.sensor_index
        run.on_sample(self.device_s, temps[primary] if primary < len(temps) else float("nan"), power)
        self._publish_sample(run.run_id, phase)

    def _publish_sample(self, run_id: int | None, phase: str | None) -> None:
        if self.hub.subscribers and self.last_sample is not None:
            t = None
            if self.run is not None and self.run.heat_start_s is not None and run_id is not None:
                t = self.device_s - self.run.heat_start_s
            self.hub.publish({"event": "sample", "run_id": run_id, "phase": phase, "t_s": t, **self.last_sample})

    # -- periodic tasks -----------------------------------------------------
    async def _lease_loop(self) -> None:
        period = self.s.limits.lease_s / 4
        while True:
            await asyncio.sleep(period)
            if self.armed_power is None or not self.link_up:
                continue
            try:
                await self.frontend.renew_lease(self.s.limits.lease_s)
            except (RigError, TimeoutError) as exc:
                if self.armed_power is not None:
                    self.trip(f"front end stopped acknowledging lease renewals: {exc}")

    async def _watch_loop(self) -> None:
        wd = sdnotify.watchdog_interval_s()
        last_ping = 0.0
        while True:
            await asyncio.sleep(0.1)
            now = time.monotonic()
            counters = self.frontend.decoder.counters
            self._bad_frames.append((now, counters.bad_frames))
            while self._bad_frames and self._bad_frames[0][0] < now - 60:
                self._bad_frames.popleft()
            bad = counters.bad_frames - self._bad_frames[0][1]
            silent = now - self.last_sample_wall if self.link_up or self.armed_power is not None else 0.0
            reason = check_link(bad, silent, self.s.limits)
            if reason and (self.armed_power is not None or (self.run is not None and self.run.heating)):
                self.trip(reason)
            if wd is not None and now - last_ping >= wd and self.store.failed is None:
                sdnotify.notify("WATCHDOG=1")
                last_ping = now

    async def _flush_loop(self) -> None:
        while True:
            await asyncio.sleep(FLUSH_INTERVAL_S)
            try:
                self.store.flush()
            except StoreError as exc:
                self.trip(str(exc))

    def _event(self, run_id: int | None, kind: str, state: str | None, reason: str,
               data: dict[str, Any] | None = None) -> None:
        try:
            self.store.event(run_id, kind, state, reason, self.device_s, data)
        except StoreError as exc:
            if self.armed_power is not None:
                self.armed_power = None
                self._spawn(self._heater_off())
            self.fault = str(exc)
            log.error("%s (event was: %s)", exc, reason)

    # -- requests -----------------------------------------------------------
    def status(self) -> dict[str, Any]:
        run = self.run
        return {
            "link_up": self.link_up,
            "identity": self.frontend.identity.__dict__ if self.frontend.identity else None,
            "heater_armed": self.armed_power is not None,
            "fault": self.fault,
            "store_failed": self.store.failed,
            "device_s": self.device_s,
            "last_sample": self.last_sample,
            "probe": {"name": self.s.probe.name, "serial": self.s.probe.serial,
                      "sensors": [x.name for x in self.s.probe.sensors]},
            "limits": self.s.limits.__dict__,
            "simulated_material": self.s.simulated_material,
            "run": None if run is None else {
                "id": run.run_id, "state": str(run.state), "plan": run.plan.to_dict(), "cycle": run.cycle,
                "heat_start_device_s": run.heat_start_s, "estimate": run.last_estimate,
                "phase_start_device_s": run.phase_start_s},
            "counters": self.frontend.decoder.counters.__dict__,
        }

    def start_run(self, plan: RunPlan, metadata: dict[str, Any]) -> int:
        if self.run is not None and self.run.active:
            raise RequestError(f"run {self.run.run_id} is still {self.run.state}; stop or abort it first")
        if not self.link_up:
            raise RequestError("the front end is not connected; check the cable and the port")
        if self.store.failed:
            raise RequestError(f"the database cannot take writes: {self.store.failed}")
        unknown = sorted(set(metadata) - set(RUN_METADATA_KEYS))
        if unknown:
            raise RequestError(f"unknown metadata key {unknown[0]!r}; known: {', '.join(RUN_METADATA_KEYS)}")
        names = [x.name for x in self.s.probe.sensors]
        if plan.sensor not in names:
            raise RequestError(f"sensor {plan.sensor!r} is not on probe {self.s.probe.name!r} ({', '.join(names)})")
        if plan.power_W_per_m > self.s.limits.max_power_W_per_m:
            raise RequestError(f"power {plan.power_W_per_m} W/m is above the limit "
                               f"{self.s.limits.max_power_W_per_m} W/m")
        fields = {k: metadata.get(k) for k in RUN_METADATA_KEYS if metadata.get(k) is not None}
        if self.s.simulated_material and "material" not in fields:
            fields["material"] = self.s.simulated_material
        try:
            run_id = self.store.create_run({
                **fields, "kind": "single", "probe_serial": self.s.probe.serial,
                "sensor_names": json.dumps(names), "heater_length_m": self.s.probe.length_m,
                "plan_json": json.dumps(plan.to_dict()),
                "frontend_boot_id": self.frontend.identity.boot_id if self.frontend.identity else None})
        except StoreError as exc:
            raise RequestError(str(exc)) from exc
        self.fault = None
        self.run_arrays = {"device_s": [], "q": [], "temps": []}
        self.run = RunController(run_id, plan, _Actions(self, run_id), sensor_index=names.index(plan.sensor),
                                 reducer_factory=self._reducer_factory(plan.sensor))
        self._event(run_id, "state", "checking", "run requested", {"plan": plan.to_dict(), "metadata": fields})
        self.hub.publish({"event": "state", "run_id": run_id, "state": "checking", "reason": "run requested"})
        return run_id

    def _reducer_factory(self, sensor: str) -> Any:
        from daemon.reduction.live import LiveReducer

        probe = self.s.probe
        return lambda: LiveReducer(probe=probe, sensor=sensor)

    def stop_heating(self) -> None:
        if self.run is None or not self.run.stop_heating():
            raise RequestError("no run is heating")
        self._event(self.run.run_id, "operator", None, "operator asked to stop heating")

    def abort(self, reason: str = "operator abort") -> None:
        if self.run is None or not self.run.active:
            raise RequestError("no run is active")
        self.trip(reason, fault=False)

    async def final_reduction(self, run_id: int) -> dict[str, Any]:
        run = self.run
        arr = self.run_arrays
        if run is None or run.heat_start_s is None or len(arr.get("device_s", [])) < 10:
            return {}
        from daemon.reduction import reduce_run
        from daemon.reduction.data import RunData

        t = np.asarray(arr["device_s"]) - run.heat_start_s
        temps = np.asarray(arr["temps"], dtype=float)
        names = [x.name for x in self.s.probe.sensors]
        data = RunData(time_s=t, q_W_per_m=np.asarray(arr["q"]),
                       temps_C={n: temps[:, i] for i, n in enumerate(names)})
        usable = {n: v for n, v in data.temps_C.items() if np.all(np.isfinite(v))}
        if not usable:
            return {}
        data = RunData(time_s=t, q_W_per_m=data.q_W_per_m, temps_C=usable)
        # CPU-bound numpy/scipy work off the event loop, so lease and watch tasks keep their timing.
        red = await asyncio.to_thread(reduce_run, data, self.s.probe, max_rise_K=self.s.limits.max_rise_K)
        out = {}
        for name, res in red.sensors.items():
            j = res.to_json()
            if run.not_settled and "not_settled" not in j["flags"]:
                j["flags"] = [*j["flags"], "not_settled"]
            self.store.add_result(run_id, name, j, source="final")
            out[name] = j
        return out


class _Actions:
    """What a run controller may ask of the daemon."""

    def __init__(self, svc: RigService, run_id: int) -> None:
        self.svc = svc
        self.run_id = run_id

    def arm(self, power_W_per_m: float) -> None:
        svc = self.svc
        svc.armed_power = power_W_per_m

        async def _arm() -> None:
            try:
                await svc.frontend.set_power(power_W_per_m, svc.s.limits.lease_s)
            except (RigError, TimeoutError) as exc:
                svc.trip(f"front end refused to arm the heater: {exc}")

        svc._spawn(_arm())

    def disarm(self, reason: str) -> None:
        svc = self.svc
        svc.armed_power = None
        svc._spawn(svc._heater_off())

    def state_changed(self, state: RunState, reason: str, device_s: float) -> None:
        svc = self.svc
        fields: dict[str, Any] = {"state": str(state)}
        if state in FINAL:
            from daemon.store.writer import utc_now

            fields.update(ended_utc=utc_now(), end_reason=reason)
        if state == RunState.RECOVERING:
            fields["heat_end_device_s"] = device_s
        with contextlib.suppress(StoreError):
            svc.store.update_run(self.run_id, fields)
        svc._event(self.run_id, "state", str(state), reason)
        svc.hub.publish({"event": "state", "run_id": self.run_id, "state": str(state), "reason": reason,
                         "device_s": device_s})

    def heating_started(self, device_s: float) -> None:
        with contextlib.suppress(StoreError):
            self.svc.store.update_run(self.run_id, {"heat_start_device_s": device_s})

    def estimate(self, est: dict[str, Any]) -> None:
        self.svc.hub.publish({"event": "estimate", "run_id": self.run_id, **est})

    def finished(self, state: RunState) -> None:
        svc = self.svc

        async def _finish() -> None:
            results: dict[str, Any] = {}
            try:
                results = await svc.final_reduction(self.run_id)
            except Exception as exc:  # a failed reduction must not lose the run
                log.exception("final reduction failed")
                svc._event(self.run_id, "reduction", None, f"final reduction failed: {exc}")
            with contextlib.suppress(StoreError):
                svc.store.flush()
            svc.hub.publish({"event": "run_finished", "run_id": self.run_id, "state": str(state),
                             "results": results})

        svc._spawn(_finish())


def load_default_probe() -> ProbeProfile:
    from daemon.probe import load_probe_profile

    return load_probe_profile(Path(__file__).parent / "profiles" / "default-needle.toml")
