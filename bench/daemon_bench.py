"""Daemon benchmark, with real processes: linerig-sim on a pseudo-terminal and linerigd reading it.

Prints:
1. sustained throughput of the sample path (frames → safety → SQLite → live reducer → a subscriber) at
   8 channels: samples/s taken and committed, and the daemon's CPU time per sample;
2. memory and WAL size through an accelerated 24 h of heat/recover cycles (they should stay flat);
3. time from an injected limit breach to the heater-off command reaching the front end;
4. SIGKILL mid-heating, repeated: lease-off time, committed samples intact, restart without re-arm;
5. kill -9 of a bare store writer, repeated: acknowledged rows intact, integrity_check.

Run: .venv/bin/python bench/daemon_bench.py [--quick]   (--quick: fewer repetitions, shorter windows)
"""

from __future__ import annotations

import argparse
import contextlib
import json
import os
import random
import signal
import sqlite3
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from tests.daemon_harness import Daemon, Sim, kill_leftovers, samples_committed, wait_for, write_config  # noqa: E402

CLK_TCK = os.sysconf("SC_CLK_TCK")
PAGE = os.sysconf("SC_PAGE_SIZE")


def cpu_s(pid: int) -> float:
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / CLK_TCK  # utime + stime


def rss_MB(pid: int) -> float:
    return int(Path(f"/proc/{pid}/statm").read_text().split()[1]) * PAGE / 1e6


def file_MB(path: Path) -> float:
    return path.stat().st_size / 1e6 if path.exists() else 0.0


EIGHT = """[probe]
name = "bench eight-sensor probe"
serial = "BENCH-8"
kind = "dual"
heater_length_mm = 100.0
radius_mm = 0.635
heat_capacity_MJ_per_m3K = 3.2
heater_resistance_ohm = 40.0
thermocouple = "T"
"""


def eight_channel_profile(tmp: Path) -> Path:
    text = EIGHT + "\n".join(
        f'[[sensor]]\nname = "{name}"\nradial_mm = {r}\naxial_mm = 50.0\n'
        for name, r in [("heater", 0.0), *[(f"r{i}", 3.0 * i) for i in range(1, 8)]])
    path = tmp / "eight.toml"
    path.write_text(text)
    return path


# -- 1. throughput -------------------------------------------------------------
class LineSourceRig:
    """A cheap stand-in for the simulated rig, for the throughput test only: the infinite line source
    (Carslaw & Jaeger 1959, §10.4) at each sensor's radius, so the simulator is never the bottleneck.
    It has the interface FrontEndEmulator uses: probe, t_s, advance, sample, set_heater, inject."""

    K, ALPHA = 1.5, 0.9e-6

    def __init__(self, probe_path: Path) -> None:
        from linerig.daemon.probe import load_probe_profile
        from linerig.daemon.sim.rig_model import ProbeSpec

        self.probe = ProbeSpec.from_profile(load_probe_profile(probe_path))
        self.radii = [max(s.radial_m, self.probe.radius_m) for s in self.probe.sensors]
        self.t_s = 0.0
        self.on_since: float | None = None
        self.power = 0.0
        self.rng = random.Random(1)
        self.active_faults: frozenset[str] = frozenset()

    def set_heater(self, on: bool, power_W_per_m: float = 0.0) -> None:
        self.on_since = (self.on_since if self.on_since is not None else self.t_s) if on else None
        self.power = power_W_per_m if on else 0.0

    def advance(self, dt: float) -> None:
        self.t_s += dt

    def inject(self, fault: str, on: bool = True) -> None:
        raise ValueError(f"the throughput rig has no fault {fault!r}")

    def sample(self) -> Any:  # a rig_model.RigSample
        from scipy.special import exp1

        from linerig.daemon.sim.rig_model import ChannelReading, RigSample

        t = self.t_s - self.on_since if self.on_since is not None else 0.0
        chans = []
        for s, r in zip(self.probe.sensors, self.radii, strict=True):
            rise = self.power / (4 * 3.141592653589793 * self.K) * float(exp1(r * r / (4 * self.ALPHA * t))) \
                if t > 0 else 0.0
            chans.append(ChannelReading(s.name, round(12.0 + rise + self.rng.gauss(0, 0.01), 4), None, 0))
        r_h = self.probe.heater_resistance_ohm
        watts = self.power * self.probe.heater_length_m
        i = (watts / r_h) ** 0.5
        return RigSample(self.t_s, 20.0, chans, i * r_h, i, 12.6, self.on_since is not None, self.power)


