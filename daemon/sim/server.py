"""Pseudo-terminals and a control socket around the simulated devices.

The daemon opens the pty path as it would open /dev/serial/by-id/...; the
symlinks in ``link_dir`` play the part of those stable names, so an unplug and
replug (a new pty) keeps the same name, as a USB device does.
"""

from __future__ import annotations

import asyncio
import contextlib
import fcntl
import json
import os
import struct
import termios
import time
import tty
from pathlib import Path
from typing import Any

from linerig.daemon.sim.frontend_sim import FrontEndEmulator

TICK_S = 0.01
OUT_CAP = 1 << 20  # bytes held for a host that reads late
RELEASE_CHECK_S = 1.0
TIOCGEXCL = getattr(termios, "TIOCGEXCL", 0x80045440)  # Linux: _IOR('T', 0x40, int)


class PtyPort:
    """One simulated serial device: the master side of a pty, with a stable symlink."""

    def __init__(self, link: Path) -> None:
        self.link = link
        self.master: int | None = None
        self.slave: int | None = None
        self.slave_path = ""
        self._out = bytearray()

    def plug(self) -> None:
        master, slave = os.openpty()
        tty.setraw(slave)
        attrs = termios.tcgetattr(slave)
        attrs[3] &= ~termios.ECHO
        termios.tcsetattr(slave, termios.TCSANOW, attrs)
        os.set_blocking(master, False)
        self.master, self.slave = master, slave
        self.slave_path = os.ttyname(slave)
        tmp = self.link.with_suffix(".tmp")
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
        tmp.symlink_to(self.slave_path)
        tmp.replace(self.link)

    def release_if_abandoned(self) -> None:
        """A USB port leaves exclusive mode (TIOCEXCL) when its last user closes it; a pty keeps the mode while its
        master is open, so a host killed outright would leave it refusing every later open. Clear it once no
        other process has the port open (seen in /proc: processes this user may inspect)."""
        if self.slave is None:
            return
        try:
            exclusive = struct.unpack("i", fcntl.ioctl(self.slave, TIOCGEXCL, b"\0" * 4))[0]
        except OSError:
            return
        if exclusive and not _open_elsewhere(self.slave_path):
            with contextlib.suppress(OSError):
                fcntl.ioctl(self.slave, termios.TIOCNXCL)

    def unplug(self) -> None:
        """The device goes away, and so does its stable name (as /dev/serial/by-id entries do)."""
        with contextlib.suppress(FileNotFoundError):
            self.link.unlink()
        for fd in (self.master, self.slave):
            if fd is not None:
                with contextlib.suppress(OSError):
                    os.close(fd)
        self.master = self.slave = None
        self._out.clear()

    def read(self) -> bytes:
        if self.master is None:
            return b""
        try:
            return os.read(self.master, 4096)
        except (BlockingIOError, OSError):
            return b""

    def write(self, data: bytes) -> None:
        """Queue bytes for the host. A USB CDC device stalls rather than drop when the host reads late, so
        bytes wait here (up to OUT_CAP) and go out as the host takes them; past the cap they are dropped."""
        if self.master is None:
            return
        if len(self._out) + len(data) <= OUT_CAP:
            self._out += data
        self.flush()

    def flush(self) -> None:
        while self._out and self.master is not None:
            try:
                n = os.write(self.master, self._out)
            except (BlockingIOError, OSError):
                return
            del self._out[:n]


def _open_elsewhere(path: str) -> bool:
    """Whether a process other than this one has ``path`` open."""
    me = str(os.getpid())
    for pid in os.listdir("/proc"):
        if not pid.isdigit() or pid == me:
            continue
        with contextlib.suppress(OSError):
            for fd in os.listdir(f"/proc/{pid}/fd"):
                with contextlib.suppress(OSError):
                    if os.readlink(f"/proc/{pid}/fd/{fd}") == path:
                        return True
    return False


