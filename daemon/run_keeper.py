"""Runs and series from the operator's request to the final result.

The run keeper checks a request, opens the run (and the series of cycles it belongs to), answers the run
controller's calls, starts the next cycle as one ends, and reduces each run when it is over. The rig service
(``daemon/service.py``) keeps the devices, the sample pipeline and the safe state: the keeper asks it for heater
power only through the run controller's actions, and every way to heater-off still goes through its ``trip``.
"""

from __future__ import annotations

import contextlib
import json
import logging
import math
import time
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from linerig.daemon import sdnotify
from linerig.daemon.api import Peer, RequestError
from linerig.daemon.controller import FINAL, CycleSchedule, PlanError, RunController, RunPlan, RunState
from linerig.daemon.probe import ProbeProfile
from linerig.daemon.reduction.alignment import power_held_from_each_sample
from linerig.daemon.safety import check_plan
from linerig.daemon.store.queries import HEATER_OFF_EVENT
from linerig.daemon.store.spacings import apply_spacings, spacing_history
from linerig.daemon.store.writer import StoreError, utc_now
from linerig.daemon.threads import in_daemon_thread

if TYPE_CHECKING:
    from linerig.daemon.service import RigService

log = logging.getLogger("linerigd")

RUN_METADATA_KEYS = ("site", "location", "depth_m", "sample", "material", "moisture_pct",
                     "dry_density_kg_per_m3", "sample_radius_m", "notes", "operator")
NUMERIC_METADATA = ("depth_m", "moisture_pct", "dry_density_kg_per_m3", "sample_radius_m")
# Physical bounds of the numeric metadata (lowest, highest, what to give), wide enough for any ground a probe goes
# into and narrow enough to catch a sign slip or a wrong unit:
# - moisture is gravimetric (% of dry mass), so it can exceed 100 %: peats hold many times their dry mass of water;
#   from memory, the geotechnical literature reports up to about 2000 % for fibrous peat.
# - a dry density cannot exceed the density of the solids, about 2650 kg/m³ for quartz and up to about 2800 for
#   common soil minerals (handbook values, from memory); peat can be below 100 kg/m³. Below 10 it is a unit slip.
# - depth is that of the probe tip below ground; the upper bound only catches millimetres typed as metres (common
#   practice, no source).
# - the sample radius is that of a lab cell or core the probe sits on the axis of (left out in the ground); below
#   2 mm nothing fits around a needle, above 10 m it is the ground (common practice, no source).
METADATA_RANGES: dict[str, tuple[float, float, str]] = {
    "depth_m": (0.0, 1000.0, "a depth of the probe tip below ground from 0 to 1000 m"),
    "moisture_pct": (0.0, 2000.0, "a gravimetric water content from 0 to 2000 % of dry mass (peat can exceed "
                                  "100 %)"),
    "dry_density_kg_per_m3": (10.0, 3000.0, "a dry density from 10 to 3000 kg/m³"),
    "sample_radius_m": (0.002, 10.0, "the radius of the sample around the probe from 0.002 to 10 m (leave it out "
                                     "in the ground)"),
}


PULSE_FIT_EVERY_S = 10.0     # a live pulse fit every 10 s of the decay (device time) ...
PULSE_FIT_MIN_WALL_S = 2.0   # ... and at most one every 2 s of wall time, so a fast simulator never crowds the loop


@dataclass
class Series:
    """The cycles of one series still to run, and what each of their runs is started with."""

    series_id: int
    plan: RunPlan
    schedule: CycleSchedule
    metadata: dict[str, Any]


def check_metadata(metadata: Any) -> dict[str, Any]:
    """The run's metadata as stored: known keys only, numbers within physical bounds, empty values dropped."""
    if not isinstance(metadata, dict):
        raise RequestError("metadata must be an object")
    unknown = sorted(set(metadata) - set(RUN_METADATA_KEYS))
    if unknown:
        raise RequestError(f"unknown metadata key {str(unknown[0])[:60]!r}; known: {', '.join(RUN_METADATA_KEYS)}")
    out: dict[str, Any] = {}
    for k, v in metadata.items():
        if v is None:
            continue
        if k in NUMERIC_METADATA:
            if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
                raise RequestError(f"metadata {k} must be a number, got {str(v)[:60]!r}")
            lo, hi, what = METADATA_RANGES[k]
            if not lo <= v <= hi:
                hint = (f" (that looks like g/cm³: {v:g} g/cm³ is {v * 1000:g} kg/m³)"
                        if k == "dry_density_kg_per_m3" and 0 < v < lo else "")
                raise RequestError(f"metadata {k} must be {what}, got {v:g}{hint}")
        elif not isinstance(v, str) or len(v) > 4000:
            raise RequestError(f"metadata {k} must be text of at most 4000 characters")
        out[k] = v
    return out


