"""``linerigd``: the rig daemon.

Exit codes: 0 after a clean stop (or a confirmed safe-off), 1 on a fatal error at start-up or a safe-off
that was not confirmed, 2 on bad arguments or configuration, 70 when an internal error stopped it (the
heater was turned off first; systemd restarts it in the safe state).
"""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import grp
import json
import logging
import os
import random
import shutil
import signal
import sqlite3
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import TYPE_CHECKING, Any

from linerig.daemon import sdnotify
from linerig.daemon.api import ApiServer, Handler, Hub, Peer, RequestError, SocketFolderError, Streamed
from linerig.daemon.config import DEFAULT_CONFIG_PATH, RigConfig, devices_anyway, load_config
from linerig.daemon.controller import PlanError, RunPlan
from linerig.daemon.errors import ConfigError, RigError
from linerig.daemon.paths import default_db_path, default_socket_path
from linerig.daemon.probe import ProbeProfile
from linerig.daemon.rig.scpi import ScpiError, SupplyLimits
from linerig.daemon.safety import Limits, check_plan
from linerig.daemon.samples_reply import samples_pieces
from linerig.daemon.service import DaemonSettings, RigService
from linerig.daemon.sim.speed import speed_factor
from linerig.daemon.store import queries
from linerig.daemon.store.writer import Store

if TYPE_CHECKING:
    from linerig.daemon.central.scheduler import SyncScheduler

log = logging.getLogger("linerigd")
EXIT_INTERNAL = 70
PLAN_KEYS = tuple(RunPlan().to_dict())


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="linerigd", description="linerig daemon: runs line-source measurements.")
    p.add_argument("--config", type=Path, default=None,
                   help=f"rig configuration TOML (default {DEFAULT_CONFIG_PATH}; not read with --simulate)")
    p.add_argument("--simulate", nargs="?", const="", default=None, metavar="MATERIAL",
                   help="start a simulated rig (linerig-sim) and use it; MATERIAL from `linerig-sim --list`")
    p.add_argument("--speed", type=speed_factor, default=1.0,
                   help="simulator time-scale factor (with --simulate), above 0 and up to 1000")
    p.add_argument("--supply", action="store_true",
                   help="with --simulate: heat through the simulator's SCPI bench supply, not the front end")
    p.add_argument("--firmware", action="store_true",
                   help="with --simulate: the simulated front end runs the real firmware (hardware/firmware) "
                        "rather than the compact emulator")
    p.add_argument("--socket", type=Path, default=None, help="control socket path")
    p.add_argument("--db", type=Path, default=None, help="SQLite database file")
    p.add_argument("--frontend", default=None, help="front-end port: a device path or pyserial URL")
    p.add_argument("--probe", type=Path, default=None, help="probe profile TOML")
    p.add_argument("--rate-hz", type=float, default=None, help="sample rate asked of the front end")
    p.add_argument("--group", default=None, help="group allowed to use the control socket")
    p.add_argument("--safe-off", action="store_true",
                   help="send heater-off to the front end (and output-off to a configured supply), then exit")
    p.add_argument("--check-config", action="store_true", help="read the configuration, report, and exit")
    p.add_argument("--sim-spacing", action="append", default=[], metavar="SENSOR=MM",
                   help="with --simulate: the simulated probe's radial sensor sits this far from the heater, not where "
                        "the profile says (a bent needle, to try a spacing calibration; repeatable)")
    p.add_argument("--sim-heater-log", type=Path, default=None, help=argparse.SUPPRESS)
    p.add_argument("--sim-control", type=Path, default=None, help=argparse.SUPPRESS)
    p.add_argument("-v", "--verbose", action="store_true")
    return p


