"""The live daemon as a qualification rig, through its socket (real hardware, or `linerigd --simulate`).

What the current API allows, and how it is used:

* heater-off logging (isothermal bath): the ``sample`` events the daemon publishes to subscribers between runs;
* heating at a set power (heater check in a bath, reference runs): an ordinary run (``start`` with baseline_s,
  heat_s, power_W_per_m, recover_s), followed through its ``sample`` events until ``run_finished``; the run's
  ``heat_start_device_s`` (``run`` request) sets the time origin. The runs stay in the database like any other,
  with a note saying they belong to a qualification;
* placing the probe and reading the bath's reference thermometer: the operator, prompted.

What the daemon should add to make this first-class (see hardware/QUALIFICATION.md): a request to store a
qualification (the CLI writes the ``qualifications`` row itself today), a request returning a run's samples
(events can be dropped for a slow subscriber), a short heater check that skips the settling state, and a way to
mark qualification runs other than their notes.
"""

from __future__ import annotations

import asyncio
import math
from typing import Any, Protocol

import numpy as np

from linerig.daemon.probe import ProbeProfile

from .requests import AskNumber, PlaceInBath, PlaceInMedium, Record, Recording


class LiveRigError(RuntimeError):
    """The daemon could not do what the procedure asked; the message says what to check."""


class LiveOperator(Protocol):
    """A person at the rig: reads instruments, moves the probe. Methods may be coroutines."""

    def ask_number(self, request: AskNumber) -> Any: ...
    def instruct(self, text: str) -> Any: ...


class DaemonClient(Protocol):
    async def request(self, op: str, **fields: Any) -> dict[str, Any]: ...
    def events(self) -> Any: ...


async def _maybe(v: Any) -> Any:
    if hasattr(v, "__await__"):
        return await v
    return v