class RunKeeper:
    """The current run and series; what the start, resume, stop_heating and abort requests do."""

    def __init__(self, rig: RigService) -> None:
        self.rig = rig
        self.run: RunController | None = None
        self.series: Series | None = None
        self.run_probe: dict[int, ProbeProfile] = {}  # the probe as each run reduces it (calibrated spacings)
        self._pulse_busy = False
        self._pulse_next_t = 0.0
        self._pulse_next_wall = 0.0
        self.calibration: tuple[float, float] = (1.0, 0.0)  # the current run's probe factor and its u

    # -- requests -----------------------------------------------------------
    def make_plan(self, preset: str | None, changes: dict[str, Any]) -> RunPlan:
        settings = self.rig.s
        if preset is not None:
            if preset not in settings.presets:
                known = ", ".join(sorted(settings.presets)) or "none configured"
                raise RequestError(f"no preset {preset!r} (presets: {known})")
            base = settings.presets[preset]
        else:
            base = settings.default_plan
        try:
            return base.with_changes(changes)
        except PlanError as exc:
            raise RequestError(f"bad run plan: {exc}") from exc

    def _check_can_start(self, plan: RunPlan) -> None:
        rig = self.rig
        if self.run is not None and self.run.active:
            raise RequestError(f"run {self.run.run_id} is still {self.run.state}; stop or abort it first")
        if not rig.link_up:
            raise RequestError("the front end is not connected; check the cable and the port")
        silent = time.monotonic() - rig.last_sample_wall
        if silent > rig.s.limits.stale_after_s:
            raise RequestError(f"no data from the front end for {silent:.1f} s; check the cable and its power")
        if rig.store.failed:
            raise RequestError(f"the database cannot take writes: {rig.store.failed}")
        problems = check_plan(plan.power_W_per_m, plan.heat_s, rig.s.limits)
        if problems:
            raise RequestError("; ".join(problems))
        names = [x.name for x in rig.s.probe.sensors]
        if plan.sensor not in names:
            raise RequestError(f"sensor {plan.sensor!r} is not on probe {rig.s.probe.name!r} ({', '.join(names)})")

    def start_run(self, plan: RunPlan, metadata: dict[str, Any], peer: Peer | None = None) -> dict[str, Any]:
        rig = self.rig
        self._check_can_start(plan)
        fields = check_metadata(metadata)
        try:
            rig.s.probe.in_sample(fields.get("sample_radius_m"))
        except ValueError as exc:
            raise RequestError(f"metadata sample_radius_m: {exc}") from exc
        if rig.s.simulated_material and "material" not in fields:
            fields["material"] = rig.s.simulated_material
        series_id = None
        if plan.cycles > 1:
            try:
                series_id = rig.store.create_series({
                    "kind": "cycles", "name": fields.get("sample"), "site": fields.get("site"),
                    "cycles": plan.cycles, "plan_json": json.dumps(plan.to_dict()),
                    "probe_serial": rig.s.probe.serial, "data": json.dumps({"metadata": fields})})
            except StoreError as exc:
                raise RequestError(str(exc)) from exc
            self.series = Series(series_id, plan, CycleSchedule(plan.cycles), fields)
        else:
            self.series = None
        rig.clear_fault()
        run_id = self._open_run(plan, fields, cycle=1, reequilibrate=False, peer=peer, why="run requested")
        return {"run_id": run_id, "series_id": series_id}

    def resume_series(self, series_id: int, peer: Peer | None = None) -> dict[str, Any]:
        from linerig.daemon.store.queries import series_detail

        rig = self.rig
        detail = series_detail(rig.store.reader, series_id)
        if detail is None:
            raise RequestError(f"no series {series_id}")
        if detail["state"] not in ("interrupted", "faulted", "aborted"):
            raise RequestError(f"series {series_id} is {detail['state']}; only an interrupted, faulted or aborted "
                               "series can be resumed")
        plan = self.make_plan(None, {k: v for k, v in detail["plan"].items() if k in RunPlan().to_dict()})
        self._check_can_start(plan)
        done = detail["cycles_done"]
        if done >= plan.cycles:
            raise RequestError(f"series {series_id} has all {plan.cycles} cycles done")
        meta = json.loads(detail.get("data") or "{}").get("metadata", {})
        next_cycle = max([r["cycle"] or 0 for r in detail["runs"]] + [0]) + 1
        try:
            rig.store.update_series(series_id, {"state": "running", "ended_utc": None, "end_reason": None})
        except StoreError as exc:
            raise RequestError(str(exc)) from exc
        self.series = Series(series_id, plan, CycleSchedule(plan.cycles, done=done, cycle=next_cycle), meta)
        rig.clear_fault()
        run_id = self._open_run(plan, meta, cycle=next_cycle, reequilibrate=True, peer=peer,
                                why=f"series {series_id} resumed at a cycle boundary ({done} of {plan.cycles} "
                                    "cycles done)")
        return {"run_id": run_id, "series_id": series_id, "cycle": next_cycle}

    def stop_heating(self, peer: Peer | None = None) -> None:
        if self.run is None or not self.run.stop_heating():
            raise RequestError("no run is heating")
        self.rig.record_event(self.run.run_id, "operator", None, self.run.stop_requested or "stop heating",
                              {"peer": peer.to_dict() if peer else None})

    def abort(self, reason: str = "operator abort", peer: Peer | None = None) -> None:
        if self.run is None or not self.run.active:
            raise RequestError("no run is active")
        self.rig.record_event(self.run.run_id, "operator", None, f"abort requested: {reason}",
                              {"peer": peer.to_dict() if peer else None})
        self.rig.trip(reason, fault=False)

    def series_status(self) -> dict[str, Any] | None:
        s = self.series
        if s is None:
            return None
        return {"id": s.series_id, "cycles": s.schedule.cycles, "cycle": s.schedule.cycle, "done": s.schedule.done}

    # -- a run's life -------------------------------------------------------
    def _open_run(self, plan: RunPlan, fields: dict[str, Any], cycle: int, reequilibrate: bool,
                  peer: Peer | None, why: str) -> int:
        rig = self.rig
        names = [x.name for x in rig.s.probe.sensors]
        series = self.series
        try:
            run_id = rig.store.create_run({
                **fields, "kind": "cycle" if series else "single", "probe_serial": rig.s.probe.serial,
                "sensor_names": json.dumps(names), "heater_length_m": rig.s.probe.length_m,
                "plan_json": json.dumps(plan.to_dict()), "series_id": series.series_id if series else None,
                "cycle": cycle, "q_timing": "reading",
                **_frontend_fields(rig.frontend.identity)})
        except StoreError as exc:
            rig.note_store_failure(str(exc))
            raise RequestError(str(exc)) from exc
        rig.begin_run_samples()
        self._pulse_next_t = self._pulse_next_wall = 0.0
        self.calibration, cal_event = self._probe_calibration()
        in_sample = rig.s.probe.in_sample(fields.get("sample_radius_m"))  # checked when the run or series started
        # a pulse has no live line fit and so no "heating can stop" verdict: it heats for its planned time
        self.run = RunController(run_id, plan, _Actions(self, run_id), sensor_index=names.index(plan.sensor),
                                 reducer_factory=None if plan.pulse else rig.reducer_factory(
                                     plan.sensor, *self.calibration, probe=in_sample),
                                 cycle=cycle, reequilibrate=reequilibrate)
        data = {"plan": plan.to_dict(), "metadata": fields, "peer": peer.to_dict() if peer else None,
                "series_id": series.series_id if series else None, "cycle": cycle}
        rig.record_event(run_id, "state", "checking", why, data)
        rig.record_event(run_id, "calibration", *cal_event)
        self._apply_spacings(run_id, in_sample)
        rig.hub.publish({"event": "state", "run_id": run_id, "state": "checking", "reason": why,
                         "device_s": rig.device_s, **self._cycle_fields(cycle)})
        sdnotify.notify(f"STATUS=run {run_id} checking")
        return run_id

    def _apply_spacings(self, run_id: int, probe: ProbeProfile) -> None:
        """The probe this run is reduced with (in its sample, when the metadata gives one): each radial sensor at
        its latest accepted spacing calibration (a dual needle's spacing sets its ρc as 1/r²), recorded as an
        event."""
        rig = self.rig
        try:
            history = spacing_history(rig.store.reader, probe.serial)
        except Exception as exc:  # sqlite3 errors: the nominal spacing is still a result, say why
            log.warning("spacing calibrations not read: %s", exc)
            history = []
        probe, used = apply_spacings(probe, history, None)
        self.run_probe[run_id] = probe
        for old in sorted(self.run_probe)[:-4]:  # a finishing cycle still reduces while the next one opens
            del self.run_probe[old]
        for st in used:
            rig.record_event(run_id, "calibration", None, f"spacing calibration applied: {st.message}",
                             {"calibration_id": st.calibration_id, "spacing_m": st.spacing_m,
                              "spacing_u_m": st.spacing_u_m, "state": st.state})

    def probe_for(self, run_id: int) -> ProbeProfile:
        return self.run_probe.get(run_id, self.rig.s.probe)


    def _probe_calibration(self) -> tuple[tuple[float, float], tuple[str | None, str, dict[str, Any]]]:
        """The probe's accepted calibration when a run opens, (factor, u), applied live and in the final result;
        and the event that records which one, or that there is none (factor 1)."""
        from linerig.daemon.store.queries import calibrations_of
        from linerig.daemon.workflows.calibration import calibration_status

        rig = self.rig
        try:
            st = calibration_status(calibrations_of(rig.store.reader, rig.s.probe.serial))
        except (ValueError, TypeError, KeyError) as exc:  # a calibration row that does not parse: say so, use none
            return (1.0, 0.0), (None, f"probe calibration unreadable ({exc}): factor 1", {})
        factor, factor_u = (st.factor, st.factor_u or 0.0) if st.factor else (1.0, 0.0)
        return (factor, factor_u), (st.state, st.message, {"calibration_id": st.calibration_id, "factor": factor,
                                                            "factor_u": factor_u})

    def _cycle_fields(self, cycle: int) -> dict[str, Any]:
        s = self.series
        return {"series_id": s.series_id if s else None, "cycle": cycle, "cycles": s.schedule.cycles if s else 1}

    async def final_reduction(self, run: RunController, arr: dict[str, list[Any]]) -> dict[str, Any]:
        from linerig.daemon.reduction.api import reduce_run
        from linerig.daemon.reduction.stop_rule import StopSettings

        rig = self.rig
        data = self._run_data(run, arr)
        if data is None:
            return {}
        if run.device_off_s is not None:  # so that a reduction from the store splits the same interval
            rig.record_event(run.run_id, HEATER_OFF_EVENT, None, "the front end's own switch-off time",
                             {"device_s": run.device_off_s})
        factor, factor_u = self.calibration
        # CPU-bound numpy/scipy work off the event loop, so lease and watch tasks keep their timing; in a daemon
        # thread, so that stopping the daemon never waits for it (the run can be reduced again offline)
        stop = StopSettings(run.plan.stop_tolerance, run.plan.heat_s)  # the verdict as the run was judged
        red = await in_daemon_thread(reduce_run, data, self.probe_for(run.run_id),
                                     max_rise_K=rig.s.limits.max_rise_K, calibration_factor=factor,
                                     calibration_factor_u=factor_u, stable_rule=stop)
        out = {}
        ended_early = str(run.state) if str(run.state) in ("aborted", "faulted") else None
        for name, res in red.sensors.items():
            j = res.to_json()
            if run.not_settled and "not_settled" not in j["flags"]:
                j["flags"] = [*j["flags"], "not_settled"]
            if ended_early and ended_early not in j["flags"]:
                j["flags"] = [*j["flags"], ended_early]
            rig.store.add_result(run.run_id, name, j, source="final")
            out[name] = j
            if run.plan.pulse and name == run.plan.sensor and res.pulse is not None:
                self._publish_pulse_fit(run, res.pulse, float(data.time_s[-1]), final=True)
        return out

    def _run_data(self, run: RunController, arr: dict[str, list[Any]]) -> Any:
        """The run's samples as the reduction takes them (None before heating or without usable sensors)."""
        from linerig.daemon.reduction.data import RunData

        if run.heat_start_s is None or len(arr.get("device_s", [])) < 10:
            return None
        t = np.asarray(arr["device_s"]) - run.heat_start_s
        temps = np.asarray(arr["temps"], dtype=float)
        names = [x.name for x in self.rig.s.probe.sensors]
        usable = {n: temps[:, i] for i, n in enumerate(names) if np.all(np.isfinite(temps[:, i]))}
        if not usable:
            return None
        off = run.device_off_s - run.heat_start_s if run.device_off_s is not None else None
        q = power_held_from_each_sample(t, np.asarray(arr["q"]), heater_off_s=off)
        return RunData(time_s=t, q_W_per_m=q, temps_C=usable)

    # -- the live pulse fit -------------------------------------------------
    def after_sample(self, run: RunController) -> None:
        """During a pulse's decay, now and then fit the pulse so far (in a thread) and publish it: the live
        screen draws the sensor's rise and decay with the fit. The final reduction publishes the last one."""
        if not run.plan.pulse or run.state != RunState.RECOVERING or self._pulse_busy or run.heat_start_s is None:
            return
        t = self.rig.device_s - run.heat_start_s
        now = time.monotonic()
        if t < self._pulse_next_t or now < self._pulse_next_wall:
            return
        data = self._run_data(run, {k: list(v) for k, v in self.rig.run_arrays.items()})
        if data is None:
            return
        self._pulse_next_t, self._pulse_next_wall = t + PULSE_FIT_EVERY_S, now + PULSE_FIT_MIN_WALL_S
        self._pulse_busy = True
        self.rig.spawn(self._live_pulse(run, data))

    async def _live_pulse(self, run: RunController, data: Any) -> None:
        from linerig.daemon.reduction.methods.pulse import live_pulse_fit
        from linerig.daemon.reduction.pulse import PulseFitError

        try:
            fit = await in_daemon_thread(live_pulse_fit, data, self.probe_for(run.run_id), run.plan.sensor)
        except (PulseFitError, ValueError, ArithmeticError) as exc:
            log.debug("live pulse fit of run %s: %s", run.run_id, exc)
            return
        finally:
            self._pulse_busy = False
        if self.run is run and run.active:
            self._publish_pulse_fit(run, fit, float(data.time_s[-1]), final=False)

    def _publish_pulse_fit(self, run: RunController, fit: Any, t_s: float, final: bool) -> None:
        from linerig.daemon.reduction.methods.pulse import curve_points

        end = max(t_s, run.plan.heat_s + run.plan.recover_s)
        self.rig.hub.publish({
            "event": "pulse_fit", "run_id": run.run_id, "sensor": run.plan.sensor, "t_s": t_s, "final": final,
            "k_W_per_mK": fit.k_W_per_mK, "k_u_W_per_mK": fit.u("k"), "alpha_mm2_per_s": fit.alpha_m2_per_s * 1e6,
            "alpha_u_mm2_per_s": fit.u("alpha") * 1e6, "rho_c_MJ_per_m3K": fit.rho_c_J_per_m3K / 1e6,
            "rho_c_u_MJ_per_m3K": fit.u("rho_c") / 1e6, "spacing_mm": fit.spacing_m * 1e3,
            "window_s": list(fit.window_s), "flags": list(fit.flags),
            "t_peak_s": fit.peak.peak.t_s if fit.peak else None, "curve": curve_points(fit, end)})

    def _run_ended(self, run: RunController, state: RunState) -> None:
        """Called as a run reaches a final state: start the next cycle at once, reduce this one."""
        rig = self.rig
        arr = rig.run_arrays
        series = self.series
        next_cycle = series.schedule.after_run(state) if series is not None else None
        if series is not None and next_cycle is None:
            with contextlib.suppress(StoreError):
                rig.store.update_series(series.series_id, {
                    "state": series.schedule.series_state(state), "ended_utc": utc_now(),
                    "end_reason": f"cycle {run.cycle} {state}"})
        rig.spawn(self._finish(run, state, arr, series, last=next_cycle is None))
        if series is not None and next_cycle is not None and not rig.stopping:
            try:
                self._open_run(series.plan, series.metadata, cycle=next_cycle, reequilibrate=True, peer=None,
                               why=f"cycle {next_cycle} of {series.plan.cycles}: re-equilibrating")
            except RequestError as exc:
                log.error("next cycle not started: %s", exc)
        elif series is None or next_cycle is None:
            sdnotify.notify(f"STATUS=idle (run {run.run_id} {state})")

    async def _finish(self, run: RunController, state: RunState, arr: dict[str, list[Any]],
                      series: Series | None, last: bool) -> None:
        rig = self.rig
        results: dict[str, Any] = {}
        try:
            results = await self.final_reduction(run, arr)
        except StoreError as exc:
            rig.note_store_failure(str(exc))
        except Exception as exc:  # a failed reduction must not lose the run
            log.warning("final reduction of run %s failed: %s", run.run_id, exc)
            rig.record_event(run.run_id, "reduction", None, f"final reduction failed: {exc}")
        try:
            rig.store.flush(wait=True)  # the run's samples are on disk before it is reported finished
        except StoreError as exc:
            rig.note_store_failure(str(exc))
        rig.store.checkpoint()  # the WAL folds back into the file once per run: it stays small
        extra = self._cycle_fields(run.cycle) if series else {"series_id": None, "cycle": run.cycle, "cycles": 1}
        rig.hub.publish({"event": "run_finished", "run_id": run.run_id, "state": str(state), "results": results,
                         **extra})
        if series is not None and last:
            rig.hub.publish({"event": "series_finished", "series_id": series.series_id,
                             "state": series.schedule.series_state(state), "cycles_done": series.schedule.done})