# -- the simulator, when asked for ---------------------------------------------
def start_simulator(args: argparse.Namespace, probe_path: Path | None) -> tuple[subprocess.Popen[str], dict[str, Any]]:
    cmd = [sys.executable, "-m", "linerig.daemon.sim.main", "--speed", str(args.speed),
           "--parent-pid", str(os.getpid())]
    if args.simulate:
        cmd.insert(3, args.simulate)
    if probe_path is not None:
        cmd += ["--probe", str(probe_path)]
    if args.sim_heater_log:
        cmd += ["--heater-log", str(args.sim_heater_log)]
    if args.sim_control:
        cmd += ["--control", str(args.sim_control)]
    if args.supply:
        cmd.append("--supply")
    if args.firmware:
        cmd.append("--firmware")
    for item in args.sim_spacing:
        cmd += ["--spacing", item]
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, text=True)
    assert proc.stdout is not None
    line = proc.stdout.readline()
    if not line:
        raise SystemExit(f"linerigd: the simulator did not start (exit code {proc.wait()})")
    return proc, json.loads(line)


# -- requests ------------------------------------------------------------------
def _int_field(req: dict[str, Any], key: str, lo: int = 1, hi: int = 2**31) -> int:
    v = req.get(key)
    if isinstance(v, bool) or not isinstance(v, int) or not lo <= v <= hi:
        raise RequestError(f"{key} must be a whole number from {lo} to {hi}")
    return v


def handlers(svc: RigService, store: Store, sync: SyncScheduler | None = None) -> dict[str, Handler]:
    db = store.reader

    async def status(req: dict[str, Any], peer: Peer) -> dict[str, Any]:
        return {**svc.status(), "db": str(store.path),   # clients that write (qualifications) write here
                "sync": sync.status() if sync is not None else None}

    async def ping(req: dict[str, Any], peer: Peer) -> dict[str, Any]:
        return {"pong": True, "pid": os.getpid()}

    async def start(req: dict[str, Any], peer: Peer) -> dict[str, Any]:
        unknown = sorted(set(req) - {"op", "id", "metadata", "preset", *PLAN_KEYS})
        if unknown:
            raise RequestError(f"unknown field {str(unknown[0])[:60]!r}; a start request takes metadata, preset "
                               f"and plan settings ({', '.join(PLAN_KEYS)})")
        preset = req.get("preset")
        if preset is not None and not isinstance(preset, str):
            raise RequestError("preset must be a name")
        plan = svc.make_plan(preset, {k: req[k] for k in PLAN_KEYS if k in req})
        return svc.start_run(plan, req.get("metadata") or {}, peer)

    async def resume(req: dict[str, Any], peer: Peer) -> dict[str, Any]:
        return svc.resume_series(_int_field(req, "series_id"), peer)

    async def stop_heating(req: dict[str, Any], peer: Peer) -> dict[str, Any]:
        svc.stop_heating(peer)
        return {}

    async def abort(req: dict[str, Any], peer: Peer) -> dict[str, Any]:
        reason = req.get("reason") or "operator abort"
        if not isinstance(reason, str):
            raise RequestError("reason must be text")
        svc.abort(reason[:500], peer)
        return {}

    async def subscribe(req: dict[str, Any], peer: Peer) -> dict[str, Any]:
        return {"_subscribe": True, "subscribed": True}

    async def runs(req: dict[str, Any], peer: Peer) -> dict[str, Any]:
        limit = _int_field({"limit": req.get("limit", 100)}, "limit", 1, 10000)
        site = req.get("site")
        if site is not None and not isinstance(site, str):
            raise RequestError("site must be text")
        return {"runs": queries.list_runs(db, limit, site)}

    async def run(req: dict[str, Any], peer: Peer) -> dict[str, Any]:
        rid = _int_field(req, "run_id")
        detail = queries.run_detail(db, rid)
        if detail is None:
            raise RequestError(f"no run {rid}")
        return {"run": detail}

    async def series(req: dict[str, Any], peer: Peer) -> dict[str, Any]:
        sid = _int_field(req, "series_id")
        detail = queries.series_detail(db, sid)
        if detail is None:
            raise RequestError(f"no series {sid}")
        return {"series": detail}

    async def samples(req: dict[str, Any], peer: Peer) -> Streamed:
        rid = _int_field(req, "run_id")
        if not any(db.query("SELECT 1 FROM runs WHERE id = ?", [rid])):
            raise RequestError(f"no run {rid}")
        # tens of MB for a long run: built by a process of its own, passed on in pieces (samples_reply)
        return Streamed(lambda envelope: samples_pieces(store.path, rid, envelope))

    async def probes(req: dict[str, Any], peer: Peer) -> dict[str, Any]:
        rows = list(db.query("SELECT serial, name, kind, added_utc, profile_toml FROM probes ORDER BY serial"))
        active = {"serial": svc.s.probe.serial, "name": svc.s.probe.name, "kind": svc.s.probe.kind}
        return {"probes": rows, "active": active}

    async def calibrations(req: dict[str, Any], peer: Peer) -> dict[str, Any]:
        serial = req.get("probe_serial")
        if serial is not None and not isinstance(serial, str):
            raise RequestError("probe_serial must be text")
        sql = "SELECT * FROM calibrations" + (" WHERE probe_serial = ?" if serial else "") + " ORDER BY id DESC"
        return {"calibrations": list(db.query(sql, [serial] if serial else []))}

    async def presets(req: dict[str, Any], peer: Peer) -> dict[str, Any]:
        return {"default": svc.s.default_plan.to_dict(),
                "presets": {k: v.to_dict() for k, v in sorted(svc.s.presets.items())}}

    return {"status": status, "ping": ping, "start": start, "resume": resume, "stop_heating": stop_heating,
            "abort": abort, "subscribe": subscribe, "runs": runs, "run": run, "series": series, "samples": samples,
            "probes": probes, "calibrations": calibrations, "presets": presets}


