"""Clients that never read, never ask, exhaust descriptors, pull a long run's samples, or sit behind a socket in
someone else's folder: none of them reaches a heating run. Real linerigd and linerig-sim processes, real sockets.
"""

from __future__ import annotations

import json
import os
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest

from linerig.daemon.api import DRAIN_TIMEOUT_S, MAX_CLIENTS, RESERVED_CLIENTS
from linerig.daemon.store.writer import Store
from tests.daemon_harness import ROOT, Daemon, Sim, _read_ready_line, reap, wait_for  # noqa: F401

pytestmark = pytest.mark.timeout(240)
LONG = {"baseline_s": 5, "heat_s": 3000, "recover_s": 5, "max_drift_K_per_min": 1.0, "settle_timeout_s": 30}


def fds(pid: int) -> int:
    return len(os.listdir(f"/proc/{pid}/fd"))


def heating(d: Daemon) -> int:
    events = d.subscribe()
    rid = int(d.request("start", **LONG)["run_id"])
    events.next(lambda e: e.get("event") == "heater_on" and e["run_id"] == rid, 60)
    events.close()
    return rid


def never_reading(path: Path, request: bytes) -> socket.socket:
    """A client with a tiny receive buffer that asks and then never reads a byte."""
    s = socket.socket(socket.AF_UNIX)
    s.setsockopt(socket.SOL_SOCKET, socket.SO_RCVBUF, 4096)
    s.connect(str(path))
    s.sendall(request)
    return s


def test_clients_that_never_read_are_cut_off_and_their_descriptors_freed(tmp_path: Path) -> None:
    """They kept their descriptor and ~240 KB each for ever (a close waits for a reader), past MAX_CLIENTS."""
    sim = Sim(tmp_path, speed=20)
    d = Daemon(tmp_path, sim.frontend)
    held: list[socket.socket] = []
    try:
        d.wait_link()
        base = fds(d.pid)
        live = heating(d)
        flood = b'{"op":"status"}\n' * 1000  # megabytes of replies
        for _ in range(MAX_CLIENTS + RESERVED_CLIENTS + 10):
            held.append(never_reading(d.socket, flood))
        # with every slot taken by clients that do not read, an abort still has a way in (the flooders that got
        # a reserved slot were answered once and closed) ...
        assert wait_for(lambda: _reserved_ping(d.socket), 20, "a reserved slot")["pong"]
        # ... and once they have not read for DRAIN_TIMEOUT_S they are gone, descriptors and buffers
        wait_for(lambda: fds(d.pid) >= base + MAX_CLIENTS, 60, "the clients to be taken in")
        wait_for(lambda: fds(d.pid) <= base + 3, 3 * DRAIN_TIMEOUT_S + 30, "the daemon's descriptors to come back")
        st = d.status()  # a normal client gets in again
        assert st["run"]["id"] == live and st["run"]["state"] == "heating" and st["fault"] is None
        assert all(_cut_off(s) for s in held[:MAX_CLIENTS])  # their end sees the connection go
    finally:
        for s in held:
            s.close()
        d.stop()
        sim.stop()


def _reserved_ping(path: Path) -> dict | None:
    """A ping on a reserved slot: the notice, then the answer; None when every slot is taken."""
    with socket.socket(socket.AF_UNIX) as s:
        s.settimeout(10)
        s.connect(str(path))
        s.sendall(b'{"op":"ping","id":7}\n')
        lines = s.makefile("rb")
        first = json.loads(lines.readline())
        if "serves abort, stop_heating and status only" not in first.get("error", ""):
            return None
        return dict(json.loads(lines.readline()))


def _cut_off(s: socket.socket) -> bool:
    s.setblocking(False)
    try:
        while s.recv(1 << 20):  # drain what was sent before the cut; then the end of the stream
            pass
    except BlockingIOError:
        return False
    except OSError:
        return True  # reset
    return True


