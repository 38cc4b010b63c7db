"""``linerig-sim``: a simulated rig as its own process, exactly like hardware.

Prints one JSON line on stdout with the device paths and the control socket, then
runs until SIGTERM/SIGINT. Killing the daemon leaves this process running, so the
front end's heater lease expires here as it would on a real board.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import os
import shutil
import signal
import sys
import tempfile
from pathlib import Path
from typing import Any

from linerig.daemon.sim.frontend_sim import FrontEndEmulator
from linerig.daemon.sim.materials import DEFAULT_MATERIAL_KEY, MATERIALS, get_material
from linerig.daemon.sim.physics import ModelConfigError
from linerig.daemon.sim.rig_model import ProbeSpec, SimulatedRig
from linerig.daemon.sim.server import SimServer
from linerig.daemon.sim.speed import speed_factor


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="linerig-sim", description="Simulated line-source rig on pseudo-terminals.")
    p.add_argument("material", nargs="?", default=DEFAULT_MATERIAL_KEY, help="demo material (see --list)")
    p.add_argument("--list", action="store_true", help="list the demo materials and exit")
    p.add_argument("--speed", type=speed_factor, default=1.0,
                   help="time-scale factor (simulated seconds per second), above 0 and up to 1000")
    p.add_argument("--seed", type=int, default=0)
    p.add_argument("--probe", type=Path, help="probe profile TOML (default: a 100 mm lab needle)")
    p.add_argument("--link-dir", type=Path, help="folder for the stable device names (symlinks)")
    p.add_argument("--control", type=Path, help="control socket path (fault injection, heater state)")
    p.add_argument("--heater-log", type=Path, help="append heater on/off events here as JSON lines")
    p.add_argument("--drift-K-per-h", type=float, default=None, dest="drift", help="ground temperature drift")
    p.add_argument("--spacing", action="append", default=[], metavar="SENSOR=MM",
                   help="put a radial sensor at this distance from the heater instead of the profile's (a bent "
                        "needle, for spacing calibration; repeatable)")
    p.add_argument("--supply", action="store_true",
                   help="also offer a SCPI bench supply (on <link-dir>/supply) whose output heats the probe")
    p.add_argument("--firmware", action="store_true",
                   help="run the real front-end firmware (hardware/firmware) on the simulated board instead of "
                        "the protocol emulator: in its own MicroPython process when the micropython command is "
                        "installed, else hosted in this process (the start-up line says which)")
    p.add_argument("--firmware-host", choices=("auto", "micropython", "cpython"), default="auto",
                   help="with --firmware: which interpreter runs it (default: micropython when installed)")
    p.add_argument("--parent-pid", type=int, default=None,
                   help=f"exit {PARENT_GRACE_S:g} s after this process is gone (the heater lease expires first)")
    return p


PARENT_GRACE_S = 5.0
SIM_DIR_PREFIX = "linerig-sim-"


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return os.getppid() == pid


async def _watch_parent(pid: int, server: SimServer) -> None:
    """Like hardware, the simulator outlives a killed daemon, but not for ever: no orphan left behind."""
    while _alive(pid):
        await asyncio.sleep(0.5)
    print(f"linerig-sim: parent {pid} is gone; stopping in {PARENT_GRACE_S:g} s", file=sys.stderr, flush=True)
    await asyncio.sleep(PARENT_GRACE_S)
    server.stop()


def _probe(path: Path | None) -> ProbeSpec:
    """The same profile the daemon assumes by default, so both sides agree on sensors and heater."""
    from linerig.daemon.probe import load_probe_profile
    from linerig.daemon.resources import default_probe_path

    path = path or default_probe_path()
    return ProbeSpec.from_profile(load_probe_profile(path))


def bent(probe: ProbeSpec, items: list[str]) -> ProbeSpec:
    """The probe with the sensors of ``--spacing SENSOR=MM`` moved; ValueError names a bad item."""
    from linerig.daemon.probe import sensor_mm

    for item in items:
        name, value = sensor_mm(item, "--spacing", "needle8=8.2")  # a ProbeProfileError is a ValueError
        try:
            probe = probe.with_spacing(name, value * 1e-3)
        except ModelConfigError as exc:
            raise ValueError(f"--spacing {item!r}: {exc}") from None
    return probe


def _frontend(args: argparse.Namespace, rig: SimulatedRig) -> tuple[Any, str | None]:
    """The simulated front end, and which interpreter runs the firmware on it (None: the protocol emulator)."""
    if not args.firmware:
        return FrontEndEmulator(rig, speed=args.speed, seed=args.seed), None
    from linerig.daemon.sim.mpy_host import MicroPythonFrontEnd, micropython_command

    if args.firmware_host == "micropython" or (args.firmware_host == "auto" and micropython_command()):
        return MicroPythonFrontEnd(rig, speed=args.speed, seed=args.seed), "micropython"
    from linerig.daemon.sim.firmware_host import FirmwareFrontEnd

    return FirmwareFrontEnd(rig, speed=args.speed, seed=args.seed), "cpython"


async def _run(args: argparse.Namespace) -> int:
    material = get_material(args.material)
    kwargs = {} if args.drift is None else {"drift_K_per_h": args.drift}
    rig = SimulatedRig(material, bent(_probe(args.probe), args.spacing), seed=args.seed, **kwargs)
    frontend, firmware = _frontend(args, rig)
    own_dir = args.link_dir is None  # a folder made here is removed here, however the run ends
    link_dir = args.link_dir or Path(tempfile.mkdtemp(prefix=SIM_DIR_PREFIX))
    link_dir.mkdir(parents=True, exist_ok=True)
    try:
        return await _serve(args, material, frontend, firmware, link_dir)
    finally:
        if own_dir:
            shutil.rmtree(link_dir, ignore_errors=True)


async def _serve(args: argparse.Namespace, material: Any, frontend: Any, firmware: Any, link_dir: Path) -> int:
    server = SimServer(frontend, link_dir, args.heater_log)
    control = args.control or link_dir / "control.sock"
    supply_path = server.offer_supply() if args.supply else None
    ctl = await server.serve_control(control)
    loop = asyncio.get_running_loop()
    for sig in (signal.SIGTERM, signal.SIGINT):
        loop.add_signal_handler(sig, server.stop)
    task = asyncio.create_task(server.run())
    watcher = asyncio.create_task(_watch_parent(args.parent_pid, server)) if args.parent_pid else None
    while server.port.master is None and not task.done():
        await asyncio.sleep(0)
    print(json.dumps({"frontend": str(link_dir / "frontend"), "control": str(control),
                      "supply": str(supply_path) if supply_path else None,
                      "material": material.key, "speed": args.speed, "firmware": firmware}), flush=True)
    await task
    if watcher is not None:
        watcher.cancel()
    ctl.close()
    return 0


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    if args.list:
        for key, mat in MATERIALS.items():
            print(f"{key:22s} k = {mat.k_W_per_mK:5.2f} W/(m·K)  ρc = {mat.rho_c_J_per_m3K / 1e6:4.2f} MJ/(m³·K)  "
                  f"{mat.name}")
        return 0
    try:
        get_material(args.material)
        if args.spacing:
            bent(_probe(args.probe), args.spacing)
    except KeyError as exc:
        print(f"linerig-sim: {exc.args[0]}", file=sys.stderr)
        return 2
    except ValueError as exc:
        print(f"linerig-sim: {exc}", file=sys.stderr)
        return 2
    return asyncio.run(_run(args))


if __name__ == "__main__":
    raise SystemExit(main())