# -- serving -------------------------------------------------------------------
def supply_limits(cfg: RigConfig, probe: ProbeProfile) -> SupplyLimits:
    """The ceilings asked of a SCPI supply: the power limit over the heater, and V and I that reach it on
    the highest and lowest heater resistance safety accepts (plus 10 %), unless the configuration sets them."""
    length_m = probe.length_m or 0.1
    p_max_W = cfg.limits.max_power_W_per_m * length_m
    r_ohm = probe.heater_resistance_ohm or 40.0
    tol = cfg.limits.heater_ohm_tolerance
    v_max = cfg.devices.supply_v_max or 1.1 * (p_max_W * r_ohm * (1 + tol)) ** 0.5
    i_max = cfg.devices.supply_i_max or 1.1 * (p_max_W / (r_ohm * (1 - tol))) ** 0.5
    return SupplyLimits(v_max=v_max, i_max=i_max, p_max_W=p_max_W)


def with_pulse_preset(presets: dict[str, RunPlan], plan: RunPlan, probe: ProbeProfile,
                      limits: Limits) -> dict[str, RunPlan]:
    """The configured presets, plus "pulse" from the probe profile's [pulse] table when rig.toml has none.

    A profile pulse that exceeds a daemon limit is left out (logged): the limits are the operator's to raise.
    """
    if "pulse" in presets or probe.pulse is None:
        return presets
    try:
        pulse = plan.with_changes(probe.pulse.plan_changes())
    except PlanError as exc:
        log.warning("probe %s: [pulse] not offered as a preset: %s", probe.name, exc)
        return presets
    problems = check_plan(pulse.power_W_per_m, pulse.heat_s, limits)
    if problems:
        log.warning("probe %s: [pulse] not offered as a preset: %s", probe.name, "; ".join(problems))
        return presets
    return {**presets, "pulse": pulse}


