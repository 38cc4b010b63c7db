"""linerigd as a real process against linerig-sim: runs, operator requests, cycles, systemd notify, safe-off."""

from __future__ import annotations

import contextlib
import json
import signal
import socket
import sqlite3
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from pathlib import Path

import pytest
import serial

from linerig.daemon.rig import messages as m
from linerig.daemon.rig.framing import encode_frame
from tests.daemon_harness import (
    FAST_PLAN,
    ROOT,
    Daemon,
    Sim,
    reap,  # noqa: F401  (kills what a test started)
    wait_for,
)

pytestmark = pytest.mark.timeout(90)


@pytest.fixture
def rig(tmp_path: Path):
    sim = Sim(tmp_path, speed=50)
    daemon = Daemon(tmp_path, sim.frontend)
    daemon.wait_link()
    yield sim, daemon
    daemon.stop()
    sim.stop()


def test_a_run_goes_through_every_state_and_heat_starts_when_the_front_end_says_so(rig) -> None:
    sim, d = rig
    events = d.subscribe()
    rid = d.request("start", **FAST_PLAN, metadata={"site": "Test Hill", "depth_m": 1.2})["run_id"]
    finished = events.next(lambda e: e.get("event") == "run_finished" and e["run_id"] == rid, 30)
    assert finished["state"] == "done"
    run = d.request("run", run_id=rid)["run"]
    states = [(e["state"], e["reason"]) for e in run["events"] if e["kind"] == "state"]
    assert [s for s, _ in states] == ["checking", "settling", "heating", "recovering", "done"]
    assert states[2][1].startswith("baseline settled") and states[3][1] == "planned heating time 60 s reached"
    assert run["site"] == "Test Hill" and run["depth_m"] == 1.2
    # which front end made it, from its identity frame, for the test report
    ident = d.request("status")["identity"]
    assert (run["frontend_model"], run["frontend_serial"], run["frontend_firmware"]) == (
        ident["model"], ident["serial"], ident["firmware"]) and ident["serial"]
    # the simulator's own log: on once, off once, by command; time zero is when it really went on
    on, off = sim.heater_events()
    assert (on["heater_on"], on["reason"], off["heater_on"], off["reason"]) == (True, "host command", False,
                                                                               "host command")
    assert run["heat_start_device_s"] == pytest.approx(on["device_t_s"], abs=1e-3)
    assert run["heat_end_device_s"] - run["heat_start_device_s"] == pytest.approx(60, abs=1.01)
    # results: the live estimate at heater off and the final reduction, per sensor
    con = sqlite3.connect(d.db)
    sources = {r[0] for r in con.execute("SELECT source FROM results WHERE run_id = ?", [rid])}
    assert "live" in sources
    # every sample came with a "committed" mark before the end; none has a hole in its numbering
    n, top = con.execute("SELECT count(*), max(n) FROM samples WHERE run_id = ?", [rid]).fetchone()
    assert n == top == run["n_samples"]
    committed = [e for e in events.seen if e.get("event") == "committed" and e.get("run_id") == rid]
    assert committed and committed[-1]["n"] <= top
    events.close()