def serve_fast_sim(argv: list[str]) -> int:
    """linerig-sim's command line, with the line-source rig: for section 1 only."""
    import asyncio

    from linerig.daemon.sim.frontend_sim import FrontEndEmulator
    from linerig.daemon.sim.main import build_parser
    from linerig.daemon.sim.server import SimServer

    args = build_parser().parse_args(argv)

    async def run() -> None:
        server = SimServer(FrontEndEmulator(LineSourceRig(args.probe), speed=args.speed), args.link_dir,
                           args.heater_log)
        ctl = await server.serve_control(args.control)
        task = asyncio.create_task(server.run())
        while server.port.master is None:
            await asyncio.sleep(0)
        print(json.dumps({"frontend": str(args.link_dir / "frontend"), "control": str(args.control)}), flush=True)
        asyncio.get_running_loop().add_signal_handler(signal.SIGTERM, server.stop)
        await task
        ctl.close()

    asyncio.run(run())
    return 0


def throughput(window_s: float) -> None:
    print("\n1. Sample path at 8 channels (frames → safety → SQLite → live reducer → 1 subscriber)")
    print("   front end: the protocol emulator on a pty with a line-source rig (cheap physics)")
    print(f"   {'offered/s':>10} {'taken/s':>9} {'committed/s':>12} {'CPU µs/sample':>14} {'daemon CPU':>11}"
          f" {'lag':>6}")
    for rate_hz, speed in ((20, 50), (20, 100), (20, 150), (20, 200), (20, 250)):
        with tempfile.TemporaryDirectory() as td:
            tmp = Path(td)
            probe = eight_channel_profile(tmp)
            cfg = write_config(tmp / "rig.toml", f'[devices]\nrate_hz = {rate_hz}\n[probes]\nprofiles = ["{probe}"]\n'
                                                 '[limits]\nmax_rise_K = 50\n')
            sim = Sim(tmp, speed=speed, probe=probe, program=(str(Path(__file__).resolve()), "--serve-fast-sim"))
            d = Daemon(tmp, sim.frontend, config=cfg)
            try:
                d.wait_link()
                events = d.subscribe()  # a UI attached: every sample is encoded and sent to it
                rid = d.request("start", baseline_s=5, heat_s=3000, recover_s=10, max_drift_K_per_min=5,
                                settle_timeout_s=10)["run_id"]
                ev = events.next(lambda e: e.get("event") == "heater_on" or e.get("state") == "faulted", 30)
                if ev.get("state") == "faulted":
                    print(f"   {rate_hz * speed:>10.0f}  run faulted before heating: {ev['reason']}")
                    continue
                st0, c0, t0 = d.status()["samples_seen"], cpu_s(d.pid), time.monotonic()
                n0 = samples_committed(d.db, rid)[0]
                end = t0 + window_s
                events.sock.settimeout(0.2)
                while time.monotonic() < end:  # keep the subscriber drained, as a UI would (bytes only)
                    with contextlib.suppress(TimeoutError):
                        events.sock.recv(1 << 20)
                st1, c1, t1 = d.status()["samples_seen"], cpu_s(d.pid), time.monotonic()
                n1 = samples_committed(d.db, rid)[0]
                lag = sim.state()["samples_sent"] - st1
                taken = (st1 - st0) / (t1 - t0)
                cpu_us = (c1 - c0) / max(st1 - st0, 1) * 1e6
                state = d.run_state(rid)
                print(f"   {rate_hz * speed:>10.0f} {taken:>9.0f} {(n1 - n0) / (t1 - t0):>12.0f} {cpu_us:>14.0f} "
                      f"{(c1 - c0) / (t1 - t0):>10.0%} {lag:>6}" + ("" if state == "heating" else f"  run {state}: "
                      + str(d.request("run", run_id=rid)["run"]["end_reason"])))
                events.close()
            finally:
                d.stop()
                sim.stop()
    print("   (offered = rate × simulator speed; lag = samples sent but not yet taken at the end of the window;")
    print("    the front end shares this machine's cores with the daemon. 1e6 / CPU µs is one core's capacity)")