async def serve(args: argparse.Namespace, cfg: RigConfig, frontend_url: str, material: str | None,
                supply_url: str | None = None, sim_firmware: str | None = None) -> int:
    from linerig.daemon.probe import load_probe_profile

    probe = load_probe_profile(args.probe) if args.probe else cfg.probe
    plan = cfg.plan
    if plan.sensor not in [s.name for s in probe.sensors]:
        plan = plan.with_changes({"sensor": probe.sensors[0].name})
    settings = DaemonSettings(frontend_url=frontend_url, probe=probe, limits=cfg.limits,
                              rate_hz=args.rate_hz or cfg.devices.rate_hz, default_plan=plan,
                              presets=with_pulse_preset(cfg.presets, plan, probe, cfg.limits),
                              simulated_material=material, probes=cfg.probes, config_source=cfg.source,
                              frontend_baud=cfg.devices.frontend_baud, supply_url=supply_url,
                              supply_baud=cfg.devices.supply_baud, supply_limits=supply_limits(cfg, probe))
    db_path = args.db or cfg.daemon.database or default_db_path()
    try:
        store = Store(db_path, cfg.daemon.max_database_MB)
    except (sqlite3.Error, OSError) as exc:  # nothing is armed yet: say which file and stop
        print(f"linerigd: cannot open the database {db_path}: {exc}", file=sys.stderr)
        return 2
    hub = Hub()
    svc = RigService(settings, store, hub)
    sync = None
    if cfg.sync is not None:  # pushes to the central database in a child process of its own, after each run
        from linerig.daemon.central.scheduler import SyncScheduler

        if cfg.sync.rig:
            store.set_rig_name(cfg.sync.rig)
        sync = SyncScheduler(cfg.sync, db_path, hub.publish)
        hub.watchers.append(sync.on_event)
    api = ApiServer(args.socket or cfg.daemon.socket or default_socket_path(), handlers(svc, store, sync), hub,
                    group=args.group or cfg.daemon.group)
    try:
        api.prepare_folder()  # before anything starts: a folder someone else could write to is refused
    except SocketFolderError as exc:
        print(f"linerigd: {exc}", file=sys.stderr)
        store.close()
        return 2
    loop = asyncio.get_running_loop()
    for sig in (signal.SIGTERM, signal.SIGINT, signal.SIGHUP):
        loop.add_signal_handler(sig, svc.stop_requested.set)
    def unhandled(lp: asyncio.AbstractEventLoop, ctx: dict[str, Any]) -> None:
        exc = ctx.get("exception")
        if isinstance(exc, asyncio.CancelledError):  # a task cancelled at shutdown, not a fault
            log.debug("cancelled: %s", ctx.get("message"))
            return
        if isinstance(exc, OSError) and "socket" in ctx:
            # accept() out of descriptors (EMFILE) and the like: asyncio pauses accepting and retries; a client
            # that cannot connect is never a reason to stop a run
            log.warning("control socket: %s (%s); accepting again shortly", ctx.get("message"), exc)
            return
        svc.internal_error(str(ctx.get("message")), exc)

    loop.set_exception_handler(unhandled)
    try:
        await svc.start()
    except (RigError, ScpiError, OSError) as exc:
        log.error("cannot start: %s", exc)
        store.close()
        return 1
    await api.start()
    if sync is not None:
        sync.start()
    log.info("linerigd ready: socket %s, database %s, front end %s%s", api.path, db_path, frontend_url,
             f" (simulated, firmware under {sim_firmware})" if sim_firmware else "")
    ready = {"ready": True, "socket": str(api.path), "db": str(db_path), "pid": os.getpid()}
    if sim_firmware:  # which interpreter runs the simulated board's firmware (linerig-sim --firmware)
        ready["firmware"] = sim_firmware
    print(json.dumps(ready), flush=True)
    sdnotify.notify("READY=1\nSTATUS=idle, heater off")
    await svc.stop_requested.wait()
    sdnotify.notify("STOPPING=1")
    await svc.stop(svc.fatal or "daemon stopping")
    if sync is not None:
        await sync.stop()
    await api.close()
    store.close()
    return EXIT_INTERNAL if svc.fatal else 0