def test_operator_stop_abort_and_refusals(rig) -> None:
    sim, d = rig
    with pytest.raises(AssertionError, match="no run is heating"):
        d.request("stop_heating")
    with pytest.raises(AssertionError, match="power 100 W/m is above the limit 60 W/m"):
        d.request("start", **FAST_PLAN, power_W_per_m=100)
    with pytest.raises(AssertionError, match="unknown field 'heat'"):
        d.request("start", heat=5)
    with pytest.raises(AssertionError, match="no preset 'fast'"):
        d.request("start", preset="fast")
    plan = {**FAST_PLAN, "heat_s": 3000}
    rid = d.request("start", **plan)["run_id"]
    with pytest.raises(AssertionError, match=f"run {rid} is still"):
        d.request("start", **plan)
    wait_for(lambda: sim.state()["heater_on"], 10, "heater on")
    d.request("stop_heating")
    assert d.wait_state(rid, {"recovering", "done"}) in ("recovering", "done")
    run = d.request("run", run_id=rid)["run"]
    assert any(e["reason"].startswith("operator stopped heating before the verdict") for e in run["events"])
    ops = [json.loads(e["data"]) for e in run["events"] if e["kind"] == "operator"]
    assert ops and ops[0]["peer"]["uid"] is not None  # who asked is on record
    d.wait_state(rid, "done")
    events = d.subscribe()
    rid2 = d.request("start", **plan)["run_id"]
    wait_for(lambda: sim.state()["heater_on"], 10, "heater on")
    wait_for(lambda: (d.request("status")["run"] or {}).get("estimate"), 30, "a live estimate")
    d.request("abort", reason="probe hit a stone")
    assert d.wait_state(rid2, "aborted") == "aborted"
    finished = events.next(lambda e: e.get("event") == "run_finished" and e["run_id"] == rid2, 30)
    assert finished["results"] and all("aborted" in r["flags"] for r in finished["results"].values())
    events.close()
    wait_for(lambda: not sim.state()["heater_on"], 2, "heater off after abort")
    assert sim.heater_events()[-1]["reason"] == "host command"
    assert d.request("run", run_id=rid2)["run"]["end_reason"] == "probe hit a stone"


def test_cycles_are_separate_runs_reduced_on_their_own(tmp_path: Path) -> None:
    sim = Sim(tmp_path, speed=100)
    d = Daemon(tmp_path, sim.frontend)
    try:
        d.wait_link()
        events = d.subscribe()
        reply = d.request("start", **FAST_PLAN, cycles=2, reequilibrate_s=10)
        sid = reply["series_id"]
        done = events.next(lambda e: e.get("event") == "series_finished", 40)
        assert done["state"] == "done" and done["cycles_done"] == 2
        series = d.request("series", series_id=sid)["series"]
        assert [(r["cycle"], r["state"]) for r in series["runs"]] == [(1, "done"), (2, "done")]
        assert all(r["results"] for r in series["runs"])  # each cycle's heating reduced and stored on its own
        second = d.request("run", run_id=series["runs"][1]["id"])["run"]
        settled = next(e for e in second["events"] if e["state"] == "heating")
        first_event = second["events"][0]
        assert first_event["reason"] == "cycle 2 of 2: re-equilibrating"
        assert settled["device_s"] - first_event["device_s"] >= FAST_PLAN["baseline_s"] + 10 - 1
        assert [e["heater_on"] for e in sim.heater_events()] == [True, False, True, False]
        events.close()
    finally:
        d.stop()
        sim.stop()


def test_an_interrupted_series_resumes_only_at_a_cycle_boundary(tmp_path: Path) -> None:
    sim = Sim(tmp_path, speed=100)
    d = Daemon(tmp_path, sim.frontend)
    try:
        d.wait_link()
        events = d.subscribe()
        sid = d.request("start", **FAST_PLAN, cycles=2)["series_id"]
        events.next(lambda e: e.get("event") == "run_finished" and e["cycle"] == 1, 30)
        second = events.next(lambda e: e.get("event") == "heater_on", 30)["run_id"]
        events.close()
        d.kill()
        wait_for(lambda: not sim.state()["heater_on"], 2, "the lease to turn the heater off")
        d = Daemon(tmp_path, sim.frontend)
        d.wait_link()
        series = d.request("series", series_id=sid)["series"]
        assert series["state"] == "interrupted"
        assert [(r["cycle"], r["state"]) for r in series["runs"]] == [(1, "done"), (2, "interrupted")]
        assert second == series["runs"][1]["id"]
        assert not d.status()["heater_armed"] and not sim.state()["heater_on"]
        resumed = d.request("resume", series_id=sid)
        assert resumed["cycle"] == 3  # a new cycle, never the middle of the interrupted heating
        events = d.subscribe()
        fin = events.next(lambda e: e.get("event") == "series_finished", 30)
        assert fin["state"] == "done" and fin["cycles_done"] == 2
        run = d.request("run", run_id=resumed["run_id"])["run"]
        assert run["events"][0]["reason"].startswith(f"series {sid} resumed at a cycle boundary")
        with pytest.raises(AssertionError, match="only an interrupted, faulted or aborted series"):
            d.request("resume", series_id=sid)
        events.close()
    finally:
        d.stop()
        sim.stop()