class SimServer:
    def __init__(self, frontend: FrontEndEmulator, link_dir: Path, heater_log: Path | None) -> None:
        self.frontend = frontend
        self.link_dir = link_dir
        self.port = PtyPort(link_dir / "frontend")
        self.heater_log = heater_log
        self.heater_events: list[dict[str, Any]] = []
        frontend.log_heater = self._log_heater
        self._stop = asyncio.Event()
        self.supply: Any = None  # (ScpiPort, RigLoad, PtyPort) when a SCPI bench supply is offered too
        self._supply_on = False
        self.inject_wall: float | None = None  # wall time (time.time) of the last injected fault
        self.first_sample_after_inject: float | None = None  # wall time the next sample after it went out

    def _log_heater(self, event: dict[str, Any]) -> None:
        event = {"wall": time.time(), **event}
        self.heater_events.append(event)
        if self.heater_log is not None:
            with self.heater_log.open("a") as fh:
                fh.write(json.dumps(event) + "\n")
                fh.flush()
                os.fsync(fh.fileno())

    def offer_supply(self) -> Path:
        """Put a SCPI bench supply on its own pty, its output wired to the simulated heater."""
        from linerig.daemon.sim.supply_link import ScpiPort, make_supply

        supply, load = make_supply(self.frontend.rig)
        self.supply = (ScpiPort(supply), load, PtyPort(self.link_dir / "supply"))
        return self.link_dir / "supply"

    def _serve_supply(self) -> None:
        port, load, pty = self.supply
        data = pty.read()
        if data:
            pty.write(port.feed(data))
            pty.flush()
        load.sync()
        on = bool(load.on and load.volts > 0)
        if on != self._supply_on:
            self._supply_on = on
            self._log_heater({"heater_on": on, "power_W_per_m": load.requested_W_per_m, "source": "scpi",
                              "reason": "supply output", "device_t_s": round(self.frontend.rig.t_s, 3)})

    async def run(self) -> None:
        self.port.plug()
        if self.supply is not None:
            self.supply[2].plug()
        next_release = 0.0
        while not self._stop.is_set():
            wall = time.monotonic()
            if wall >= next_release:
                next_release = wall + RELEASE_CHECK_S
                self.port.release_if_abandoned()
                if self.supply is not None:
                    self.supply[2].release_if_abandoned()
            if self.supply is not None:
                self._serve_supply()
            data = self.port.read()
            if data:
                self.frontend.receive(data, wall)
            sent = self.frontend.samples_sent
            self.port.flush()
            for chunk in self.frontend.tick(wall):
                self.port.write(chunk)
            if self.inject_wall is not None and self.first_sample_after_inject is None \
                    and self.frontend.samples_sent > sent:
                self.first_sample_after_inject = time.time()
            with contextlib.suppress(TimeoutError):
                await asyncio.wait_for(self._stop.wait(), TICK_S)
        self.frontend.switch_off("simulator stopped")
        self.port.unplug()
        if self.supply is not None:
            self.supply[1].set_heater_electrical(0.0, False)
            self.supply[2].unplug()

    def stop(self) -> None:
        self._stop.set()

    # -- control socket: JSON lines, one request per line ------------------
    async def serve_control(self, path: Path) -> asyncio.AbstractServer:
        with contextlib.suppress(FileNotFoundError):
            path.unlink()
        return await asyncio.start_unix_server(self._client, path=str(path))

    async def _client(self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        with contextlib.suppress(ConnectionError):
            while line := await reader.readline():
                try:
                    reply = self.control(json.loads(line))
                except (ValueError, KeyError, TypeError) as exc:
                    reply = {"ok": False, "error": str(exc)}
                writer.write((json.dumps(reply) + "\n").encode())
                await writer.drain()
        writer.close()

    def control(self, req: dict[str, Any]) -> dict[str, Any]:
        op = req["op"]
        fe = self.frontend
        if op == "state":
            wall = time.monotonic()
            return {"ok": True, "heater_on": fe.heater_on, "power_W_per_m": fe.power_set,
                    "device_t_s": fe.rig.t_s, "boot_id": fe.boot_id, "heater_events": self.heater_events[-50:],
                    "plugged": self.port.master is not None, "configured": fe.configured,
                    "lease_left_s": max(fe.lease_deadline - wall, 0.0) if fe.heater_on else 0.0,
                    "samples_sent": fe.samples_sent, "rig_faults": sorted(fe.rig.active_faults),
                    "overpower": fe.overpower, "clock_stuck": fe.clock_stuck_ms is not None,
                    "acks_to_drop": fe.faults.drop_acks,
                    "inject_wall": self.inject_wall, "first_sample_after_inject": self.first_sample_after_inject}
        if op == "inject":
            fault, on = str(req["fault"]), bool(req.get("on", True))
            wf = fe.faults
            self.inject_wall, self.first_sample_after_inject = time.time(), None
            if fault == "silence":
                wf.silent = on
            elif fault == "garbage":
                wf.garbage_bytes = int(req.get("bytes", 64))
            elif fault == "drop_acks":
                wf.drop_acks = int(req.get("count", 1)) if on else 0
            elif fault == "drop" and "every" in req:
                wf.drop_every = int(req["every"]) if on else 0
            elif fault in ("drop", "corrupt", "duplicate"):
                setattr(wf, f"{fault}_fraction", float(req.get("fraction", 0.2)) if on else 0.0)
                if fault == "drop" and not on:
                    wf.drop_every = 0
            elif fault == "reset":
                fe.reset()
            elif fault == "unplug":
                self.port.unplug()
            elif fault == "replug":
                self.port.plug()
            elif fault == "overpower":
                fe.set_overpower(float(req.get("factor", 1.5)) if on else 1.0)
            elif fault == "clock_stuck":
                fe.set_clock_stuck(on)
            else:
                fe.rig.inject(fault, on)
            return {"ok": True}
        if op == "stop":
            self.stop()
            return {"ok": True}
        raise KeyError(f"unknown op {op!r}")