# -- safe-off ------------------------------------------------------------------
def safe_off(frontend: str | None, supply: str | None, frontend_baud: int = 115200, supply_baud: int = 9600,
             timeout_s: float = 2.0) -> tuple[bool, list[str]]:
    """Heater off without the daemon: OFF to the front end until acknowledged, OUTP OFF to a SCPI supply.

    Plain blocking pyserial, no event loop: this runs from systemd's ExecStopPost after any exit, a
    SIGKILL or a watchdog abort included, and from linerigd itself when it dies of an unexpected error.
    """
    import serial

    from linerig.daemon.rig import messages as m
    from linerig.daemon.rig.framing import FrameDecoder, encode_frame

    ok = True
    notes: list[str] = []
    if frontend:
        try:
            port = serial.serial_for_url(frontend, baudrate=frontend_baud, timeout=0.05, write_timeout=1.0)
        except (serial.SerialException, OSError, ValueError) as exc:
            ok = False
            notes.append(f"front end {frontend}: cannot open ({exc}); its lease turns the heater off")
        else:
            dec = FrameDecoder()
            seq0 = random.randrange(1, 60000)  # not the daemon's last sequence number: never taken as a repeat
            acked = False
            sent: set[int] = set()
            deadline = time.monotonic() + timeout_s
            k = 0
            with contextlib.closing(port):
                while not acked and time.monotonic() < deadline:
                    seq = (seq0 + k) % 65536
                    sent.add(seq)
                    k += 1
                    try:
                        port.write(encode_frame(m.CMD_OFF, seq))
                    except (serial.SerialException, OSError) as exc:
                        notes.append(f"front end {frontend}: write failed ({exc})")
                        break
                    until = time.monotonic() + 0.25
                    while not acked and time.monotonic() < until:
                        with contextlib.suppress(serial.SerialException, OSError):
                            for frame in dec.feed(port.read(512)):
                                with contextlib.suppress(m.MessageError):
                                    msg = m.parse_message(frame)
                                    if isinstance(msg, m.Ack) and msg.cmd_seq in sent and msg.ok:
                                        acked = True  # frames after it in the same read must not undo this
            if acked:
                notes.append(f"front end {frontend}: heater off acknowledged")
            else:
                ok = False
                notes.append(f"front end {frontend}: no acknowledgement within {timeout_s:g} s; "
                             "its lease turns the heater off")
    if supply:
        try:
            with serial.serial_for_url(supply, baudrate=supply_baud, timeout=0.5, write_timeout=1.0) as port:
                port.reset_input_buffer()
                port.write(b"OUTP OFF\n")
                port.write(b"OUTP?\n")
                answer = port.readline().decode("ascii", "replace").strip()
            if answer in ("0", "OFF"):
                notes.append(f"supply {supply}: output off confirmed")
            else:
                ok = False
                notes.append(f"supply {supply}: output state not confirmed (answer {answer!r})")
        except (serial.SerialException, OSError, ValueError) as exc:
            ok = False
            notes.append(f"supply {supply}: cannot reach it ({exc})")
    if not frontend and not supply:
        ok = False
        notes.append("nothing to switch off: give --frontend or a configuration with [devices]")
    return ok, notes


# -- entry point ---------------------------------------------------------------
def _load_config(args: argparse.Namespace) -> RigConfig:
    if args.config is not None:
        return load_config(args.config)
    if args.simulate is None and DEFAULT_CONFIG_PATH.exists():
        return load_config(DEFAULT_CONFIG_PATH)
    return RigConfig()


def _describe(cfg: RigConfig) -> str:
    lines = [f"configuration {cfg.source}: OK",
             f"  front end: {cfg.devices.frontend or '(none: give --frontend or use --simulate)'} "
             f"at {cfg.devices.rate_hz:g} Hz",
             f"  supply: {cfg.devices.supply or '(none)'}",
             f"  probe: {cfg.probe.name} ({cfg.probe.serial or 'no serial'}); profiles loaded: {len(cfg.probes)}",
             f"  limits: {json.dumps(cfg.limits.to_dict())}",
             f"  default plan: {json.dumps(cfg.plan.to_dict())}",
             f"  presets: {', '.join(sorted(cfg.presets)) or '(none)'}",
             f"  sync: {_describe_sync(cfg)}"]
    return "\n".join(lines)


def _safe_off_command(args: argparse.Namespace) -> int:
    """``--safe-off``: heater off even when the rest of the configuration is wrong (ExecStopPost relies on it)."""
    try:
        devices = _load_config(args).devices
    except ConfigError as exc:
        devices = devices_anyway(args.config or DEFAULT_CONFIG_PATH)
        print(f"linerigd --safe-off: ConfigError: {exc}; switching off the devices it names all the same",
              file=sys.stderr)
    ok, notes = safe_off(args.frontend or devices.frontend, devices.supply, devices.frontend_baud,
                         devices.supply_baud)
    for note in notes:
        print(f"linerigd --safe-off: {note}", file=sys.stderr)
    return 0 if ok else 1


