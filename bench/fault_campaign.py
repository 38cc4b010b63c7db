"""Fault and abuse campaign against the real daemon and simulator, as a table (issue 19).

1. SIGKILL mid-heating, repeated (daemon_bench's kills): lease-off time, committed samples, restart safe.
2. Every injectable fault during heating: whether it tripped, after how long, why, and who switched off.
3. Hostile socket clients: never reading, idle, out of descriptors, four readers of a long run's samples.
4. Bad run CSVs through `linerig reduce`: exit code, one line, the message.
5. Bad configurations through `linerigd --check-config`: exit code, one line, the message.

Run: .venv/bin/python bench/fault_campaign.py [--kills N] [--skip SECTION ...]   (about 10 minutes)
"""

from __future__ import annotations

import argparse
import contextlib
import io
import json
import os
import socket
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "bench"))

from daemon_bench import kills  # noqa: E402

from tests.daemon_harness import Daemon, EventStream, HarnessError, Sim, wait_for, write_config  # noqa: E402

SPEED = 10.0
PLAN = {"baseline_s": 5, "heat_s": 3000, "recover_s": 5, "max_drift_K_per_min": 1.0, "settle_timeout_s": 30}
CONFIG = "[limits]\nmax_rise_K = 4.0\nstale_after_s = 0.5\n"  # contact loss overheats past 4 K; silence is stale
WAIT_S = 15.0  # wall time a fault has to trip (a shorted thermocouple needs 60 s of heating: 6 s at speed 10)

# label, fault, options, injected before the run starts
FAULTS: list[tuple[str, str, dict[str, Any], bool]] = [
    ("regulator delivers 1.5× the power", "overpower", {"factor": 1.5}, False),
    ("regulator delivers 32 % less", "overpower", {"factor": 0.68}, False),
    ("heater shorted in the cable", "heater_short", {}, False),
    ("heater open", "heater_open", {}, False),
    ("heater thermocouple open", "open_tc:heater", {}, False),
    ("heater thermocouple shorted at its plug", "short_tc:heater", {}, True),
    ("converter stuck", "stale_tc:heater", {}, False),
    ("cold-junction sensor failed", "cj_fault", {}, False),
    ("battery flat", "battery_low", {}, False),
    ("probe loses contact", "poor_contact", {}, False),
    ("front end's clock stops", "clock_stuck", {}, False),
    ("front end falls silent", "silence", {}, False),
    ("half the frames corrupted", "corrupt", {"fraction": 0.5}, False),
    ("every acknowledgement lost", "drop_acks", {"count": 1_000_000}, False),
    ("front end resets", "reset", {}, False),
    ("front end unplugged", "unplug", {}, False),
    # tolerated by design: these must not end a run
    ("one acknowledgement lost", "drop_acks", {"count": 1}, False),
    ("every 33rd frame lost (3 %)", "drop", {"every": 33}, False),
    ("64 bytes of line noise", "garbage", {"bytes": 64}, False),
    ("thermocouple ten times noisier", "noisy_tc:heater", {}, False),
]


def row(*cells: object, widths: tuple[int, ...]) -> str:
    return "  ".join(str(c)[:w].ljust(w) for c, w in zip(cells, widths, strict=True)).rstrip()


# -- 2. injected faults ----------------------------------------------------------
def faults() -> None:
    widths = (40, 8, 7, 14, 80)
    print(f"\n2. Injected faults during heating (speed {SPEED:g}; a fault has {WAIT_S:g} s of wall time to trip)")
    print(row("fault", "tripped", "after s", "heater off by", "reason", widths=widths))
    with tempfile.TemporaryDirectory() as td:
        tmp = Path(td)
        sim = Sim(tmp, speed=SPEED)
        d = Daemon(tmp, sim.frontend, config=write_config(tmp / "rig.toml", CONFIG))
        try:
            d.wait_link()
            events = d.subscribe()
            for label, fault, kw, before in FAULTS:
                print(row(label, *_one_fault(sim, d, events, fault, kw, before), widths=widths), flush=True)
            print(row("second program opening the port", *_second_opener(sim, d, events), widths=widths))
            events.close()
        finally:
            d.stop()
            sim.stop()


def _one_fault(sim: Sim, d: Daemon, events: EventStream, fault: str, kw: dict[str, Any],
               before: bool) -> tuple[str, str, str, str]:
    if before:
        sim.inject(fault, True, **kw)
    rid = int(d.request("start", **PLAN)["run_id"])
    events.next(lambda e: e.get("event") == "heater_on" and e["run_id"] == rid, 60)
    n_heater = len(sim.heater_events())
    t0 = time.time() if before else sim.inject(fault, True, **kw)
    try:
        ev = events.next(lambda e: e.get("event") == "state" and e["run_id"] == rid and e["state"] != "heating",
                         WAIT_S)
        tripped, after, reason = ev["state"], f"{time.time() - t0:.2f}", ev.get("reason", "")
    except HarnessError:
        tripped, after, reason = "no", "—", "(still heating: tolerated)"
        d.request("abort", reason="campaign: next fault")
    off = wait_for(lambda: len(sim.heater_events()) > n_heater and not sim.state()["heater_on"]
                   and sim.heater_events()[-1], 10, "heater off")
    sim.inject(fault, False)
    if fault == "unplug":
        sim.inject("replug")
    wait_for(lambda: d.status()["link_up"], 20, "the link again")
    d.wait_fresh(3, timeout=20)
    return tripped, after, off["reason"], reason


