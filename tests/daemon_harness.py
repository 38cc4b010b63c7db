"""Real processes for daemon tests: a `linerig-sim` and a `linerigd` against it, as on a rig.

The simulator is started on its own (not through `linerigd --simulate`) so a test can kill the daemon, start a
new one against the same simulated front end, and read the simulator's own heater log and control socket to
prove what the heater did. Start-up is synchronised on the ready line each process prints; everything after
that is polled against a deadline, never slept on.
"""

from __future__ import annotations

import atexit
import contextlib
import json
import os
import selectors
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any, TypeVar

import pytest

T = TypeVar("T")
ROOT = Path(__file__).resolve().parent.parent
FAST_PLAN = {"baseline_s": 10, "heat_s": 60, "recover_s": 20, "max_drift_K_per_min": 0.5, "settle_timeout_s": 30}


class HarnessError(AssertionError):
    pass


_LIVE: set[subprocess.Popen[str]] = set()


@atexit.register
def kill_leftovers() -> None:
    """A failing test must never leave a daemon or simulator behind (they would hold ptys and sockets)."""
    for proc in list(_LIVE):
        if proc.poll() is None:
            proc.kill()
            with contextlib.suppress(subprocess.TimeoutExpired):
                proc.wait(5)
        _LIVE.discard(proc)


@pytest.fixture(autouse=True)
def reap() -> Iterator[None]:
    """Import into a test module: whatever a test started is gone when it ends, pass or fail."""
    yield
    kill_leftovers()


def wait_for(pred: Callable[[], T | None], timeout: float, what: str, interval: float = 0.02) -> T:
    """Poll ``pred`` until it returns something truthy or the deadline passes."""
    deadline = time.monotonic() + timeout
    while True:
        value = pred()
        if value:
            return value
        if time.monotonic() > deadline:
            raise HarnessError(f"timed out after {timeout:g} s waiting for {what}")
        time.sleep(interval)


def _read_ready_line(proc: subprocess.Popen[str], timeout: float, name: str, err_path: Path) -> dict[str, Any]:
    assert proc.stdout is not None
    sel = selectors.DefaultSelector()
    sel.register(proc.stdout, selectors.EVENT_READ)
    try:
        if not sel.select(timeout):
            raise HarnessError(f"{name} printed nothing within {timeout:g} s; stderr: {_tail(err_path)}")
    finally:
        sel.close()
    line = proc.stdout.readline()
    if not line:
        raise HarnessError(f"{name} exited with {proc.wait()} before it was ready; stderr: {_tail(err_path)}")
    return json.loads(line)


def _tail(path: Path, n: int = 3000) -> str:
    with contextlib.suppress(OSError):
        return path.read_text(errors="replace")[-n:]
    return ""


def _json_request(path: Path, req: dict[str, Any], timeout: float = 5.0) -> dict[str, Any]:
    with socket.socket(socket.AF_UNIX, socket.SOCK_STREAM) as s:
        s.settimeout(timeout)
        s.connect(str(path))
        s.sendall((json.dumps(req) + "\n").encode())
        buf = b""
        while b"\n" not in buf:
            chunk = s.recv(1 << 20)
            if not chunk:
                raise HarnessError(f"{path} closed the connection without a reply to {req}")
            buf += chunk
    return json.loads(buf.split(b"\n", 1)[0])


class Sim:
    """A `linerig-sim` process with its control socket and heater log."""

    def __init__(self, tmp: Path, speed: float = 50.0, material: str | None = None, probe: Path | None = None,
                 extra: tuple[str, ...] = (), program: tuple[str, ...] = ("-m", "linerig.daemon.sim.main")) -> None:
        self.dir = tmp / "sim"
        self.dir.mkdir(parents=True, exist_ok=True)
        self.control_path = self.dir / "control.sock"
        self.heater_log = self.dir / "heater.jsonl"
        self.err_path = self.dir / "stderr.txt"
        cmd = [sys.executable, *program, *([material] if material else []), "--speed", str(speed),
               "--link-dir", str(self.dir), "--control", str(self.control_path), "--heater-log", str(self.heater_log),
               *(["--probe", str(probe)] if probe else []), *extra]
        self._err = self.err_path.open("w")
        self.proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=self._err, text=True, cwd=ROOT)
        _LIVE.add(self.proc)
        self.info = _read_ready_line(self.proc, 20, "linerig-sim", self.err_path)
        self.frontend: str = self.info["frontend"]

    def control(self, **req: Any) -> dict[str, Any]:
        reply = _json_request(self.control_path, req)
        if not reply.get("ok"):
            raise HarnessError(f"simulator refused {req}: {reply}")
        return reply

    def state(self) -> dict[str, Any]:
        return self.control(op="state")

    def inject(self, fault: str, on: bool = True, **kw: Any) -> float:
        """Switch a fault; returns the wall time (time.time) just before the request went out."""
        t = time.time()
        self.control(op="inject", fault=fault, on=on, **kw)
        return t

    def heater_events(self) -> list[dict[str, Any]]:
        if not self.heater_log.exists():
            return []
        return [json.loads(line) for line in self.heater_log.read_text().splitlines() if line.strip()]

    def stop(self) -> None:
        if self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(10)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait()
        self._err.close()