def _describe_sync(cfg: RigConfig) -> str:
    if cfg.sync is None:
        return "(none: no [sync] section)"
    from linerig.daemon.central.connect import describe

    return (f"to {describe(cfg.sync.to)} as rig {cfg.sync.rig or '(the name kept in the database)'}, every "
            f"{cfg.sync.interval_s:g} s and after each run")


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    logging.basicConfig(level=logging.DEBUG if args.verbose else logging.INFO, stream=sys.stderr,
                        format="%(asctime)s %(name)s %(levelname)s %(message)s")
    if args.safe_off:
        return _safe_off_command(args)
    try:
        cfg = _load_config(args)
    except ConfigError as exc:
        print(f"linerigd: ConfigError: {exc}", file=sys.stderr)
        return 2
    if args.check_config:
        print(_describe(cfg))
        return 0
    if args.group is not None:
        try:
            grp.getgrnam(args.group)
        except KeyError:
            print(f"linerigd: --group {args.group}: no such group on this machine; create it (see "
                  "systemd/README.md) or leave --group out", file=sys.stderr)
            return 2
    sim: subprocess.Popen[str] | None = None
    material = None
    sim_firmware: str | None = None
    if args.supply and args.simulate is None:
        print("linerigd: --supply goes with --simulate; for a real supply set [devices] supply in the configuration",
              file=sys.stderr)
        return 2
    if args.firmware and args.simulate is None:
        print("linerigd: --firmware goes with --simulate; a real rig runs the firmware on its own board",
              file=sys.stderr)
        return 2
    if args.sim_spacing and args.simulate is None:
        print("linerigd: --sim-spacing goes with --simulate; a real probe's spacing is calibrated (linerig calibrate "
              "--spacing)", file=sys.stderr)
        return 2
    if args.simulate is not None:
        from linerig.daemon.sim.materials import DEFAULT_MATERIAL_KEY, get_material

        try:
            material = get_material(args.simulate or DEFAULT_MATERIAL_KEY).key
        except KeyError as exc:
            print(f"linerigd: {exc.args[0]}", file=sys.stderr)
            return 2
        if args.probe is not None:  # checked here, so a bad file is one clear line and not the simulator's trace
            from linerig.daemon.probe import ProbeProfileError, load_probe_profile

            try:
                load_probe_profile(args.probe)
            except ProbeProfileError as exc:
                print(f"linerigd: {exc}", file=sys.stderr)
                return 2
        if args.sim_spacing:
            from linerig.daemon.sim.main import _probe, bent

            try:
                bent(_probe(args.probe), args.sim_spacing)
            except ValueError as exc:
                print(f"linerigd: {str(exc).replace('--spacing', '--sim-spacing')}", file=sys.stderr)
                return 2
        sim, info = start_simulator(args, args.probe)
        frontend_url = info["frontend"]
        supply_url = info.get("supply")
        sim_firmware = info.get("firmware")
    elif args.frontend or cfg.devices.frontend:
        frontend_url = args.frontend or cfg.devices.frontend
        supply_url = cfg.devices.supply
    else:
        print(f"linerigd: no front end: give --frontend PORT (a device path or pyserial URL), set "
              f"[devices] frontend in {args.config or DEFAULT_CONFIG_PATH}, or use --simulate", file=sys.stderr)
        return 2
    try:
        return asyncio.run(serve(args, cfg, frontend_url, material, supply_url, sim_firmware))
    except BaseException:
        # the loop itself died: whatever happened, the heater goes off before the process ends (the ports are
        # closed first: held exclusively, they would refuse this second open)
        from linerig.daemon.rig.transport import close_all

        close_all()
        safe_off(frontend_url, supply_url, cfg.devices.frontend_baud, cfg.devices.supply_baud, timeout_s=0.5)
        raise
    finally:
        if sim is not None:
            sim.terminate()
            with contextlib.suppress(subprocess.TimeoutExpired):
                sim.wait(5)
            if sim.poll() is None:
                sim.kill()
                sim.wait(5)
            _remove_sim_folder(Path(info["frontend"]).parent)


def _remove_sim_folder(folder: Path) -> None:
    """The simulator removes its own temporary folder; this covers a simulator that was killed first."""
    from linerig.daemon.sim.main import SIM_DIR_PREFIX

    if folder.name.startswith(SIM_DIR_PREFIX) and folder.parent == Path(tempfile.gettempdir()):
        shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    raise SystemExit(main())