def test_sigterm_mid_heating_aborts_turns_the_heater_off_and_exits_cleanly(rig) -> None:
    sim, d = rig
    rid = d.request("start", **{**FAST_PLAN, "heat_s": 3000})["run_id"]
    wait_for(lambda: sim.state()["heater_on"], 10, "heater on")
    d.signal(signal.SIGTERM)
    assert d.proc.wait(15) == 0
    assert not sim.state()["heater_on"] and sim.heater_events()[-1]["reason"] == "host command"
    con = sqlite3.connect(d.db)
    state, reason = con.execute("SELECT state, end_reason FROM runs WHERE id = ?", [rid]).fetchone()
    assert (state, reason) == ("aborted", "daemon stopping")


def test_systemd_notify_ready_watchdog_and_stopping(tmp_path: Path) -> None:
    # The protocol is systemd's, sd_notify(3): datagrams "READY=1", "WATCHDOG=1" (at least every
    # WATCHDOG_USEC, half of it recommended) and "STOPPING=1" to the socket named by $NOTIFY_SOCKET.
    sim = Sim(tmp_path, speed=50)
    note = tmp_path / "notify.sock"
    rx = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM)
    rx.bind(str(note))
    d = Daemon(tmp_path, sim.frontend, env={"NOTIFY_SOCKET": str(note), "WATCHDOG_USEC": "400000"})
    try:
        def messages(window: float, until: str | None = None) -> list[str]:
            out, end = [], time.monotonic() + window
            while (left := end - time.monotonic()) > 0:
                rx.settimeout(left)
                try:
                    out.append(rx.recv(4096).decode())
                except TimeoutError:
                    break
                if until is not None and out[-1].startswith(until):
                    break
            return out

        assert messages(5.0, until="READY=1")[-1].startswith("READY=1")
        first = messages(0.7)
        assert first.count("WATCHDOG=1") >= 2  # every 0.2 s: half the watchdog period
        d.signal(signal.SIGSTOP)
        messages(0.1)  # a ping may have been on its way
        assert "WATCHDOG=1" not in messages(0.6)  # a frozen daemon stops pinging: systemd would restart it
        d.signal(signal.SIGCONT)
        assert "WATCHDOG=1" in messages(1.0, until="WATCHDOG=1")
        d.signal(signal.SIGTERM)
        assert "STOPPING=1" in messages(5.0, until="STOPPING=1")
        assert d.proc.wait(10) == 0
    finally:
        d.stop()
        sim.stop()
        rx.close()


class HostPort:
    """The test as a host on the simulator's port: enough protocol to switch the heater on and hold it."""

    def __init__(self, url: str) -> None:
        self.port = serial.serial_for_url(url, timeout=0.05)
        self.seq = 40000

    def send(self, kind: str, *fields: str) -> None:
        self.seq += 1
        self.port.write(encode_frame(kind, self.seq, list(fields)))

    def close(self) -> None:
        self.port.close()

    @contextlib.contextmanager
    def holding(self) -> Iterator[None]:
        """Renew the lease every 0.1 s from a thread for as long as the block runs."""
        stop = threading.Event()

        def renew() -> None:
            while not stop.wait(0.1):  # the stand-in host's renewal period
                self.send(m.CMD_LEASE, "1000")

        t = threading.Thread(target=renew, daemon=True)
        t.start()
        try:
            yield
        finally:
            stop.set()
            t.join()