# -- 2. 24 h soak --------------------------------------------------------------
def soak(hours: float, speed: float) -> None:
    print(f"\n2. Accelerated {hours:g} h of heat/recover cycles at 1 Hz (simulator speed {speed:g})")
    with tempfile.TemporaryDirectory() as td:
        tmp = Path(td)
        sim = Sim(tmp, speed=speed)
        d = Daemon(tmp, sim.frontend)
        wal = Path(str(d.db) + "-wal")
        try:
            d.wait_link()
            cycle_s = 60 + 600 + 600
            cycles = max(int(hours * 3600 / cycle_s), 1)
            d.request("start", baseline_s=60, heat_s=600, recover_s=600, max_drift_K_per_min=0.5,
                      settle_timeout_s=120, cycles=cycles)
            print(f"   {'device h':>8} {'RSS MB':>7} {'WAL MB':>7} {'DB MB':>7} {'samples':>8} {'cycle':>6}")
            t_end = hours * 3600
            next_mark = 0.0
            rows = []
            while True:
                st = d.status()
                dev = st["device_s"]
                if dev >= next_mark:
                    n = sqlite3.connect(f"file:{d.db}?mode=ro", uri=True).execute(
                        "SELECT count(*) FROM samples").fetchone()[0]
                    rows.append((dev / 3600, rss_MB(d.pid), file_MB(wal), file_MB(d.db), n,
                                 (st["series"] or {}).get("cycle")))
                    print(f"   {rows[-1][0]:>8.1f} {rows[-1][1]:>7.1f} {rows[-1][2]:>7.2f} {rows[-1][3]:>7.1f} "
                          f"{n:>8} {rows[-1][5]!s:>6}", flush=True)
                    next_mark += t_end / 12
                if dev >= t_end or (st["series"] is None and st["run"] and st["run"]["state"] != "heating"
                                    and dev > 3600 and st["run"]["state"] in ("faulted", "aborted")):
                    break
                time.sleep(0.5)  # sampling period of this report, not a synchronisation
            first, last = rows[1] if len(rows) > 1 else rows[0], rows[-1]
            print(f"   RSS from {first[0]:.1f} h to {last[0]:.1f} h: {first[1]:.1f} → {last[1]:.1f} MB "
                  f"({last[1] - first[1]:+.1f} MB); WAL at most {max(r[2] for r in rows):.2f} MB "
                  f"(journal_size_limit 4 MB, checkpoint at each run's end)")
            fault = d.status()["fault"]
            print(f"   faults during the soak: {fault or 'none'}")
        finally:
            d.stop()
            sim.stop()


# -- 3. breach to heater off ---------------------------------------------------
def breach_latency(repeats: int) -> None:
    print(f"\n3. Injected limit breach → heater off at the front end ({repeats} trips, heater short, speed 10)")
    lat_sample, lat_inject = [], []
    with tempfile.TemporaryDirectory() as td:
        tmp = Path(td)
        sim = Sim(tmp, speed=10)
        d = Daemon(tmp, sim.frontend)
        try:
            d.wait_link()
            events = d.subscribe()
            for _ in range(repeats):
                rid = d.request("start", baseline_s=3, heat_s=600, recover_s=3, max_drift_K_per_min=5,
                                settle_timeout_s=10)["run_id"]
                events.next(lambda e, rid=rid: e.get("event") == "heater_on" and e["run_id"] == rid, 20)
                t_inject = sim.inject("heater_short")
                events.next(lambda e, rid=rid: e.get("event") == "state" and e["run_id"] == rid
                            and e["state"] == "faulted", 10)
                off = wait_for(lambda: (ev := sim.heater_events()[-1]) and not ev["heater_on"] and ev, 3, "off")
                first = sim.state()["first_sample_after_inject"]
                lat_sample.append((off["wall"] - first) * 1e3)
                lat_inject.append((off["wall"] - t_inject) * 1e3)
                sim.inject("heater_short", False)
                d.wait_fresh(3)
            events.close()
        finally:
            d.stop()
            sim.stop()
    for name, lat in (("from the first breaching sample sent", lat_sample), ("from the injection", lat_inject)):
        print(f"   {name:>38}: median {statistics.median(lat):6.1f} ms, max {max(lat):6.1f} ms")
    print("   (the simulator reads its port every 10 ms; one sample period here is 100 ms of wall time)")


