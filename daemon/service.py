"""The daemon's running parts and who owns what.

Tasks (all in one asyncio loop, each guarded: an unexpected error turns the heater off and stops the daemon
with a failure code, so systemd restarts it in the safe state):
- link: opens the front end, reads frames, reconnects after an unplug; never re-arms.
- lease: renews the heater lease while the heater should be on; with a SCPI supply as the power source, it
  runs the software constant-power loop instead (one step per period).
- watch: stale data, frame loss, arming and heating-time limits; pings the systemd watchdog while healthy.
- flush: commits pending samples every FLUSH_INTERVAL_S and publishes what is committed.
The run controller is the only thing that asks for heater power; ``trip`` is the
one path to the safe state and may be called any number of times. Besides the store's writer and the final
reduction, one more thread: the stop verdict's judgements (``OrderedWorker``), in checkpoint order, so a fast
simulated rig never holds the loop (the verdict's time is its checkpoint's, whenever the judgement finishes).

The rig service owns the devices, the sample pipeline and the safe state. Runs and series (checking a request,
opening a run, the next cycle, the final reduction) belong to the run keeper (``daemon/run_keeper.py``); the
service answers the run requests by handing them to it.
"""

from __future__ import annotations

import asyncio
import contextlib
import json
import logging
import math
import os
import time
from collections import deque
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from linerig.daemon import sdnotify
from linerig.daemon.api import Hub, Peer
from linerig.daemon.controller import RunController, RunPlan, RunState
from linerig.daemon.errors import RigError
from linerig.daemon.probe import ProbeProfile
from linerig.daemon.rig import messages as m
from linerig.daemon.rig.frontend import FrontEnd, FrontEndHandlers
from linerig.daemon.rig.heater import ScpiHeater, open_scpi_heater
from linerig.daemon.rig.scpi import ScpiError, SupplyLimits
from linerig.daemon.rig.transport import SerialTransport
from linerig.daemon.run_keeper import RunKeeper
from linerig.daemon.safety import (
    DeviceClockWatch,
    FrameLossWindow,
    Limits,
    SampleView,
    ShortfallWatch,
    check_arming,
    check_heater_response,
    check_link,
    check_precheck,
    check_sample,
)
from linerig.daemon.store.writer import FLUSH_INTERVAL_S, Store, StoreError
from linerig.daemon.threads import OrderedWorker

log = logging.getLogger("linerigd")

WATCH_PERIOD_S = 0.1
PRE_HEAT_SAMPLES = 10  # readings averaged for each sensor's level at heater on (the response check's zero)
FORCE_OFF_HOLD_S = 10.0  # OFF is repeated this long after a heater-on nobody here asked for (no source)


@dataclass
class DaemonSettings:
    frontend_url: str
    probe: ProbeProfile
    limits: Limits = field(default_factory=Limits)
    rate_hz: float = 1.0
    default_plan: RunPlan = field(default_factory=RunPlan)
    presets: dict[str, RunPlan] = field(default_factory=dict)
    simulated_material: str | None = None
    probes: tuple[ProbeProfile, ...] = ()
    config_source: str = "<defaults>"
    frontend_baud: int = 115200
    supply_url: str | None = None
    """A SCPI bench supply that heats the probe instead of the front end; the front end still measures."""
    supply_baud: int = 9600
    supply_limits: SupplyLimits | None = None