def test_safe_off_turns_a_held_heater_off_by_command(tmp_path: Path) -> None:
    sim = Sim(tmp_path, speed=10)
    host = HostPort(sim.frontend)
    try:
        host.send(m.CMD_CONFIGURE, "1", "T", "T", "100.0")
        host.send(m.CMD_POWER, "5.0", "1000")
        wait_for(lambda: sim.state()["heater_on"], 5, "the test's own heater-on")
        proc = subprocess.Popen([sys.executable, "-m", "linerig.daemon.main", "--safe-off", "--frontend", sim.frontend],
                                stderr=subprocess.PIPE, text=True, cwd=ROOT)
        while proc.poll() is None:  # the test keeps renewing: only a command can turn the heater off
            host.send(m.CMD_LEASE, "1000")
            time.sleep(0.1)  # renewal period of this stand-in host, not a synchronisation
        err = proc.stderr.read() if proc.stderr else ""
        assert proc.returncode == 0, err
        assert "heater off acknowledged" in err
        off = sim.heater_events()[-1]
        assert (off["heater_on"], off["reason"]) == (False, "host command")
    finally:
        host.close()
        sim.stop()
    done = subprocess.run([sys.executable, "-m", "linerig.daemon.main", "--safe-off",
                           "--frontend", "/dev/no-such-port"], capture_output=True, text=True, timeout=20, cwd=ROOT)
    assert done.returncode == 1 and "cannot open" in done.stderr


def test_safe_off_reaches_the_front_end_even_when_the_configuration_is_wrong(tmp_path: Path) -> None:
    """ExecStopPost runs `linerigd --safe-off --config ...`: a wrong limit, broken TOML or a stray byte elsewhere in
    the file must not stop it from switching the heater off (they ended it with exit 2 before)."""
    sim = Sim(tmp_path, speed=10)
    host = HostPort(sim.frontend)
    devices = f'[devices]\nfrontend = "{sim.frontend}"\n'
    bad = {"a limit out of range": (devices + "[limits]\nlease_s = 0.001\n").encode(),
           "broken TOML": (devices + "[limits]\nmax_rise_K = = 3\n").encode(),
           "not UTF-8": devices.encode() + b"[run]\n# 5 \xb0C\nheat_s = 60\n"}
    try:
        host.send(m.CMD_CONFIGURE, "1", "T", "T", "100.0")
        for name, text in bad.items():
            host.send(m.CMD_POWER, "5.0", "1000")
            wait_for(lambda: sim.state()["heater_on"], 5, "the test's own heater-on")
            config = tmp_path / "rig.toml"
            config.write_bytes(text)
            with host.holding():  # only a command can end it
                done = subprocess.run([sys.executable, "-m", "linerig.daemon.main", "--safe-off", "--config",
                                       str(config)], capture_output=True, text=True, cwd=ROOT, timeout=30)
            assert done.returncode == 0, (name, done.stderr)
            assert "ConfigError" in done.stderr and "heater off acknowledged" in done.stderr, (name, done.stderr)
            off = sim.heater_events()[-1]
            assert (off["heater_on"], off["reason"]) == (False, "host command"), name
    finally:
        host.close()
        sim.stop()


def test_a_new_daemon_turns_off_a_heater_it_finds_on(tmp_path: Path) -> None:
    sim = Sim(tmp_path, speed=10)
    host = HostPort(sim.frontend)
    try:
        host.send(m.CMD_CONFIGURE, "1", "T", "T", "100.0")
        host.send(m.CMD_POWER, "5.0", "1000")
        wait_for(lambda: sim.state()["heater_on"], 5, "the test's own heater-on")
        d = None
        try:
            # the stand-in host keeps renewing however long the new daemon takes to start; a renewal cannot
            # switch a heater back on (the device answers NOTARMED), so only the daemon's command can end it
            with host.holding():
                d = Daemon(tmp_path, sim.frontend)
                wait_for(lambda: not sim.state()["heater_on"], 5, "the new daemon's heater-off")
            off = sim.heater_events()[-1]
            assert (off["heater_on"], off["reason"]) == (False, "host command")
            st = d.wait_link()
            assert not st["heater_armed"] and st["fault"] is None
        finally:
            if d is not None:
                d.stop()
    finally:
        host.close()
        sim.stop()


