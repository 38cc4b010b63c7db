"""`make demo` in a terminal that then closes: the demo, its daemon and its simulator all go.

The demo runs on a real pseudo-terminal (the child is the session leader with the pty as its controlling
terminal, as in a terminal window); closing the master side is what a closed window does: the kernel sends
SIGHUP. The test polls /proc with a deadline for the processes to end (it waits on a condition, never a time).
"""

from __future__ import annotations

import contextlib
import os
import pty
import select
import signal
import sys
import time
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
pytestmark = pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="needs Linux /proc")


def _children() -> dict[int, int]:
    """pid → parent pid of every process."""
    out = {}
    for d in Path("/proc").iterdir():
        if d.name.isdigit():
            try:
                stat = (d / "stat").read_text()
            except OSError:
                continue
            out[int(d.name)] = int(stat.rsplit(")", 1)[1].split()[1])
    return out


def _descendants(root: int) -> set[int]:
    parents = _children()
    found, frontier = set(), {root}
    while frontier:
        frontier = {p for p, pp in parents.items() if pp in frontier} - found
        found |= frontier
    return found


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"


def _cmdline(pid: int) -> str:
    try:
        return Path(f"/proc/{pid}/cmdline").read_bytes().replace(b"\0", b" ").decode(errors="replace")
    except OSError:
        return ""


def _drain(fd: int, seen: bytearray, until: float) -> None:
    """Read what the UI drew (a terminal that is not read stalls the program writing to it)."""
    while time.monotonic() < until:
        ready, _, _ = select.select([fd], [], [], 0.05)
        if not ready:
            return
        try:
            chunk = os.read(fd, 65536)
        except OSError:
            return
        if not chunk:
            return
        seen.extend(chunk)


@pytest.mark.parametrize("hangup", ["signal", "ignored"])
def test_closing_the_demo_terminal_ends_every_process_it_started(tmp_path: Path, hangup: str) -> None:
    """``signal``: `make demo` typed into an interactive shell, whose window closes (SIGHUP to the shell and the
    job). ``ignored``: the demo started with SIGHUP ignored (nohup, some multiplexers), so only the dead terminal
    tells it."""
    env = {**os.environ, "TERM": "xterm-256color", "TMPDIR": str(tmp_path), "COLUMNS": "100", "LINES": "30"}
    venv = Path(sys.executable).parent.parent
    pid, fd = pty.fork()
    if pid == 0:  # the child: on the pty, as in a terminal window
        os.chdir(ROOT)
        if hangup == "signal":
            os.execve("/bin/bash", ["/bin/bash", "--norc", "--noprofile", "-i"], env)
        signal.signal(signal.SIGHUP, signal.SIG_IGN)
        os.execve(sys.executable, [sys.executable, "-m", "linerig.tui.demo", "--speed", "50"], env)
    if hangup == "signal":
        os.write(fd, f"make -s demo VENV={venv}\n".encode())   # typed at the prompt: a job of the shell
    started: set[int] = set()
    seen = bytearray()
    try:
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:   # until the daemon, its simulator and the UI are all up
            _drain(fd, seen, time.monotonic() + 0.2)
            started |= _descendants(pid)
            names = " ".join(_cmdline(p) for p in started)
            if "linerig.daemon.main" in names and "linerig.daemon.sim.main" in names and len(seen) > 2000:
                break
        else:
            pytest.fail(f"the demo did not come up: {sorted(started)}; screen bytes {len(seen)}")
        started.add(pid)
    finally:
        os.close(fd)   # the terminal window closes
    deadline = time.monotonic() + 30
    left: set[int] = set(started)
    while time.monotonic() < deadline:
        with contextlib.suppress(ChildProcessError):
            os.waitpid(pid, os.WNOHANG)
        left = {p for p in started if _alive(p)}
        if not left:
            break
        time.sleep(0.05)  # polling /proc for a condition, with a deadline; nothing to wait on otherwise
    for p in left:   # leave nothing behind for the next test, then fail
        with contextlib.suppress(OSError):
            os.kill(p, signal.SIGKILL)
    assert not left, "still running after the terminal closed: " + "; ".join(f"{p} {_cmdline(p)}" for p in left)