class Daemon:
    """A `linerigd` process talking to a front end URL (the simulator's stable name)."""

    _count = 0

    def __init__(self, tmp: Path, frontend: str, config: Path | None = None, extra: tuple[str, ...] = (),
                 env: dict[str, str] | None = None, socket_path: Path | None = None,
                 db: Path | None = None) -> None:
        Daemon._count += 1
        self.socket = socket_path or tmp / "linerigd.sock"
        self.db = db or tmp / "runs.db"
        self.err_path = tmp / f"linerigd-{Daemon._count}.err"
        cmd = [sys.executable, "-m", "linerig.daemon.main", "--frontend", frontend, "--socket", str(self.socket),
               "--db", str(self.db), *(["--config", str(config)] if config else []), *extra]
        self._err = self.err_path.open("w")
        self.proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=self._err, text=True, cwd=ROOT,
                                     env={**os.environ, **(env or {})})
        _LIVE.add(self.proc)
        self.ready = _read_ready_line(self.proc, 20, "linerigd", self.err_path)
        self.pid = self.proc.pid

    def raw(self, **req: Any) -> dict[str, Any]:
        return _json_request(self.socket, req)

    def request(self, op: str, **fields: Any) -> dict[str, Any]:
        reply = self.raw(op=op, **fields)
        if not reply.get("ok"):
            raise HarnessError(f"linerigd refused {op}: {reply.get('error')}")
        return reply

    def status(self) -> dict[str, Any]:
        return self.request("status")

    def wait_link(self, timeout: float = 10) -> dict[str, Any]:
        return wait_for(lambda: (st := self.status())["link_up"] and st.get("last_sample") and st, timeout,
                        "the front end link")

    def wait_fresh(self, n: int = 3, timeout: float = 10) -> None:
        """Until the daemon has taken ``n`` more samples (data flowing again after a fault)."""
        start = self.status()["samples_seen"]
        wait_for(lambda: self.status()["samples_seen"] >= start + n, timeout, f"{n} fresh samples")

    def run_state(self, run_id: int) -> str:
        return str(self.request("run", run_id=run_id)["run"]["state"])

    def wait_state(self, run_id: int, states: set[str] | str, timeout: float = 20) -> str:
        want = {states} if isinstance(states, str) else states
        return wait_for(lambda: (s := self.run_state(run_id)) in want and s, timeout, f"run {run_id} to be {want}")

    def subscribe(self) -> EventStream:
        return EventStream(self.socket)

    def signal(self, sig: int) -> None:
        os.kill(self.pid, sig)

    def kill(self) -> float:
        """SIGKILL; returns the wall time just before it was sent."""
        t = time.time()
        self.proc.send_signal(signal.SIGKILL)
        self.proc.wait(10)
        self._err.close()
        return t

    def stop(self, timeout: float = 15) -> int:
        if self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(timeout)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait()
        self._err.close()
        return int(self.proc.returncode)

    def stderr(self) -> str:
        return _tail(self.err_path, 20000)


class EventStream:
    """A subscribed connection; ``next`` returns the first event that matches."""

    def __init__(self, path: Path) -> None:
        self.sock = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
        self.sock.connect(str(path))
        self.buf = b""
        self.seen: list[dict[str, Any]] = []
        self.sock.sendall(b'{"op":"subscribe","id":1}\n')
        self.next(lambda e: e.get("id") == 1 and e.get("ok"), 5)

    def _line(self, deadline: float) -> dict[str, Any] | None:
        while b"\n" not in self.buf:
            left = deadline - time.monotonic()
            if left <= 0:
                return None
            self.sock.settimeout(left)
            try:
                chunk = self.sock.recv(1 << 20)
            except TimeoutError:
                return None
            if not chunk:
                raise HarnessError("the daemon closed the event stream")
            self.buf += chunk
        line, self.buf = self.buf.split(b"\n", 1)
        return json.loads(line)

    def next(self, pred: Callable[[dict[str, Any]], bool], timeout: float) -> dict[str, Any]:
        deadline = time.monotonic() + timeout
        while True:
            ev = self._line(deadline)
            if ev is None:
                kinds = [e.get("event") for e in self.seen[-20:]]
                raise HarnessError(f"no matching event within {timeout:g} s (last seen: {kinds})")
            self.seen.append(ev)
            if pred(ev):
                return ev

    def close(self) -> None:
        self.sock.close()


def write_config(path: Path, text: str) -> Path:
    path.write_text(text)
    return path


def samples_committed(db: Path, run_id: int) -> tuple[int, int]:
    """(count, max n) of a run's samples, read as a separate reader would."""
    import sqlite3

    con = sqlite3.connect(f"file:{db}?mode=ro", uri=True)
    try:
        count, top = con.execute("SELECT count(*), coalesce(max(n), 0) FROM samples WHERE run_id = ?",
                                 [run_id]).fetchone()
        return int(count), int(top)
    finally:
        con.close()