def test_idle_clients_cannot_shut_an_operator_out_of_abort(tmp_path: Path) -> None:
    """64 clients that connect and say nothing took every slot, abort included."""
    sim = Sim(tmp_path, speed=20)
    d = Daemon(tmp_path, sim.frontend)
    idle: list[socket.socket] = []
    try:
        d.wait_link()
        rid = heating(d)
        for _ in range(MAX_CLIENTS):
            s = socket.socket(socket.AF_UNIX)
            s.connect(str(d.socket))
            idle.append(s)
        done = subprocess.run([sys.executable, "-m", "linerig.tui.cli", "--socket", str(d.socket), "abort"],
                              capture_output=True, text=True, timeout=60, cwd=ROOT)
        assert done.returncode == 0, done.stderr
        assert f"run {rid} aborted" in done.stdout  # its status, on the same reserved connection
        wait_for(lambda: not sim.state()["heater_on"], 5, "heater off")
        for s in idle:
            s.close()
        assert d.wait_state(rid, "aborted", 20) == "aborted"
    finally:
        for s in idle:
            s.close()
        d.stop()
        sim.stop()


def test_running_out_of_descriptors_pauses_accepting_and_never_faults_a_run(tmp_path: Path) -> None:
    """At EMFILE on accept the daemon took its fatal path, faulted the heating run and stopped."""
    sim = Sim(tmp_path, speed=20)
    sock, db = tmp_path / "d.sock", tmp_path / "r.db"
    err = (tmp_path / "linerigd.err").open("w")
    limited = ("import resource, runpy, sys\n"
               "resource.setrlimit(resource.RLIMIT_NOFILE, (60, 60))\n"
               "sys.argv[0] = 'linerigd'\n"
               "runpy.run_module('linerig.daemon.main', run_name='__main__')\n")
    proc = subprocess.Popen([sys.executable, "-c", limited, "--frontend", sim.frontend, "--socket", str(sock),
                             "--db", str(db)], stdout=subprocess.PIPE, stderr=err, text=True, cwd=ROOT)
    crowd: list[socket.socket] = []
    events: socket.socket | None = None
    try:
        _read_ready_line(proc, 20, "linerigd", tmp_path / "linerigd.err")
        d = _Attached(sock, proc.pid)
        wait_for(lambda: d.request("status")["link_up"], 20, "the link")
        events = d.events()
        rid = int(d.request("start", **LONG)["run_id"])
        _until(events, lambda e: e.get("event") == "heater_on", 60)
        for _ in range(90):  # past the 60 descriptors it may have: accept fails with EMFILE
            s = socket.socket(socket.AF_UNIX)
            s.settimeout(5)
            try:
                s.connect(str(sock))
            except OSError:
                s.close()
                break
            crowd.append(s)
        wait_for(lambda: "out of system resource" in (tmp_path / "linerigd.err").read_text(), 20,
                 "accept to run out of descriptors")
        samples_before = sim.state()["samples_sent"]
        wait_for(lambda: sim.state()["samples_sent"] > samples_before + 20, 20, "heating to go on")
        for s in crowd:
            s.close()
        crowd.clear()
        st = wait_for(lambda: _status_or_none(d), 30, "accepting again")
        assert proc.poll() is None and st["fault"] is None, st["fault"]
        assert st["run"]["id"] == rid and st["run"]["state"] == "heating"
        assert sim.state()["heater_on"]
        d.request("abort")
    finally:
        for s in crowd:
            s.close()
        if events is not None:
            events.close()
        proc.terminate()
        proc.wait(20)
        err.close()
        sim.stop()


class _Attached:
    """Requests to a daemon started outside the harness (with its own descriptor limit)."""

    def __init__(self, path: Path, pid: int) -> None:
        self.path = path
        self.pid = pid

    def request(self, op: str, **fields: object) -> dict:
        with socket.socket(socket.AF_UNIX) as s:
            s.settimeout(10)
            s.connect(str(self.path))
            s.sendall((json.dumps({"op": op, **fields}) + "\n").encode())
            reply = json.loads(s.makefile("rb").readline())
        assert reply.get("ok"), reply
        return reply

    def events(self) -> socket.socket:
        s = socket.socket(socket.AF_UNIX)
        s.connect(str(self.path))
        s.sendall(b'{"op":"subscribe","id":1}\n')
        return s


def _until(s: socket.socket, pred: object, timeout: float) -> dict:
    reader = s.makefile("rb")
    end = time.monotonic() + timeout
    s.settimeout(timeout)
    while time.monotonic() < end:
        ev = json.loads(reader.readline())
        if pred(ev):  # type: ignore[operator]
            return ev
    raise AssertionError("no such event in time")