class RigService:
    def __init__(self, settings: DaemonSettings, store: Store, hub: Hub) -> None:
        self.s = settings
        self.store = store
        self.hub = hub
        self.transport = SerialTransport(settings.frontend_url, settings.frontend_baud)
        self.frontend = FrontEnd(self.transport, FrontEndHandlers(
            on_sample=self._on_sample, on_boot=self._on_boot, on_fault=self._on_fault,
            on_link_lost=self._on_link_lost, on_bad_message=lambda why: log.debug("bad message: %s", why),
            on_heater_switch=self._on_heater_switch, on_foreign_ack=self._on_foreign_ack,
            on_renewal=self._on_renewal))
        self.runs = RunKeeper(self)  # the current run and series
        self.link_up = False
        self.armed_power: float | None = None
        self._armed_wall: float | None = None
        self._heater_confirmed = False
        self._last_power_set = 0.0
        self._off_pending_until: float | None = None
        self._force_off_until: float | None = None  # OFF every lease period until then (a heater nobody armed)
        self._arm_task: asyncio.Task[None] | None = None
        self._last_lease_ack = 0.0
        self._off_sent = -1.0
        self._last_arm = -1.0
        self.last_sample: dict[str, Any] | None = None
        self.last_sample_wall = time.monotonic()
        self.device_s = 0.0
        self.samples_seen = 0
        # the stop verdict's judgements (numpy/scipy, a few ms each, many a second on a fast simulated rig)
        self._verdict_worker = OrderedWorker("linerigd-verdict")
        self._ms_offset = 0
        self._last_ms: int | None = None
        self._n = 0
        self._loss = FrameLossWindow(settings.limits.frame_window)
        self._clock = DeviceClockWatch()
        self._shortfall = ShortfallWatch()
        self._pre_heat: deque[tuple[float, ...]] = deque(maxlen=PRE_HEAT_SAMPLES)  # the last readings before heating
        self._heat_ref: tuple[float, ...] | None = None  # each sensor's level when heating began
        self._tasks: list[asyncio.Task[Any]] = []
        self._background: set[asyncio.Task[Any]] = set()
        self.stopping = False
        self.stop_requested = asyncio.Event()
        self.fatal: str | None = None
        self._store_tripped = False
        self.fault: str | None = None
        self._fault_recorded: str | None = None
        self._link_note: str | None = None
        self.run_arrays: dict[str, list[Any]] = {}
        self._sensor_names = [x.name for x in settings.probe.sensors]
        self._heater_idx = [i for i, x in enumerate(settings.probe.sensors) if x.is_on_heater]
        self._length_m = settings.probe.length_m or 0.1
        self.supply: ScpiHeater | None = None  # opened by start() when settings.supply_url is set

    # -- life cycle ---------------------------------------------------------
    async def start(self) -> None:
        # imported now, not in the middle of the first run, where it would hold the loop up
        import linerig.daemon.reduction.api
        import linerig.daemon.reduction.live  # noqa: F401

        if self.s.supply_url:
            self.supply = await self._open_supply(self.s.supply_url)
        loop = asyncio.get_running_loop()
        self.store.on_commit = lambda mark: loop.call_soon_threadsafe(self._committed, mark)
        self.store.on_failure = lambda why: loop.call_soon_threadsafe(self.note_store_failure, why)
        closed = self.store.close_interrupted_runs()
        if closed:
            log.warning("closed interrupted runs %s; the heater stays off until an operator starts a run", closed)
        for p in {*self.s.probes, self.s.probe}:
            with contextlib.suppress(StoreError):
                self.store.upsert_probe(p.serial or p.name, p.name, p.kind, json.dumps(_profile_dict(p)))
        self.record_event(None, "daemon", None, f"linerigd started (pid {os.getpid()}, config {self.s.config_source}); "
                                          "heater off, nothing re-armed",
                    {"closed_runs": closed, "frontend": self.s.frontend_url, "supply": self.s.supply_url})
        for name, coro in (("link", self._link_loop()), ("lease", self._lease_loop()),
                           ("watch", self._watch_loop()), ("flush", self._flush_loop())):
            self._tasks.append(asyncio.create_task(self._guard(name, coro), name=f"linerigd-{name}"))

    async def _open_supply(self, url: str) -> ScpiHeater:
        """The supply's session starts with its output off (confirmed), before any task can arm."""
        nominal = self.s.probe.heater_resistance_ohm or 40.0
        limits = self.s.supply_limits or SupplyLimits(v_max=30.0, i_max=1.0,
                                                      p_max_W=self.s.limits.max_power_W_per_m * self._length_m)
        return await open_scpi_heater(url, self._length_m, nominal, limits, baud=self.s.supply_baud)

    async def stop(self, reason: str = "daemon stopping") -> None:
        self.stopping = True
        self.trip(reason, fault=False)
        if self.supply is not None:
            await self.supply.off()
        with contextlib.suppress(Exception):
            await asyncio.wait_for(self.frontend.heater_off(), 0.5)
        for t in self._tasks:
            t.cancel()
        for t in self._tasks:
            with contextlib.suppress(asyncio.CancelledError, Exception):
                await t
        for t in list(self._background):
            with contextlib.suppress(asyncio.CancelledError, Exception):
                await asyncio.wait_for(t, 2.0)
        self.record_event(None, "daemon", None, f"linerigd stopping: {reason}")
        with contextlib.suppress(StoreError):
            self.store.flush()
        self.transport.close()
        if self.supply is not None:
            self.supply.close()

    async def _guard(self, name: str, coro: Any) -> None:
        try:
            await coro
        except asyncio.CancelledError:
            raise
        except Exception as exc:
            self.internal_error(f"the {name} task", exc)

    def internal_error(self, where: str, exc: BaseException | None) -> None:
        """A bug: heater off, record it, and stop with a failure code so systemd restarts us safe."""
        log.error("internal error in %s", where, exc_info=exc)
        reason = f"internal error in {where}: {type(exc).__name__ if exc else 'error'}: {exc}"
        self.trip(reason)
        if self.fatal is None:
            self.fatal = reason
            self.stop_requested.set()

    def spawn(self, coro: Any) -> asyncio.Task[Any]:
        task = asyncio.create_task(coro)
        self._background.add(task)
        task.add_done_callback(self._background.discard)
        return task

    # -- the safe state -----------------------------------------------------
    def trip(self, reason: str, fault: bool = True) -> None:
        """Heater off first, then record why. Safe to call twice."""
        self.disarm()
        run = self.run
        recorded = False
        if run is not None and run.active:
            recorded = True
            try:
                if fault:
                    run.fault(reason, self.device_s)
                else:
                    run.abort(reason, self.device_s)
            except Exception:  # recording failed: the heater is already off, the run must still end
                log.exception("run %s: recording the trip failed", run.run_id)
                run.state = RunState.FAULTED if fault else RunState.ABORTED
        if fault:
            self.fault = reason
            if reason != self._fault_recorded:
                self._fault_recorded = reason
                log.error("safety trip: %s", reason)
                self.hub.publish({"event": "fault", "reason": reason, "run_id": run.run_id if recorded and run
                                  else None})
                if not recorded:
                    self.record_event(None, "safety", None, reason)

    def disarm(self) -> None:
        self.armed_power = None
        self._armed_wall = None
        self._heater_confirmed = False
        task = self._arm_task
        if task is not None and not task.done() and task is not asyncio.current_task():
            task.cancel()  # a POWER command still retrying must not re-arm after the OFF
        self._arm_task = None
        now = time.monotonic()
        self._off_pending_until = now + self.s.limits.lease_s + 1.0
        if self._off_sent > self._last_arm and now - self._off_sent < 0.05:
            return  # the same trip reaching here twice (safety, then the run's own transition)
        self._off_sent = now
        self._off_now()
        with contextlib.suppress(RuntimeError):  # no running loop (at shutdown): the lease is the backstop
            self.spawn(self._heater_off())

    def _off_now(self) -> None:
        """The OFF frame on the wire before this call returns, ahead of any logging or database work."""
        coro = self.frontend.heater_off_best_effort()
        try:
            coro.send(None)  # it writes at once and finishes without waiting for anything
        except StopIteration:
            return
        except Exception as exc:
            log.warning("immediate heater off failed (%s); the acknowledged one follows", exc)
            return
        coro.close()  # it wanted to wait: the acknowledged OFF that follows covers it

    async def _heater_off(self) -> None:
        if self.supply is not None and not await self.supply.off():
            log.error("SCPI supply: output off not confirmed; switch it off at the panel")
        try:
            await self.frontend.heater_off()
            if self.armed_power is None:
                self._off_pending_until = None
        except (RigError, OSError, TimeoutError) as exc:
            log.warning("heater off not acknowledged (%s); the front end's lease will turn it off", exc)

    def arm(self, power_W_per_m: float) -> None:
        self.armed_power = power_W_per_m
        self._last_power_set = power_W_per_m
        self._armed_wall = self._last_arm = time.monotonic()
        self._last_lease_ack = self._armed_wall
        self._heater_confirmed = False
        self._arm_task = self.spawn(self._send_arm(power_W_per_m))

    async def _send_arm(self, power: float) -> None:
        sent = time.monotonic()
        if self.supply is not None:
            try:
                await self.supply.arm(power)
                await self.supply.keep_alive()  # a readback at once: samples show the heater on from here
                self._last_lease_ack = max(self._last_lease_ack, sent)
            except (ScpiError, RigError, TimeoutError, OSError) as exc:
                if self.armed_power is not None:
                    self.trip(f"SCPI supply did not start heating: {exc}")
            return
        try:
            await self.frontend.set_power(power, self.s.limits.lease_s)
            self._last_lease_ack = max(self._last_lease_ack, sent)
        except (RigError, TimeoutError, OSError) as exc:
            if self.armed_power is not None:
                self.trip(f"front end refused to arm the heater: {exc}")

    # -- link ---------------------------------------------------------------
    async def _link_loop(self) -> None:
        while True:
            try:
                self.transport.open()
            except RigError as exc:
                self._note_link(False, str(exc))
                if str(exc) != self._link_note:
                    log.warning("%s", exc)
                    self._link_note = str(exc)
                await asyncio.sleep(0.5)
                continue
            reader = asyncio.create_task(self.frontend.read_forever())
            try:
                await self._bring_up()
            except (RigError, TimeoutError) as exc:
                if str(exc) != self._link_note:
                    log.warning("front end did not come up: %s", exc)
                    self._link_note = str(exc)
                reader.cancel()
                with contextlib.suppress(asyncio.CancelledError, Exception):
                    await reader
                self.transport.close()
                await asyncio.sleep(0.5)
                continue
            ident = self.frontend.identity
            self._note_link(True, f"front end {ident.serial if ident else '?'} connected "
                                  f"(boot id {ident.boot_id if ident else '?'})")
            await reader
            self._note_link(False, "front end link lost")
            await asyncio.sleep(0.2)

    async def _bring_up(self) -> None:
        # whatever state it was left in, it starts off; samples already in flight may still show it on
        self._off_pending_until = time.monotonic() + self.s.limits.lease_s + 1.0
        await self.frontend.heater_off()
        await self.frontend.identify()
        await self.frontend.configure(self.s.rate_hz, self.s.probe.thermocouple or "T", "T",
                                      self.s.probe.length_m or 0.1)
        self.last_sample_wall = time.monotonic()
        self._loss.reset()
        self._clock.reset()

    def _note_link(self, up: bool, why: str) -> None:
        if up == self.link_up:
            return
        self.link_up = up
        self._link_note = None
        self.hub.publish({"event": "link", "up": up, "reason": why})
        run = self.run
        self.record_event(run.run_id if run and run.active else None, "link", None, why)
        if not up and run is not None and run.active:
            self.trip(f"front end lost during the run: {why}")

    def _on_link_lost(self, why: str) -> None:
        log.warning("link lost: %s", why)

    def _on_boot(self, boot: m.Boot) -> None:
        self._last_ms = None
        self._loss.reset()
        self._clock.reset()
        why = f"front end restarted (boot id {boot.boot_id}, cause {boot.reset_cause})"
        run = self.run
        if (run is not None and run.active) or self.armed_power is not None:
            self.trip(why)
        else:
            self.record_event(None, "link", None, why)
        if self.link_up:
            self.spawn(self._reconfigure())

    async def _reconfigure(self) -> None:
        try:
            await self._bring_up()  # configuration again; never the heater
        except (RigError, TimeoutError) as exc:
            log.warning("reconfigure after reset failed: %s", exc)

    def _on_fault(self, fault: m.Fault) -> None:
        why = f"front end reports {fault.code}: {fault.detail}"
        if (self.run is not None and self.run.active) or self.armed_power is not None:
            self.trip(why)
        else:
            self.record_event(None, "device", None, why)

    def _on_foreign_ack(self, ack: m.Ack) -> None:
        """Someone else's command was answered: whoever else writes to the front end can switch its heater on."""
        if not self.link_up:  # bytes left over from before this daemon opened the port
            log.debug("acknowledgement of command %s before the link came up: ignored", ack.cmd_seq)
            return
        self.force_off(f"the front end acknowledged command {ack.cmd_seq}, which this daemon did not send: another "
                       f"program is writing to {self.s.frontend_url}; heater forced off")

    def _on_renewal(self, sent: float, ack: m.Ack) -> None:
        """An answered renewal: the device extended its lease after ``sent`` (or says its heater is already off)."""
        if ack.ok:
            self._last_lease_ack = max(self._last_lease_ack, sent)
        elif ack.detail == "NOTARMED" and self.armed_power is not None and self._heater_confirmed \
                and sent > self._last_arm:
            self.trip("the front end's lease had run out (it answered a renewal NOTARMED): heater off")

    def force_off(self, reason: str) -> None:
        """Trip, then keep sending OFF every lease period for FORCE_OFF_HOLD_S (extended while it goes on)."""
        self._force_off_until = time.monotonic() + FORCE_OFF_HOLD_S
        self.trip(reason)

    # -- samples ------------------------------------------------------------
    def _on_heater_switch(self, kind: str, device_ms: int) -> None:
        """The front end's own time of switch-on or switch-off: the run's exact time zero and end of heating."""
        run = self.run
        if run is None or not run.active or self.supply is not None:
            return  # with a SCPI supply the front end's heater is not the one heating
        t = (device_ms + self._ms_offset) / 1000.0
        if kind == m.CMD_POWER and run.device_on_s is None and run.heating:
            run.device_on_s = t
        elif kind == m.CMD_OFF and run.heat_start_s is not None and run.device_off_s is None:
            run.device_off_s = t

    def _device_seconds(self, ms: int) -> float:
        if self._last_ms is not None and ms < self._last_ms - (1 << 31):
            self._ms_offset += 1 << 32  # the 32-bit millisecond counter wrapped
        self._last_ms = ms
        return (ms + self._ms_offset) / 1000.0

    def _on_sample(self, s: m.Sample) -> None:
        try:
            self._sample(s)
        except Exception as exc:
            self.internal_error("the sample path", exc)

    def _sample(self, s: m.Sample) -> None:
        now = time.monotonic()
        self.last_sample_wall = now
        self.samples_seen += 1
        c = self.frontend.decoder.counters
        self._loss.add(c.frames, c.lost_frames)
        self.device_s = self._device_seconds(s.device_ms)
        probe = self.s.probe
        temps = tuple(float("nan") if ch.fault else ch.value for ch in s.channels)
        faults = tuple(ch.fault for ch in s.channels)
        length = self._length_m
        heater_on, heater_V, heater_A = s.heater_on, s.heater_V, s.heater_A
        supply = self.supply
        if supply is not None:  # the supply heats: its output state and readback, not the front end's
            heater_on = supply.armed  # its output is confirmed on
            reading, loop = supply.reading, supply.loop
            if reading is not None:
                heater_V, heater_A = reading.volts, reading.amps
            elif loop is not None and loop.r_ohm > 0:  # on, not yet read back: its setting on the assumed load
                heater_V, heater_A = loop.v_set, loop.v_set / loop.r_ohm
            else:
                heater_V, heater_A = 0.0, 0.0
        power = heater_V * heater_A / length if heater_on else 0.0
        ohm = heater_V / heater_A if heater_on and heater_A > 1e-3 else None
        if self.armed_power is not None and heater_on and not self._heater_confirmed:
            self._heater_confirmed = True
        run = self.run
        active = run is not None and run.active
        temps_json = [t if math.isfinite(t) else None for t in temps]
        self.last_sample = {"device_s": self.device_s, "temps_C": temps_json, "faults": list(faults),
                            "sensors": self._sensor_names, "q_W_per_m": power,
                            "heater_on": heater_on, "heater_V": heater_V, "heater_A": heater_A,
                            "supply_V": s.supply_V, "cj_C": s.cj_C}
        if active and run is not None:  # stored first: the sample that trips a limit is the evidence
            self._n += 1
            self.store.add_sample((run.run_id, self._n, s.seq, s.device_ms, self.device_s, str(run.state),
                                   int(heater_on), heater_V, heater_A, s.supply_V, power, s.cj_C,
                                   json.dumps(temps_json), json.dumps(list(faults))))
            arr = self.run_arrays
            arr["device_s"].append(self.device_s)
            arr["q"].append(power)
            arr["temps"].append(temps)
        # safety before anything else acts on the sample
        heater_temps = [temps[i] for i in self._heater_idx if i < len(temps) and math.isfinite(temps[i])]
        rise = run.rise_K(max(heater_temps)) if (run is not None and run.heating and heater_temps) else None
        view = SampleView(heating=self.armed_power is not None, heater_confirmed=self._heater_confirmed,
                          heater_on=heater_on,
                          power_set_W_per_m=self.armed_power if self.armed_power is not None else self._last_power_set,
                          power_W_per_m=power, heater_ohm=ohm, supply_V=s.supply_V, temps_C=temps, faults=faults,
                          rise_K=rise, heating_elapsed_s=run.heating_elapsed_s(self.device_s) if run else 0.0,
                          run_active=active and run is not None and run.state != RunState.CHECKING,
                          off_pending=self._off_pending_until is not None)
        # the watches keep state: each sees every sample, whatever trips first
        clock = self._clock.add(self.device_s, 1.0 / self.s.rate_hz)
        response = self._heater_response(run, temps, power)
        shortfall = self._shortfall.add(self.armed_power is not None and self._heater_confirmed and heater_on,
                                        self.armed_power or 0.0, power, self.s.limits)
        reason = check_sample(view, self.s.limits, probe.heater_resistance_ohm) or clock or response or shortfall
        if reason and heater_on and self.armed_power is None and self._off_pending_until is None:
            self.force_off(reason)  # a heater nobody here armed
        elif reason and (active or heater_on or self.armed_power is not None):
            self.trip(reason)
        if active and run is not None and run.active:
            if run.state == RunState.CHECKING:
                problems = check_precheck(temps, faults, s.supply_V, self.s.limits, heater_on)
                if problems:
                    run.precheck_failed(problems, self.device_s)
            if run.active:
                primary = run.sensor_index
                run.on_sample(self.device_s, temps[primary] if primary < len(temps) else float("nan"), power,
                              heater_on)
                self.runs.after_sample(run)
        if self.hub.subscribers:
            t = None
            if active and run is not None and run.heat_start_s is not None:
                t = self.device_s - run.heat_start_s
            self.hub.publish({"event": "sample", "run_id": run.run_id if active and run else None,
                              "phase": str(run.state) if active and run else None, "t_s": t, **self.last_sample})

    def _heater_response(self, run: RunController | None, temps: tuple[float, ...], power: float) -> str | None:
        """Whether each sensor on the heater has warmed since heating began (``check_heater_response``)."""
        if run is None or not run.active:
            self._heat_ref = None
            self._pre_heat.clear()
            return None
        if not run.heating or not self._heater_confirmed:
            self._heat_ref = None
            self._pre_heat.append(temps)  # this run's own baseline
            return None
        if self._heat_ref is None:
            if not self._pre_heat:
                return None
            with np.errstate(all="ignore"):
                self._heat_ref = tuple(float(v) for v in np.nanmean(np.array(self._pre_heat, dtype=float), axis=0))
            self._pre_heat.clear()
        ref = self._heat_ref
        rises = {self._sensor_names[i]: temps[i] - ref[i] for i in self._heater_idx if i < len(temps) and i < len(ref)}
        return check_heater_response(rises, run.heating_elapsed_s(self.device_s), power)

    # -- periodic tasks -----------------------------------------------------
    async def _lease_loop(self) -> None:
        lease = self.s.limits.lease_s
        period = lease / 4
        while True:
            await asyncio.sleep(period)
            if self._force_off_until is not None and self.armed_power is None and self.link_up:
                if time.monotonic() < self._force_off_until:
                    await self.frontend.heater_off_best_effort()
                else:
                    self._force_off_until = None
            if self.armed_power is None or not self.link_up:
                continue
            sent = time.monotonic()
            if self.supply is not None:
                if not self.supply.armed:
                    continue  # still arming (or already off): _send_arm reports its own failure
                try:
                    await self.supply.keep_alive()
                except (ScpiError, RigError, TimeoutError, OSError) as exc:
                    if self.armed_power is not None:
                        self.trip(f"SCPI supply: {exc}")
                    continue
                self._last_lease_ack = max(self._last_lease_ack, sent)
                continue
            with contextlib.suppress(RigError, OSError):
                # PROTOCOL.md §6: a renewal every period whatever became of the last one, so that the lease
                # survives lost renewals, lost answers and slow ones; the watch trips only when no renewal sent
                # within a whole lease was acknowledged (``_on_renewal``)
                await self.frontend.send_renewal(lease)

    def _check_timers(self, now: float) -> str | None:
        lim = self.s.limits
        if self.link_up and (self.armed_power is not None or (self.run is not None and self.run.active)):
            reason = check_link(self._loss.lost, self._loss.frames, now - self.last_sample_wall, lim)
            if reason:
                return reason
        if self.armed_power is not None and self._armed_wall is not None:
            reason = check_arming(now - self._armed_wall, self._heater_confirmed, lim)
            if reason:
                return reason
            if now - self._last_lease_ack > lim.lease_s:
                who = "the SCPI supply completed no constant-power step" if self.supply is not None else \
                    "the front end acknowledged no lease renewal"
                return f"{who} for {now - self._last_lease_ack:.1f} s"
            if now - self._armed_wall > lim.max_heating_s:
                return (f"heating time {now - self._armed_wall:.0f} s by the daemon's clock is above the limit "
                        f"{lim.max_heating_s:.0f} s (is the front end's clock running?)")
        return None

    def _healthy(self) -> bool:
        return all(not t.done() for t in self._tasks)

    async def _watch_loop(self) -> None:
        wd = sdnotify.watchdog_interval_s()
        last_ping = 0.0
        last = time.monotonic()
        while True:
            await asyncio.sleep(WATCH_PERIOD_S)
            now = time.monotonic()
            late = now - last > 3 * WATCH_PERIOD_S
            last = now
            # after the loop itself was held up, samples may be waiting unread: let the reader run first
            reason = None if late else self._check_timers(now)
            if reason:
                self.trip(reason)
            if self._off_pending_until is not None and now > self._off_pending_until:
                self._off_pending_until = None
            # the ping says: this loop runs and every task is alive; a wedged loop or a dead task stops it
            if wd is not None and now - last_ping >= wd and self._healthy():
                sdnotify.notify("WATCHDOG=1")
                last_ping = now

    async def _flush_loop(self) -> None:
        while True:
            await asyncio.sleep(FLUSH_INTERVAL_S)
            try:
                self.store.flush()  # to the writer thread; ``_committed`` hears back
            except StoreError as exc:
                self.note_store_failure(str(exc))

    def _committed(self, mark: dict[str, int]) -> None:
        self.hub.publish({"event": "committed", **mark})

    def note_store_failure(self, why: str) -> None:
        """The first failed write trips once; everything after it is only logged."""
        if self._store_tripped:
            return
        self._store_tripped = True
        self.trip(f"{why}: the heater is off and the run stops; free disk space or fix the database, "
                  "then restart linerigd")

    def record_event(self, run_id: int | None, kind: str, state: str | None, reason: str,
               data: dict[str, Any] | None = None) -> None:
        try:
            self.store.event(run_id, kind, state, reason, self.device_s, data)
        except StoreError as exc:
            log.error("event not recorded (%s): %s", exc, reason)
            self.note_store_failure(str(exc))

    # -- requests -----------------------------------------------------------
    def status(self) -> dict[str, Any]:
        run = self.run
        return {
            "link_up": self.link_up,
            "link_problem": None if self.link_up else self._link_note,
            "identity": self.frontend.identity.__dict__ if self.frontend.identity else None,
            "heater_armed": self.armed_power is not None,
            "heat_source": "scpi" if self.supply is not None else "frontend",
            "supply_identity": self.supply.supply.identity.__dict__
            if self.supply is not None and self.supply.supply.identity else None,
            "heater_on": bool(self.last_sample and self.last_sample["heater_on"]),
            "fault": self.fault,
            "store_failed": self.store.failed,
            "committed": self.store.last_committed,
            "device_s": self.device_s,
            "last_sample": self.last_sample,
            "probe": {"name": self.s.probe.name, "serial": self.s.probe.serial,
                      "sensors": [x.name for x in self.s.probe.sensors]},
            "limits": self.s.limits.to_dict(),
            "simulated_material": self.s.simulated_material,
            "config": self.s.config_source,
            "presets": sorted(self.s.presets),
            "run": None if run is None else run.snapshot(),
            "series": self.runs.series_status(),
            "counters": self.frontend.decoder.counters.__dict__,
            "frame_loss": {"lost": self._loss.lost, "frames": self._loss.frames},
            "samples_seen": self.samples_seen,
        }

    def make_plan(self, preset: str | None, changes: dict[str, Any]) -> RunPlan:
        return self.runs.make_plan(preset, changes)

    def start_run(self, plan: RunPlan, metadata: dict[str, Any], peer: Peer | None = None) -> dict[str, Any]:
        return self.runs.start_run(plan, metadata, peer)

    def resume_series(self, series_id: int, peer: Peer | None = None) -> dict[str, Any]:
        return self.runs.resume_series(series_id, peer)

    def stop_heating(self, peer: Peer | None = None) -> None:
        self.runs.stop_heating(peer)

    def abort(self, reason: str = "operator abort", peer: Peer | None = None) -> None:
        self.runs.abort(reason, peer)

    # -- what the run keeper asks of the rig ----------------------------------
    @property
    def run(self) -> RunController | None:
        """The current or last run; the run keeper opens it, the sample path and the safe state act on it."""
        return self.runs.run

    def clear_fault(self) -> None:
        """An operator starts a new run: the last trip is history (it stays in the events)."""
        self.fault = None
        self._fault_recorded = None

    def begin_run_samples(self) -> None:
        """A new run's samples are numbered from 1 and kept for its final reduction."""
        self._n = 0
        self._loss.reset()  # a burst that is over does not count against a new run; the window refills
        self.run_arrays = {"device_s": [], "q": [], "temps": []}

    def reducer_factory(self, sensor: str, factor: float = 1.0, factor_u: float = 0.0,
                        probe: ProbeProfile | None = None) -> Any:
        """The live reducer for one sensor of this rig's probe (``probe``: as the run has it, in its sample),
        within its temperature-rise limit, with the probe's calibration factor applied."""
        from linerig.daemon.reduction.live import LiveReducer

        probe = probe or self.s.probe
        lim = self.s.limits.max_rise_K
        worker = self._verdict_worker
        return lambda stop: LiveReducer(probe=probe, sensor=sensor, stop=stop, max_rise_K=lim,
                                        calibration_factor=factor, calibration_factor_u=factor_u,
                                        defer=worker.submit)


def _profile_dict(p: ProbeProfile) -> dict[str, Any]:
    from dataclasses import asdict

    return asdict(p)


def load_default_probe() -> ProbeProfile:
    from linerig.daemon.probe import load_probe_profile
    from linerig.daemon.resources import default_probe_path

    return load_probe_profile(default_probe_path())