def test_simulate_mode_needs_no_configuration(tmp_path: Path) -> None:
    proc = subprocess.Popen([sys.executable, "-m", "linerig.daemon.main", "--simulate", "--speed", "50", "--socket",
                             str(tmp_path / "s.sock"), "--db", str(tmp_path / "r.db")], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, cwd=ROOT)
    try:
        assert proc.stdout is not None
        ready = json.loads(proc.stdout.readline())
        assert ready["ready"]
        with socket.socket(socket.AF_UNIX) as s:
            s.connect(str(tmp_path / "s.sock"))
            s.sendall(b'{"op":"status"}\n')
            st = json.loads(s.makefile().readline())
        assert st["ok"] and st["config"] == "<defaults>" and st["simulated_material"]
    finally:
        proc.terminate()
        assert proc.wait(15) == 0


def _simulate(tmp_path: Path, env: dict[str, str]) -> subprocess.Popen[str]:
    proc = subprocess.Popen([sys.executable, "-m", "linerig.daemon.main", "--simulate", "--speed", "50", "--socket",
                             str(tmp_path / "s.sock"), "--db", str(tmp_path / "r.db")], stdout=subprocess.PIPE,
                            stderr=subprocess.DEVNULL, text=True, cwd=ROOT, env=env)
    assert proc.stdout is not None and json.loads(proc.stdout.readline())["ready"]
    return proc


def test_simulate_leaves_no_temporary_folder_behind(tmp_path: Path) -> None:
    """Each `--simulate` used to leave a /tmp/linerig-sim-* folder (its pty links and control socket)."""
    import os

    tmp = tmp_path / "tmp"
    tmp.mkdir()
    env = {**os.environ, "TMPDIR": str(tmp)}
    proc = _simulate(tmp_path, env)
    assert [p.name.startswith("linerig-sim-") for p in tmp.iterdir()] == [True]  # while it runs, it is there
    proc.terminate()
    assert proc.wait(15) == 0
    assert list(tmp.iterdir()) == []
    # the simulator on its own, stopped as a service manager stops it
    sim = subprocess.Popen([sys.executable, "-m", "linerig.daemon.sim.main", "--speed", "50"], stdout=subprocess.PIPE,
                           text=True, cwd=ROOT, env=env)
    assert sim.stdout is not None and json.loads(sim.stdout.readline())["frontend"]
    sim.terminate()
    assert sim.wait(15) == 0 and list(tmp.iterdir()) == []
    # a simulator killed outright cannot tidy up: the daemon that started it does
    proc = _simulate(tmp_path, env)
    children = Path(f"/proc/{proc.pid}/task/{proc.pid}/children").read_text().split()
    assert len(children) == 1
    os.kill(int(children[0]), signal.SIGKILL)
    proc.terminate()
    proc.wait(15)
    assert list(tmp.iterdir()) == []


def test_simulate_with_the_real_firmware_on_the_simulated_board(tmp_path: Path) -> None:
    """``--simulate --firmware``: the front end the daemon talks to is the firmware in hardware/firmware, in its
    own MicroPython process (the dev extra installs the interpreter), and the start-up line says so."""
    proc = subprocess.Popen([sys.executable, "-m", "linerig.daemon.main", "--simulate", "--firmware", "--speed", "20",
                             "--socket", str(tmp_path / "s.sock"), "--db", str(tmp_path / "r.db")],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT)
    try:
        assert proc.stdout is not None
        ready = json.loads(proc.stdout.readline())
        assert ready["ready"] and ready["firmware"] == "micropython"

        def identity() -> dict | None:
            with socket.socket(socket.AF_UNIX) as s:
                s.connect(str(tmp_path / "s.sock"))
                s.sendall(b'{"op":"status"}\n')
                return json.loads(s.makefile().readline()).get("identity")

        ident = wait_for(identity, 20, "the front end's identity")
        assert ident["model"] == "linerig-fe"  # the firmware's own name; the emulator calls itself linerig-sim
    finally:
        proc.terminate()
        assert proc.wait(15) == 0


