"""Which serial port is the front end and which the SCPI supply: each one under /dev/serial/by-id asked who it is.

A port is asked as a front end first (an identify frame, answered by an identity frame, PROTOCOL.md) and then as a
SCPI instrument (``*IDN?``). Both questions change nothing on a device. Ports are opened exclusively (flock), so a
port another program holds is reported busy and left alone; linerig-setup never probes while linerigd runs.
"""

from __future__ import annotations

import contextlib
import errno
import random
import time
from dataclasses import dataclass, field
from pathlib import Path

import serial

from linerig.daemon.install.layout import BY_ID, on
from linerig.daemon.rig import messages as m
from linerig.daemon.rig.framing import FrameDecoder, encode_frame
from linerig.daemon.rig.scpi import Identity as SupplyIdentity
from linerig.daemon.rig.scpi import ScpiError

FRONTEND_BAUD = 115200
SUPPLY_BAUD = 9600
ANSWER_S = 1.0


@dataclass(frozen=True)
class Found:
    """A port that answered: ``port`` as the target names it (``/dev/serial/by-id/...``), ``identity`` in one line."""

    port: str
    kind: str  # "frontend" | "supply"
    identity: str


@dataclass
class Detection:
    """What the ports said. ``skipped`` says why none were asked (then nothing here is known)."""

    frontends: list[Found] = field(default_factory=list)
    supplies: list[Found] = field(default_factory=list)
    silent: list[str] = field(default_factory=list)
    busy: list[str] = field(default_factory=list)
    denied: list[str] = field(default_factory=list)
    skipped: str | None = None

    @property
    def frontend(self) -> Found | None:
        return self.frontends[0] if self.frontends else None

    @property
    def supply(self) -> Found | None:
        return self.supplies[0] if self.supplies else None

    def lines(self) -> list[str]:
        """What was found, for the operator."""
        if self.skipped:
            return [f"not probed: {self.skipped}"]
        out = [f"front end: {f.identity} at {f.port}" for f in self.frontends[:1]]
        out += [f"supply: {f.identity} at {f.port}" for f in self.supplies[:1]]
        out += [f"also a front end (not used): {f.identity} at {f.port}" for f in self.frontends[1:]]
        out += [f"also a supply (not used): {f.identity} at {f.port}" for f in self.supplies[1:]]
        out += [f"no answer (neither a front end nor a SCPI supply): {p}" for p in self.silent]
        out += [f"busy (another program holds it; not probed): {p}" for p in self.busy]
        out += [f"no permission to open it (run linerig-setup as root): {p}" for p in self.denied]
        if not self.frontends:
            out.append("no front end found")
        return out


def frontend_identity(path: Path, timeout_s: float = ANSWER_S) -> m.Identity | None:
    """The front end's identity frame in answer to an identify command, or None if nothing on ``path`` sent one."""
    with _open(path, FRONTEND_BAUD) as port:
        decoder = FrameDecoder()
        seq = random.randrange(1, 60000)
        deadline = time.monotonic() + timeout_s
        resend = time.monotonic()
        while time.monotonic() < deadline:
            if time.monotonic() >= resend:  # once more halfway: a board just reset may miss the first
                port.write(encode_frame(m.CMD_IDENTIFY, seq))
                resend = time.monotonic() + timeout_s / 2
            for frame in decoder.feed(port.read(512)):
                with contextlib.suppress(m.MessageError):
                    msg = m.parse_message(frame)
                    if isinstance(msg, m.Identity):
                        return msg
    return None


def supply_identity(path: Path, timeout_s: float = ANSWER_S) -> SupplyIdentity | None:
    """The instrument's ``*IDN?`` answer, or None if nothing on ``path`` gave one."""
    with _open(path, SUPPLY_BAUD, timeout_s) as port:
        port.reset_input_buffer()
        port.write(b"*IDN?\n")
        answer = port.readline().decode("ascii", "replace").strip()
    try:
        return SupplyIdentity.parse(answer) if answer else None
    except ScpiError:
        return None


def _open(path: Path, baud: int, timeout_s: float = 0.05) -> serial.Serial:
    return serial.Serial(str(path), baudrate=baud, timeout=timeout_s, write_timeout=1.0, exclusive=True)


def by_id_ports(root: Path) -> list[Path]:
    """The stable USB serial names on the target, as the target names them."""
    folder = on(root, BY_ID)
    return sorted(BY_ID / p.name for p in folder.iterdir()) if folder.is_dir() else []


def identify(root: Path, port: Path, timeout_s: float = ANSWER_S) -> Found | str:
    """What answered on ``port``, or why nothing did: ``"busy"``, ``"denied"`` or ``"silent"``."""
    local = on(root, port)
    try:
        fe = frontend_identity(local, timeout_s)
        if fe is not None:
            return Found(str(port), "frontend", f"{fe.model} serial {fe.serial}, firmware {fe.firmware}, "
                                                f"{fe.n_channels} channel{'s' if fe.n_channels != 1 else ''}")
        sup = supply_identity(local, timeout_s)
    except (serial.SerialException, OSError) as exc:
        if getattr(exc, "errno", None) in (errno.EACCES, errno.EPERM):
            return "denied"
        busy = isinstance(exc, BlockingIOError) or "lock" in str(exc).lower()
        return "busy" if busy else "silent"
    if sup is not None:
        return Found(str(port), "supply", f"{sup.maker} {sup.model} serial {sup.serial}, firmware {sup.firmware}")
    return "silent"


def detect(root: Path, only: list[Path] | None = None, timeout_s: float = ANSWER_S) -> Detection:
    """Every by-id port (or only the named ones) asked in turn."""
    found = Detection()
    for port in only if only is not None else by_id_ports(root):
        answer = identify(root, port, timeout_s)
        if isinstance(answer, Found):
            (found.frontends if answer.kind == "frontend" else found.supplies).append(answer)
        else:
            {"busy": found.busy, "denied": found.denied}.get(answer, found.silent).append(str(port))
    return found
