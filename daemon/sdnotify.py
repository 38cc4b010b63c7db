"""systemd readiness and watchdog messages, without libsystemd: one datagram to $NOTIFY_SOCKET."""

from __future__ import annotations

import contextlib
import os
import socket


def notify(message: str) -> bool:
    addr = os.environ.get("NOTIFY_SOCKET")
    if not addr:
        return False
    if addr.startswith("@"):
        addr = "\0" + addr[1:]
    with contextlib.suppress(OSError), socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM | socket.SOCK_CLOEXEC) as s:
        s.connect(addr)
        s.sendall(message.encode())
        return True
    return False


def watchdog_interval_s() -> float | None:
    """Half the period systemd expects pings at, or None when no watchdog is set."""
    usec = os.environ.get("WATCHDOG_USEC")
    if not usec or (os.environ.get("WATCHDOG_PID") not in (None, str(os.getpid()))):
        return None
    return int(usec) / 2e6