def _status_or_none(d: _Attached) -> dict | None:
    try:
        return d.request("status")
    except (OSError, AssertionError, ValueError):
        return None


def _long_run(db: Path, n: int) -> int:
    """A run of ``n`` samples written straight into the store, as a day-long run would leave it."""
    store = Store(db)
    try:
        rid = store.create_run({"kind": "single", "sensor_names": json.dumps(["heater"]), "heater_length_m": 0.1,
                                "plan_json": "{}", "heat_start_device_s": 100.0, "q_timing": "reading"})
        for i in range(n):
            t = float(i)
            store.add_sample((rid, i + 1, i % 65536, i * 1000, t, "heating", int(t >= 100), 4.47, 0.1118, 12.5,
                              5.0 if t >= 100 else 0.0, 21.5, json.dumps([15.0 + 1e-5 * i]), "[0]"))
            if i % 50_000 == 49_999:
                store.flush(wait=True)
        store.flush(wait=True)
        store.update_run(rid, {"state": "done"})
    finally:
        store.close()
    return rid


def test_long_runs_samples_read_by_several_clients_never_fault_a_heating_run(tmp_path: Path) -> None:
    """Encoding a 16 MB reply on the loop held it over a second: 2 to 4 readers faulted a heating run 3 times in 4."""
    db = tmp_path / "runs.db"
    old = _long_run(db, 200_000)
    sim = Sim(tmp_path, speed=20)
    d = Daemon(tmp_path, sim.frontend, db=db)
    readers: list[socket.socket] = []
    try:
        d.wait_link()
        rid = heating(d)
        for i in range(4):
            s = socket.socket(socket.AF_UNIX)
            s.connect(str(d.socket))
            s.sendall((json.dumps({"op": "samples", "run_id": old, "id": i}) + "\n").encode())
            readers.append(s)
        for i, s in enumerate(readers):
            s.settimeout(120)
            reply = json.loads(s.makefile("rb").readline())
            assert reply["id"] == i and reply["ok"] and len(reply["samples"]["time_s"]) == 200_000
            assert reply["samples"]["temps_C"]["heater"][-1] == pytest.approx(15.0 + 1e-5 * 199_999)
        st = d.status()
        assert st["run"]["id"] == rid and st["run"]["state"] == "heating" and st["fault"] is None, st["fault"]
    finally:
        for s in readers:
            s.close()
        d.stop()
        sim.stop()


@pytest.mark.skipif(os.geteuid() != 0, reason="a folder owned by another user needs root to make")
def test_a_socket_in_a_folder_someone_else_could_write_is_refused_on_both_ends(tmp_path: Path) -> None:
    """A user who owned the socket's folder swapped the socket for a fake, and root's client talked to it."""
    theirs = tmp_path / "theirs"
    theirs.mkdir(mode=0o755)
    os.chown(theirs, 65534, 65534)
    shared = tmp_path / "shared"
    shared.mkdir()
    shared.chmod(0o777)
    for folder, why in ((theirs, "belongs to nobody"), (shared, "writable by its group or by everyone")):
        done = subprocess.run([sys.executable, "-m", "linerig.daemon.main", "--frontend", "/dev/null", "--socket",
                               str(folder / "d.sock"), "--db", str(tmp_path / "r.db")], capture_output=True,
                              text=True, timeout=60, cwd=ROOT)
        assert done.returncode == 2 and why in done.stderr and "Traceback" not in done.stderr, done.stderr
        assert len(done.stderr.strip().splitlines()) == 1 and not (folder / "d.sock").exists()
        # a fake daemon listening there: the client will not talk to it
        fake = socket.socket(socket.AF_UNIX)
        fake.bind(str(folder / "d.sock"))
        fake.listen()
        try:
            done = subprocess.run([sys.executable, "-m", "linerig.tui.cli", "--socket", str(folder / "d.sock"),
                                   "abort"], capture_output=True, text=True, timeout=60, cwd=ROOT)
            assert done.returncode != 0 and f"not connecting to {folder / 'd.sock'}" in done.stderr, done.stderr
            assert why in done.stderr
            fake.settimeout(0.5)
            with pytest.raises(TimeoutError):
                fake.accept()  # it never even connected
        finally:
            fake.close()
            (folder / "d.sock").unlink()