class DaemonQualificationRig:
    """Answers the procedure's requests with the daemon (``client`` must be connected)."""

    blocking = False
    link_wait_s = 10.0
    settle_window_s = 60.0

    def __init__(self, client: DaemonClient, profile: ProbeProfile, operator: LiveOperator, sensor: str, *,
                 max_drift_K_per_min: float = 0.002, settle_timeout_s: float = 3600.0) -> None:
        self.client = client
        self.profile = profile
        self.operator = operator
        self.sensor = sensor
        self.max_drift_K_per_min = max_drift_K_per_min
        self.settle_timeout_s = settle_timeout_s
        self._subscribed = False
        self._t0_device_s: float | None = None

    async def check(self) -> dict[str, Any]:
        """The daemon must be connected to a front end and run the probe being qualified."""
        if not self._subscribed:
            await self.client.request("subscribe")
            self._subscribed = True
        st = await self.client.request("status")
        if not st.get("link_up"):
            try:
                await asyncio.wait_for(self._link_up(), self.link_wait_s)
            except TimeoutError:
                raise LiveRigError("the daemon has no front end connected; check the cable and the port") from None
            st = await self.client.request("status")
        probe = st.get("probe") or {}
        if self.profile.serial and probe.get("serial") != self.profile.serial:
            raise LiveRigError(f"the daemon runs probe {probe.get('serial')!r}, not {self.profile.serial!r}: restart "
                               "linerigd with --probe pointing at this probe's profile")
        run = st.get("run")
        if run and run.get("state") not in ("done", "aborted", "faulted"):
            raise LiveRigError(f"run {run.get('id')} is {run.get('state')}; stop it before qualifying")
        return st

    async def _link_up(self) -> None:
        async for ev in self.client.events():
            if ev.get("event") in ("sample", "link") and (ev.get("up", True)):
                return

    async def place_in_bath(self, request: PlaceInBath) -> float:
        await _maybe(self.operator.instruct(
            f"Put the probe in the stirred isothermal bath at about {request.setpoint_C:g} °C, next to the bath's "
            "reference thermometer, and wait until the readings have settled."))
        value = await _maybe(self.operator.ask_number(
            AskNumber("bath_C", "Bath reference thermometer reading", "°C")))
        if value is None or not math.isfinite(float(value)):
            raise LiveRigError("the bath's reference temperature is needed for the thermocouple offsets")
        return float(value)

    async def place_in_medium(self, request: PlaceInMedium) -> None:
        m = request.medium
        await _maybe(self.operator.instruct(
            f"Insert the probe into the reference medium {m.name} ({m.description}), run {request.repeat} of "
            f"{request.repeats}: a fresh insertion, fully immersed, the medium at rest and at room temperature."))

    async def record(self, request: Record) -> Recording:
        await self.check()
        if request.heat_s <= 0:
            return await self._log_only(request.log_s)
        return await self._run(request)

    def _session(self, device_s: float) -> float:
        if self._t0_device_s is None:
            self._t0_device_s = device_s
        return device_s - self._t0_device_s

    def _fresh(self, ev: dict[str, Any], after_s: float) -> bool:
        """A heater-off sample taken after ``after_s`` (events queued while the operator was busy are stale)."""
        return ev.get("event") == "sample" and ev.get("run_id") is None and float(ev["device_s"]) > after_s

    async def _settle(self, after_s: float) -> float:
        """Wait until every channel drifts by less than ``max_drift_K_per_min`` over ``settle_window_s``, as the
        daemon's own settling state does before a run; return the device time it was reached."""
        window: list[tuple[float, list[float]]] = []
        async for ev in self.client.events():
            if not self._fresh(ev, after_s):
                continue
            d = float(ev["device_s"])
            window.append((d, [math.nan if v is None else float(v) for v in ev["temps_C"]]))
            while window and d - window[0][0] > self.settle_window_s:
                window.pop(0)
            if d - after_s > self.settle_timeout_s:
                raise LiveRigError(f"the bath readings did not settle within {self.settle_timeout_s:.0f} s: check "
                                   "the bath's stirring and temperature control")
            if len(window) < 10 or d - window[0][0] < 0.9 * self.settle_window_s:
                continue
            t = np.array([w[0] for w in window])
            temps = np.array([w[1] for w in window], dtype=float)
            ok = np.all(np.isfinite(temps), axis=0)
            slopes = [abs(float(np.polyfit(t, temps[:, j], 1)[0])) * 60.0 for j in np.nonzero(ok)[0]]
            if slopes and max(slopes) <= self.max_drift_K_per_min:
                return d
        raise LiveRigError("the daemon closed the event stream")

    async def _log_only(self, seconds: float) -> Recording:
        st = await self.client.request("status")
        start = await self._settle(float(st.get("device_s") or 0.0))
        rows: list[dict[str, Any]] = []
        async for ev in self.client.events():
            if not self._fresh(ev, start):
                continue
            rows.append(ev)
            if float(ev["device_s"]) - float(rows[0]["device_s"]) >= seconds:
                break
        end = float(rows[-1]["device_s"])
        return self._recording(rows, t_origin=end)

    async def _run(self, request: Record) -> Recording:
        reply = await self.client.request(
            "start", baseline_s=max(request.log_s, 1.0), heat_s=request.heat_s, recover_s=1.0,
            power_W_per_m=request.power_W_per_m, sensor=self.sensor,
            max_drift_K_per_min=self.max_drift_K_per_min, settle_timeout_s=self.settle_timeout_s,
            metadata={"notes": f"probe qualification: {request.purpose}", "sample": request.purpose})
        run_id = reply["run_id"]
        rows: list[dict[str, Any]] = []
        final: dict[str, Any] | None = None
        async for ev in self.client.events():
            if ev.get("run_id") != run_id:
                continue
            if ev.get("event") == "sample" and ev.get("phase") in ("settling", "heating"):
                rows.append(ev)
            elif ev.get("event") == "run_finished":
                final = ev
                break
        if final is None or final.get("state") not in ("done",):
            raise LiveRigError(f"run {run_id} ended {final.get('state') if final else 'without a state'}; see "
                               f"`linerig status` and the run's events")
        detail = (await self.client.request("run", run_id=run_id))["run"]
        t0 = detail.get("heat_start_device_s")
        if t0 is None:
            raise LiveRigError(f"run {run_id} never started heating")
        # the daemon heats only once the baseline has settled: keep the last log_s of it, not the settling itself
        rows = [r for r in rows if float(r["device_s"]) >= float(t0) - max(request.log_s, 1.0)]
        return self._recording(rows, t_origin=float(t0))

    def _recording(self, rows: list[dict[str, Any]], t_origin: float) -> Recording:
        if not rows:
            raise LiveRigError("no samples arrived from the daemon")
        names = rows[0].get("sensors") or [s.name for s in self.profile.sensors]
        device = np.array([float(r["device_s"]) for r in rows])
        temps = np.array([[np.nan if v is None else float(v) for v in r["temps_C"]] for r in rows], dtype=float)
        faults: dict[str, int] = dict.fromkeys(names, 0)
        for r in rows:
            for i, bits in enumerate(r.get("faults") or []):
                if i < len(names):
                    faults[names[i]] |= int(bits or 0)
        on = np.array([bool(r.get("heater_on")) for r in rows])
        t = device - t_origin
        q = np.where(on, [float(r.get("q_W_per_m") or 0.0) for r in rows], 0.0)
        # The daemon's heat_start_device_s is when the heater came on; a sample taken at that instant may predate
        # the switch. The reduction reads q[i] as held from t[i] on, so that row carries the heating power.
        heating = np.nonzero((t > 0) & (q > 0))[0]
        at_zero = np.nonzero(np.abs(t) < 1e-6)[0]
        if heating.size and at_zero.size and q[at_zero[0]] == 0.0:
            q[at_zero[0]] = q[heating[0]]
        return Recording(
            t_s=t, session_s=np.array([self._session(d) for d in device]),
            heater_V=np.array([float(r.get("heater_V") or 0.0) for r in rows]),
            heater_A=np.array([float(r.get("heater_A") or 0.0) for r in rows]),
            q_W_per_m=q, temps_C={n: temps[:, i] for i, n in enumerate(names)}, faults=faults)
