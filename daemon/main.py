"""``linerigd``: the rig daemon.

Exit codes: 0 after a clean stop, 1 on a fatal error at start-up, 2 on bad arguments or configuration.
"""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import json
import logging
import os
import signal
import subprocess
import sys
from pathlib import Path
from typing import Any

from daemon import sdnotify
from daemon.api import ApiServer, Hub, RequestError
from daemon.controller import RunPlan
from daemon.paths import default_db_path, default_socket_path
from daemon.service import DaemonSettings, RigService, load_default_probe
from daemon.store import queries
from daemon.store.writer import Store

log = logging.getLogger("linerigd")


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="linerigd", description="linerig daemon: runs line-source measurements.")
    p.add_argument("--simulate", nargs="?", const="", default=None, metavar="MATERIAL",
                   help="start a simulated rig (linerig-sim) and use it; MATERIAL from `linerig-sim --list`")
    p.add_argument("--speed", type=float, default=1.0, help="simulator time-scale factor (with --simulate)")
    p.add_argument("--socket", type=Path, default=None, help="control socket path")
    p.add_argument("--db", type=Path, default=None, help="SQLite database file")
    p.add_argument("--frontend", default=None, help="front-end port: a device path or pyserial URL")
    p.add_argument("--probe", type=Path, default=None, help="probe profile TOML")
    p.add_argument("--rate-hz", type=float, default=1.0, help="sample rate asked of the front end")
    p.add_argument("--group", default=None, help="group allowed to use the control socket")
    p.add_argument("--sim-heater-log", type=Path, default=None, help=argparse.SUPPRESS)
    p.add_argument("--sim-control", type=Path, default=None, help=argparse.SUPPRESS)
    p.add_argument("-v", "--verbose", action="store_true")
    return p


def start_simulator(args: argparse.Namespace, probe_path: Path | None) -> tuple[subprocess.Popen[str], dict[str, Any]]:
    cmd = [sys.executable, "-m", "daemon.sim.main", "--speed", str(args.speed)]
    if args.simulate:
        cmd.insert(3, args.simulate)
    if probe_path is not None:
        cmd += ["--probe", str(probe_path)]
    if args.sim_heater_log:
        cmd += ["--heater-log", str(args.sim_heater_log)]
    if args.sim_control:
        cmd += ["--control", str(args.sim_control)]
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, text=True)
    assert proc.stdout is not None
    line = proc.stdout.readline()
    if not line:
        raise SystemExit(f"linerigd: the simulator did not start (exit code {proc.wait()})")
    return proc, json.loads(line)


def handlers(svc: RigService, store: Store) -> dict[str, Any]:
    async def status(req: dict[str, Any]) -> dict[str, Any]:
        return svc.status()

    async def start(req: dict[str, Any]) -> dict[str, Any]:
        plan_args = {k: req[k] for k in ("heat_s", "recover_s", "power_W_per_m", "baseline_s", "settle_timeout_s",
                                          "max_drift_K_per_min", "auto_stop", "cycles", "reequilibrate_s",
                                          "sensor") if k in req}
        try:
            plan = RunPlan(**{**svc.s.default_plan.to_dict(), **plan_args})
        except (TypeError, ValueError) as exc:
            raise RequestError(f"bad run plan: {exc}") from exc
        meta = req.get("metadata") or {}
        if not isinstance(meta, dict):
            raise RequestError("metadata must be an object")
        return {"run_id": svc.start_run(plan, meta)}

    async def stop_heating(req: dict[str, Any]) -> dict[str, Any]:
        svc.stop_heating()
        return {}

    async def abort(req: dict[str, Any]) -> dict[str, Any]:
        svc.abort(str(req.get("reason") or "operator abort"))
        return {}

    async def subscribe(req: dict[str, Any]) -> dict[str, Any]:
        return {"_subscribe": True, "subscribed": True}

    async def runs(req: dict[str, Any]) -> dict[str, Any]:
        limit = req.get("limit", 100)
        if not isinstance(limit, int) or not 0 < limit <= 10000:
            raise RequestError("limit must be a whole number from 1 to 10000")
        return {"runs": queries.list_runs(store.db, limit, req.get("site"))}

    async def run(req: dict[str, Any]) -> dict[str, Any]:
        rid = req.get("run_id")
        if not isinstance(rid, int):
            raise RequestError("run_id must be a whole number")
        detail = queries.run_detail(store.db, rid)
        if detail is None:
            raise RequestError(f"no run {rid}")
        return {"run": detail}

    async def probes(req: dict[str, Any]) -> dict[str, Any]:
        rows = list(store.db.query("SELECT serial, name, kind, added_utc FROM probes ORDER BY serial"))
        active = {"serial": svc.s.probe.serial, "name": svc.s.probe.name, "kind": svc.s.probe.kind}
        return {"probes": rows, "active": active}

    async def calibrations(req: dict[str, Any]) -> dict[str, Any]:
        serial = req.get("probe_serial")
        sql = "SELECT * FROM calibrations" + (" WHERE probe_serial = ?" if serial else "") + " ORDER BY id DESC"
        return {"calibrations": list(store.db.query(sql, [serial] if serial else []))}

    return {"status": status, "start": start, "stop_heating": stop_heating, "abort": abort,
            "subscribe": subscribe, "runs": runs, "run": run, "probes": probes, "calibrations": calibrations}


