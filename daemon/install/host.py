"""The machine linerig-setup changes: the live system, or a throwaway root directory.

Under a throwaway root (``--root DIR``, what the tests use) no command is run: each is printed instead, and what
only the live system could say (is the service running, do the accounts exist) is taken from the files already
there, as if the commands printed last time had been run. So a second run changes nothing there either.
"""

from __future__ import annotations

import contextlib
import json
import pwd
import socket
import subprocess
from pathlib import Path
from typing import Any

from linerig.daemon.config import group_on_this_machine
from linerig.daemon.install.layout import CONFIG, SERVICE, SYSUSERS, UNIT, on
from linerig.daemon.install.render import configured_port


class CommandFailed(RuntimeError):
    """A system command linerig-setup ran failed; the message has its output. Fix the cause and run it again."""


class Host:
    """The live system (``root`` is /)."""

    live = True

    def __init__(self, root: Path = Path("/")) -> None:
        self.root = root

    def path(self, target: Path) -> Path:
        return on(self.root, target)

    def run(self, argv: list[str]) -> str:
        """Runs a command; its output, or `CommandFailed`."""
        try:
            done = subprocess.run(argv, capture_output=True, text=True, timeout=300)
        except FileNotFoundError:
            raise CommandFailed(f"{argv[0]} is not installed; linerig-setup needs a system run by systemd") from None
        if done.returncode != 0:
            raise CommandFailed(f"{' '.join(argv)} failed (exit {done.returncode}): "
                                f"{(done.stderr or done.stdout).strip()}")
        return done.stdout

    def _systemctl_says(self, verb: str) -> bool:
        with contextlib.suppress(FileNotFoundError):
            return subprocess.run(["systemctl", verb, "--quiet", SERVICE], capture_output=True,
                                  timeout=60).returncode == 0
        return False

    def service_running(self) -> bool:
        return self._systemctl_says("is-active")

    def service_enabled(self) -> bool:
        return self._systemctl_says("is-enabled")

    def accounts_exist(self, user: str, groups: set[str]) -> bool:
        return self.user_exists(user) and all(self.group_exists(g) for g in groups)

    def user_exists(self, user: str) -> bool:
        try:
            pwd.getpwnam(user)
        except KeyError:
            return False
        return True

    def group_exists(self, group: str) -> bool:
        return group_on_this_machine(group)

    def daemon_status(self, path: Path, wait_s: float = 10.0) -> dict[str, Any] | None:
        """The daemon's status over its socket (one request, one reply line), or None when none answers there."""
        buf = b""
        try:
            with socket.socket(socket.AF_UNIX, socket.SOCK_STREAM) as s:
                s.settimeout(wait_s)
                s.connect(str(path))
                s.sendall(b'{"op": "status", "id": 1}\n')
                while b"\n" not in buf:
                    chunk = s.recv(1 << 20)
                    if not chunk:
                        return None
                    buf += chunk
        except OSError:
            return None
        with contextlib.suppress(ValueError):
            reply = json.loads(buf.split(b"\n", 1)[0])
            return reply if isinstance(reply, dict) and reply.get("ok") else None
        return None


def under_way(status: dict[str, Any] | None) -> str | None:
    """What the daemon is measuring, in words, or None when a restart would interrupt nothing."""
    if not status:
        return None
    run = status.get("run") or {}
    if run.get("state") in ("checking", "settling", "heating", "recovering"):
        return f"run {run.get('id')} is {run['state']}"
    series = status.get("series") or {}
    if series and series.get("done", 0) < series.get("cycles", 0):
        return f"series {series.get('id')} has done {series['done']} of {series['cycles']} cycles"
    return None


class ThrowawayRoot(Host):
    """A directory standing in for /: files go under it, commands are printed, never run."""

    live = False

    def run(self, argv: list[str]) -> str:
        return ""

    def service_running(self) -> bool:
        """As if the last run's printed commands had been run: the unit is there with a front end to talk to."""
        return self.service_enabled() and configured_port(_text(self.path(CONFIG)), "frontend") is not None

    def service_enabled(self) -> bool:
        return self.path(UNIT).exists()

    def accounts_exist(self, user: str, groups: set[str]) -> bool:
        return self.path(SYSUSERS).exists()

    def user_exists(self, user: str) -> bool:
        return any(line.split(":")[0] == user for line in _lines(self.path(Path("/etc/passwd"))))

    def group_exists(self, group: str) -> bool:
        return any(line.split(":")[0] == group for line in _lines(self.path(Path("/etc/group"))))

    def daemon_status(self, path: Path, wait_s: float = 10.0) -> dict[str, Any] | None:
        return None


def _text(path: Path) -> str | None:
    try:
        return path.read_text(encoding="utf-8")
    except FileNotFoundError:
        return None


def _lines(path: Path) -> list[str]:
    return (_text(path) or "").splitlines()