# -- 4. SIGKILL mid-heating ----------------------------------------------------
def kills(repeats: int, number: int = 4) -> None:
    print(f"\n{number}. SIGKILL mid-heating × {repeats}: lease-off time, committed samples, restart")
    lat, ok = [], 0
    with tempfile.TemporaryDirectory() as td:
        tmp = Path(td)
        sim = Sim(tmp, speed=50)
        rng = random.Random(5)
        try:
            for i in range(repeats):
                d = Daemon(tmp, sim.frontend)
                d.wait_link()
                events = d.subscribe()
                rid = d.request("start", baseline_s=5, heat_s=3000, recover_s=5, max_drift_K_per_min=5,
                                settle_timeout_s=10)["run_id"]
                events.next(lambda e, rid=rid: e.get("event") == "heater_on" and e["run_id"] == rid, 20)
                last = 0
                for _ in range(rng.randrange(1, 8)):
                    last = events.next(lambda e, rid=rid: e.get("event") == "committed" and e.get("run_id") == rid,
                                       5)["n"]
                n_before = len(sim.heater_events())
                killed = d.kill()
                events.close()
                off = wait_for(lambda n=n_before: len(sim.heater_events()) > n and sim.heater_events()[-1], 3, "off")
                lat.append(off["wall"] - killed)
                count, top = samples_committed(d.db, rid)
                d2 = Daemon(tmp, sim.frontend)
                st = d2.wait_link()
                run = d2.request("run", run_id=rid)["run"]
                d2.wait_fresh(3)
                good = (off["reason"] == "lease expired" and top >= last and count == top
                        and run["state"] == "interrupted" and not st["heater_armed"] and not sim.state()["heater_on"])
                ok += good
                if not good:
                    print(f"   attempt {i}: off {off}, committed {last} vs {count}/{top}, run {run['state']}")
                d2.stop()
        finally:
            sim.stop()
    print(f"   passed {ok}/{repeats}; lease-off after the kill: median {statistics.median(lat) * 1e3:.0f} ms, "
          f"max {max(lat) * 1e3:.0f} ms (lease 800 ms, renewed every 200 ms)")


# -- 5. bare store writer ------------------------------------------------------
WRITER = """
import sys
from pathlib import Path
from linerig.daemon.store.writer import Store
s = Store(Path(sys.argv[1]))
rid = s.create_run({"state": "heating", "sensor_names": '["heater"]'})
n = 0
while True:
    for _ in range(50):
        n += 1
        s.add_sample((rid, n, n, n, float(n), "heating", 1, 4.4, 0.11, 12.6, 5.0, 20.0, "[12.0]", "[0]"))
    s.flush(wait=True)
    print(s.last_committed["n"], flush=True)
"""


def store_kills(repeats: int) -> None:
    print(f"\n5. kill -9 of a store writer × {repeats} (acknowledged after COMMIT)")
    ok, rows = 0, 0
    rng = random.Random(7)
    with tempfile.TemporaryDirectory() as td:
        for i in range(repeats):
            path = Path(td) / f"k{i}.db"
            proc = subprocess.Popen([sys.executable, "-c", WRITER, str(path)], stdout=subprocess.PIPE, text=True,
                                    cwd=ROOT)
            assert proc.stdout is not None
            last = 0
            deadline = time.monotonic() + rng.uniform(0.05, 0.4)
            while time.monotonic() < deadline:
                last = int(proc.stdout.readline())
            os.kill(proc.pid, signal.SIGKILL)
            proc.wait()
            con = sqlite3.connect(path)
            good = con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
            count, top = con.execute("SELECT count(*), coalesce(max(n), 0) FROM samples").fetchone()
            con.close()
            ok += good and top >= last and count == top
            rows += count
    print(f"   passed {ok}/{repeats}, {rows} rows in all")


def main() -> int:
    if sys.argv[1:2] == ["--serve-fast-sim"]:
        return serve_fast_sim(sys.argv[2:])
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--quick", action="store_true", help="fewer repetitions and shorter windows")
    args = p.parse_args()
    q = args.quick
    print(f"linerigd bench on {os.cpu_count()} CPUs, Python {sys.version.split()[0]}")
    try:
        throughput(4 if q else 10)
        soak(2 if q else 24, 1000)
        breach_latency(5 if q else 20)
        kills(5 if q else 30)
        store_kills(5 if q else 30)
    finally:
        kill_leftovers()
    print(json.dumps({"done": True}))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