def _frontend_fields(ident: Any) -> dict[str, Any]:
    """The front end's identity frame as run columns (all None before the first identity frame)."""
    return {"frontend_boot_id": getattr(ident, "boot_id", None), "frontend_model": getattr(ident, "model", None),
            "frontend_serial": getattr(ident, "serial", None), "frontend_firmware": getattr(ident, "firmware", None)}


class _Actions:
    """What a run controller may ask of the daemon."""

    def __init__(self, keeper: RunKeeper, run_id: int) -> None:
        self.keeper = keeper
        self.rig = keeper.rig
        self.run_id = run_id

    def arm(self, power_W_per_m: float) -> None:
        self.rig.arm(power_W_per_m)

    def disarm(self, reason: str) -> None:
        self.rig.disarm()

    def state_changed(self, state: RunState, reason: str, device_s: float) -> None:
        rig = self.rig
        run = self.keeper.run
        fields: dict[str, Any] = {"state": str(state)}
        if state in FINAL:
            fields.update(ended_utc=utc_now(), end_reason=reason)
        if run is not None and run.run_id == self.run_id and run.heat_end_s is not None:
            fields["heat_end_device_s"] = run.heat_end_s
        try:
            rig.store.update_run(self.run_id, fields)
        except StoreError as exc:
            rig.note_store_failure(str(exc))
        rig.record_event(self.run_id, "state", str(state), reason)
        extra = {"recover_s": run.recovery_s()} if run is not None and state == RunState.RECOVERING else {}
        rig.hub.publish({"event": "state", "run_id": self.run_id, "state": str(state), "reason": reason,
                         "device_s": device_s, **extra, **self.keeper._cycle_fields(run.cycle if run else 1)})
        sdnotify.notify(f"STATUS=run {self.run_id} {state}")

    def heating_started(self, device_s: float) -> None:
        rig = self.rig
        try:
            rig.store.update_run(self.run_id, {"heat_start_device_s": device_s})
        except StoreError as exc:
            rig.note_store_failure(str(exc))
        rig.hub.publish({"event": "heater_on", "run_id": self.run_id, "heat_start_device_s": device_s})

    def heating_ended(self, device_s: float) -> None:
        run = self.keeper.run
        if run is not None and run.run_id == self.run_id and run.last_estimate:
            try:  # the live estimate at heater off, kept beside the final reduction
                self.rig.store.add_result(self.run_id, run.plan.sensor, run.last_estimate, source="live")
            except StoreError as exc:
                self.rig.note_store_failure(str(exc))

    def estimate(self, est: dict[str, Any]) -> None:
        if self.rig.hub.subscribers:
            self.rig.hub.publish({"event": "estimate", "run_id": self.run_id, **est})

    def verdict(self, est: dict[str, Any]) -> None:
        rig = self.rig
        v = est.get("verdict") or {}
        if v.get("withdrawn"):
            why = (f"verdict withdrawn at t = {est.get('t_s') or 0:.0f} s: k has moved "
                   f"{100 * (v.get('moved_rel') or 0):+.1f} % since {v.get('at_s') or 0:.0f} s, beyond the "
                   f"{100 * (v.get('tolerance') or 0):g} % tolerance")
        else:
            why = (f"heating can stop at t = {est.get('t_s') or 0:.0f} s: k = "
                   f"{v.get('k_at_W_per_mK') or est.get('k_W_per_mK') or float('nan'):.3f} W/(m·K) is predicted "
                   f"within {100 * (v.get('bound_rel') or 0):.1f} % of the full heating's "
                   f"(tolerance {100 * (v.get('tolerance') or 0):g} %)")
        rig.record_event(self.run_id, "verdict", None, why, {"estimate": est})
        rig.hub.publish({"event": "withdrawn" if v.get("withdrawn") else "stable", "run_id": self.run_id,
                         "reason": why, **est})

    def finished(self, state: RunState) -> None:
        run = self.keeper.run
        if run is not None and run.run_id == self.run_id:
            self.keeper._run_ended(run, state)