def _second_opener(sim: Sim, d: Daemon, events: EventStream) -> tuple[str, str, str, str]:
    """Another program opens the front end's port while the daemon is idle and switches the heater on."""
    opener = ("import os, sys\n"
              "if os.geteuid() == 0:\n"
              "    os.setgroups([]); os.setgid(65534); os.setuid(65534)\n"
              "try:\n"
              "    fd = os.open(sys.argv[1], os.O_RDWR | os.O_NOCTTY)\n"
              "except OSError as e:\n"
              "    print('refused', e.strerror)\n"
              "else:\n"
              "    print('opened')\n")
    tty = os.path.realpath(sim.frontend)
    mode = os.stat(tty).st_mode
    os.chmod(tty, 0o666)  # so that only the port's exclusive mode can refuse the unprivileged opener
    try:
        out = subprocess.run([sys.executable, "-c", opener, tty], capture_output=True, text=True, timeout=30)
    finally:
        os.chmod(tty, mode & 0o7777)
    return ("refused" if "refused" in out.stdout else "NO"), "—", "—", out.stdout.strip()


# -- 3. hostile clients ------------------------------------------------------------
def hostile_clients() -> None:
    from tests.test_api_hostile_clients import MAX_CLIENTS, RESERVED_CLIENTS, _long_run, fds, never_reading

    widths = (46, 10, 90)
    print("\n3. Hostile socket clients during a heating run (speed 20)")
    print(row("clients", "run", "what happened", widths=widths))
    with tempfile.TemporaryDirectory() as td:
        tmp = Path(td)
        db = tmp / "runs.db"
        old = _long_run(db, 200_000)
        sim = Sim(tmp, speed=20)
        d = Daemon(tmp, sim.frontend, db=db)
        try:
            d.wait_link()
            rid = int(d.request("start", **PLAN)["run_id"])
            wait_for(lambda: sim.state()["heater_on"], 60, "heating")
            base = fds(d.pid)
            n = MAX_CLIENTS + RESERVED_CLIENTS + 10
            held = [never_reading(d.socket, b'{"op":"status"}\n' * 1000) for _ in range(n)]
            t0 = time.monotonic()
            peak = wait_for(lambda: (f := fds(d.pid)) >= base + MAX_CLIENTS and f, 60, "the clients taken in")
            wait_for(lambda: fds(d.pid) <= base + 3, 120, "descriptors back")
            print(row(f"{n} that never read", _state(d, rid),
                      f"cut off: descriptors {base} → {peak} → {fds(d.pid)} in {time.monotonic() - t0:.1f} s",
                      widths=widths))
            for s in held:
                s.close()
            idle = [_connect(d.socket) for _ in range(MAX_CLIENTS)]
            done = subprocess.run([sys.executable, "-m", "linerig.tui.cli", "--socket", str(d.socket), "status",
                                   "--json"], capture_output=True, text=True, timeout=60, cwd=ROOT)
            print(row(f"{MAX_CLIENTS} idle, then `linerig status`", _state(d, rid, idle),
                      "served on a reserved slot" if done.returncode == 0 else f"refused: {done.stderr.strip()}",
                      widths=widths))
            for s in idle:
                s.close()
            t0 = time.monotonic()
            readers = [_connect(d.socket, json.dumps({"op": "samples", "run_id": old}).encode() + b"\n")
                       for _ in range(4)]
            sizes = [len(s.makefile("rb").readline()) for s in readers]
            print(row("4 reading a 200,000-sample run", _state(d, rid),
                      f"{sum(sizes) / 1e6:.0f} MB in {time.monotonic() - t0:.1f} s, heating undisturbed",
                      widths=widths))
            for s in readers:
                s.close()
        finally:
            d.stop()
            sim.stop()
    print(row("accept out of descriptors", *_out_of_descriptors(), widths=widths))


def _connect(path: Path, request: bytes = b"") -> socket.socket:
    s = socket.socket(socket.AF_UNIX)
    s.settimeout(120)
    s.connect(str(path))
    if request:
        s.sendall(request)
    return s


def _state(d: Daemon, rid: int, idle: list[socket.socket] | None = None) -> str:
    st = d.status() if idle is None else _status_via_reserved(d.socket)
    run = st.get("run") or {}
    return f"{run.get('state')}" + ("" if st.get("fault") is None else " FAULT") if run.get("id") == rid else "?"