def test_firmware_without_simulate_is_refused(tmp_path: Path) -> None:
    done = subprocess.run([sys.executable, "-m", "linerig.daemon.main", "--firmware", "--db", str(tmp_path / "r.db")],
                          capture_output=True, text=True, cwd=ROOT, timeout=30)
    assert done.returncode == 2 and "--firmware goes with --simulate" in done.stderr
    assert not (tmp_path / "r.db").exists()


class ExplodingReducer:
    """A deliberately broken part: the first heating sample it is fed raises, as a bug would."""

    def add(self, t_s: float, temp_K: float, q_W_per_m: float) -> None:
        if t_s > 0:
            raise ArithmeticError("injected bug in the live fit")


async def test_an_unhandled_error_turns_the_heater_off_and_stops_the_daemon(tmp_path: Path) -> None:
    import asyncio

    from linerig.daemon.api import Hub
    from linerig.daemon.controller import RunPlan
    from linerig.daemon.service import DaemonSettings, RigService, load_default_probe
    from linerig.daemon.store.writer import Store

    sim = Sim(tmp_path, speed=20)
    store = Store(tmp_path / "r.db")
    svc = RigService(DaemonSettings(frontend_url=sim.frontend, probe=load_default_probe()), store, Hub())
    svc.reducer_factory = lambda sensor, *calibration, **probe: lambda stop: ExplodingReducer()  # type: ignore[method-assign]
    await svc.start()
    try:
        for _ in range(500):
            if svc.link_up and svc.samples_seen > 2:
                break
            await asyncio.sleep(0.01)
        rid = svc.start_run(RunPlan(**FAST_PLAN), {})["run_id"]
        await asyncio.wait_for(svc.stop_requested.wait(), 20)  # the daemon asks to be stopped (exit code 70)
        assert svc.fatal is not None and "internal error in the sample path" in svc.fatal
        assert "ArithmeticError: injected bug" in svc.fatal
        for _ in range(200):
            if not sim.state()["heater_on"]:
                break
            await asyncio.sleep(0.01)
        off = sim.heater_events()[-1]
        assert (off["heater_on"], off["reason"]) == (False, "host command")  # the daemon's OFF, not the lease
        assert svc.run is not None and svc.run.state == "faulted"
    finally:
        await svc.stop()
        store.close()
        sim.stop()
    con = sqlite3.connect(tmp_path / "r.db")
    assert con.execute("SELECT state FROM runs WHERE id = ?", [rid]).fetchone()[0] == "faulted"


@pytest.mark.parametrize("program", ["linerig.daemon.main", "linerig.daemon.sim.main"])
@pytest.mark.parametrize("speed", ["0", "-5", "nan", "5000"])
def test_a_speed_the_simulator_cannot_keep_is_refused(program: str, speed: str) -> None:
    extra = ["--simulate"] if program == "linerig.daemon.main" else []
    done = subprocess.run([sys.executable, "-m", program, *extra, "--speed", speed], capture_output=True, text=True,
                          cwd=ROOT, timeout=30)
    assert done.returncode == 2 and "--speed" in done.stderr and "Traceback" not in done.stderr, done.stderr


def test_start_up_errors_are_one_clear_line(tmp_path: Path) -> None:
    bad_probe = tmp_path / "bad.toml"
    bad_probe.write_text("[probe]\nname = 'x'\nradius_m = -1\n")
    cases = [(["--simulate", "--probe", str(bad_probe), "--db", str(tmp_path / "r.db")], str(bad_probe)),
             (["--simulate", "--db", "/proc/linerig/r.db", "--socket", str(tmp_path / "s.sock")],
              "cannot open the database /proc/linerig/r.db")]
    for argv, says in cases:
        done = subprocess.run([sys.executable, "-m", "linerig.daemon.main", *argv], capture_output=True, text=True,
                              cwd=ROOT, timeout=60)
        assert done.returncode == 2, (argv, done.stderr)
        assert says in done.stderr and "Traceback" not in done.stderr, done.stderr
    assert not (tmp_path / "r.db").exists()  # nothing was started for the bad probe