async def serve(args: argparse.Namespace, frontend_url: str, material: str | None) -> int:
    from daemon.probe import load_probe_profile

    probe = load_probe_profile(args.probe) if args.probe else load_default_probe()
    settings = DaemonSettings(frontend_url=frontend_url, probe=probe, rate_hz=args.rate_hz,
                              simulated_material=material)
    db_path = args.db or default_db_path()
    store = Store(db_path)
    hub = Hub()
    svc = RigService(settings, store, hub)
    api = ApiServer(args.socket or default_socket_path(), handlers(svc, store), hub, group=args.group)
    stop = asyncio.Event()
    loop = asyncio.get_running_loop()
    for sig in (signal.SIGTERM, signal.SIGINT, signal.SIGHUP):
        loop.add_signal_handler(sig, stop.set)
    loop.set_exception_handler(lambda lp, ctx: _unhandled(svc, ctx))
    await svc.start()
    await api.start()
    log.info("linerigd ready: socket %s, database %s, front end %s", api.path, db_path, frontend_url)
    print(json.dumps({"ready": True, "socket": str(api.path), "db": str(db_path)}), flush=True)
    sdnotify.notify("READY=1")
    await stop.wait()
    sdnotify.notify("STOPPING=1")
    await svc.stop("daemon stopping")
    await api.close()
    store.close()
    return 0


def _unhandled(svc: RigService, ctx: dict[str, Any]) -> None:
    log.error("unhandled error: %s", ctx.get("message"), exc_info=ctx.get("exception"))
    svc.trip(f"internal error: {ctx.get('message')}")


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    logging.basicConfig(level=logging.DEBUG if args.verbose else logging.INFO, stream=sys.stderr,
                        format="%(asctime)s %(name)s %(levelname)s %(message)s")
    sim: subprocess.Popen[str] | None = None
    material = None
    if args.simulate is not None:
        from daemon.sim.materials import get_material

        try:
            material = get_material(args.simulate or None or _default_material()).key
        except KeyError as exc:
            print(f"linerigd: {exc.args[0]}", file=sys.stderr)
            return 2
        sim, info = start_simulator(args, args.probe)
        frontend_url = info["frontend"]
    elif args.frontend:
        frontend_url = args.frontend
    else:
        print("linerigd: give --frontend PORT (a device path or pyserial URL) or --simulate", file=sys.stderr)
        return 2
    try:
        return asyncio.run(serve(args, frontend_url, material))
    finally:
        if sim is not None:
            sim.terminate()
            with contextlib.suppress(subprocess.TimeoutExpired):
                sim.wait(5)
            if sim.poll() is None:
                os.kill(sim.pid, signal.SIGKILL)


def _default_material() -> str:
    from daemon.sim.materials import DEFAULT_MATERIAL_KEY

    return DEFAULT_MATERIAL_KEY


if __name__ == "__main__":
    raise SystemExit(main())