def _status_via_reserved(path: Path) -> dict[str, Any]:
    with _connect(path, b'{"op":"status","id":1}\n') as s:
        for line in s.makefile("rb"):
            msg = json.loads(line)
            if msg.get("id") == 1:
                return dict(msg)
    return {}


def _out_of_descriptors() -> tuple[str, str]:
    from tests.test_api_hostile_clients import test_running_out_of_descriptors_pauses_accepting_and_never_faults_a_run

    with tempfile.TemporaryDirectory() as td:
        try:
            test_running_out_of_descriptors_pauses_accepting_and_never_faults_a_run(Path(td))
        except AssertionError as exc:
            return "FAULT", str(exc).splitlines()[0]
    return "heating", "accepting paused at EMFILE (limit 60), resumed; the run and the daemon carried on"


# -- 4. bad CSVs -------------------------------------------------------------------
def bad_csvs() -> None:
    from linerig.tui.cli import main as cli
    from tests.test_reduce_hostile_inputs import BAD

    widths = (34, 5, 9, 100)
    print("\n4. Bad run CSVs: `linerig reduce FILE --json`")
    print(row("input", "exit", "one line", "message", widths=widths))
    with tempfile.TemporaryDirectory() as td:
        for label, content, _ in BAD:
            path = Path(td) / "bad.csv"
            path.write_bytes(content if isinstance(content, bytes) else content.encode())
            code, err = _quiet(lambda p=path: cli(["reduce", str(p), "--json"]))
            lines = err.strip().splitlines()
            print(row(label, code, "yes" if len(lines) == 1 else f"{len(lines)} lines",
                      (lines[0] if lines else "").replace(str(path), "FILE"), widths=widths))


def _quiet(call: Callable[[], int]) -> tuple[int, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = call()
    return code, err.getvalue()


# -- 5. bad configurations ----------------------------------------------------------
BAD_CONFIGS: list[tuple[str, bytes | str, tuple[str, ...]]] = [
    ("lease of 1 ms", "[limits]\nlease_s = 0.001\n", ()),
    ("stale after 1e9 s", "[limits]\nstale_after_s = 1e9\n", ()),
    ("heating up to 1e12 s", "[limits]\nmax_heating_s = 1e12\n", ()),
    ("probe limit 500 °C", "[limits]\nmax_probe_C = 500\n", ()),
    ("pre-check margin 1000 K", "[limits]\nprecheck_margin_K = 1000\n", ()),
    ("battery cut-off 5 V", "[limits]\nmin_supply_V = 5\n", ()),
    ("power tolerance 100 %", "[limits]\npower_tolerance = 1.0\n", ()),
    ("a limit that is text", '[limits]\nmax_rise_K = "hot"\n', ()),
    ("an unknown limit", "[limits]\nmax_rise = 5\n", ()),
    ("broken TOML", "[limits]\nmax_rise_K = = 3\n", ()),
    ("not UTF-8", b"[limits]\n# 5 \xb0C\nmax_rise_K = 5\n", ()),
    ("no such control group", '[daemon]\ngroup = "no-such-group-here"\n', ()),
    ("--group with no such group", "", ("--group", "no-such-group-here", "--frontend", "/dev/null")),
]


def bad_configs() -> None:
    widths = (30, 5, 9, 100)
    print("\n5. Bad configurations: `linerigd --config FILE --check-config` (or the options shown)")
    print(row("configuration", "exit", "one line", "message", widths=widths))
    with tempfile.TemporaryDirectory() as td:
        tmp = Path(td)
        for label, text, extra in BAD_CONFIGS:
            path = tmp / "rig.toml"
            path.write_bytes(text if isinstance(text, bytes) else text.encode())
            argv = ["--config", str(path), *(extra or ("--check-config",)),
                    "--socket", str(tmp / "s.sock"), "--db", str(tmp / "r.db")]
            done = subprocess.run([sys.executable, "-m", "linerig.daemon.main", *argv], capture_output=True,
                                  text=True, timeout=60, cwd=ROOT)
            lines = done.stderr.strip().splitlines()
            print(row(label, done.returncode, "yes" if len(lines) == 1 else f"{len(lines)} lines",
                      (lines[0] if lines else "").replace(str(path), "FILE"), widths=widths), flush=True)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--kills", type=int, default=5, help="SIGKILL repetitions (default 5)")
    ap.add_argument("--skip", nargs="*", default=[], choices=["kills", "faults", "clients", "csv", "config"])
    args = ap.parse_args()
    print("linerig fault campaign: real linerigd and linerig-sim processes, real sockets and files")
    if "kills" not in args.skip:
        kills(args.kills, number=1)
    if "faults" not in args.skip:
        faults()
    if "clients" not in args.skip:
        hostile_clients()
    if "csv" not in args.skip:
        bad_csvs()
    if "config" not in args.skip:
        bad_configs()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
