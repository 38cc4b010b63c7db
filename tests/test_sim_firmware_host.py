"""The simulator running the real front-end firmware: the wire protocol over a real pseudo-terminal, the heater
lease in wall time at any speed, and the firmware's limits acting on the simulated board.

Outside checks: hardware/PROTOCOL.md §10.1 (the replayed session) for the wire; the long-time line-source
solution with contact resistance (Blackwell 1954, J. Appl. Phys. 25:137; Carslaw & Jaeger 1959 §13.7) for
the heat delivered; NIST Monograph 175 table values for the raw-emf mode.
"""

from __future__ import annotations

import asyncio
import contextlib
import itertools
import math
import re
import time
from collections.abc import AsyncIterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pytest
from waiting import Changed

from linerig.daemon.rig import its90
from linerig.daemon.rig.framing import Frame, FrameDecoder, decode_line, encode_frame
from linerig.daemon.rig.messages import Sample, parse_message
from linerig.daemon.rig.transport import SerialTransport
from linerig.daemon.sim.firmware_host import MAX_CYCLES_PER_CALL, FirmwareFrontEnd, firmware_modules
from linerig.daemon.sim.materials import get_material
from linerig.daemon.sim.rig_model import ProbeSpec, SensorSpec, SimulatedRig
from linerig.daemon.sim.server import PtyPort
from linerig.daemon.sim.wall_link import LINK_FIELDS

DOC = Path(__file__).resolve().parents[1] / "hardware" / "PROTOCOL.md"
TICK_S = 0.005
EULER_GAMMA = 0.5772156649015329


def three_sensor_needle() -> ProbeSpec:
    """The default lab needle with two extra junctions out in the medium (3 channels, as PROTOCOL.md §10)."""
    base = ProbeSpec.default_needle()
    return ProbeSpec(base.heater_length_m, base.radius_m, base.probe_rho_c, base.heater_resistance_ohm,
                     (SensorSpec("heater", 0.0, 0.05), SensorSpec("r6", 0.006, 0.05), SensorSpec("r12", 0.012, 0.05)),
                     contact_conductance=base.contact_conductance, thermocouple="T", name="three-junction needle")


def make_rig(probe: ProbeSpec | None = None, **kw: Any) -> SimulatedRig:
    return SimulatedRig(get_material("moist-sand"), probe or ProbeSpec.default_needle(), seed=3, **kw)


# ---- over a real pseudo-terminal ------------------------------------------------------------------------


class RawHost:
    """A host that writes frames and keeps every frame it reads, with the wall time it arrived."""

    def __init__(self, path: str, changed: Changed) -> None:
        self.transport = SerialTransport(path)
        self.transport.open()
        self.decoder = FrameDecoder()
        self.frames: list[tuple[float, Frame]] = []
        self.changed = changed
        self.seq = 100

    async def read_forever(self) -> None:
        while True:
            data = await self.transport.read()
            now = time.monotonic()
            for f in self.decoder.feed(data):
                self.frames.append((now, f))
            self.changed.set()

    async def send(self, kind: str, *fields: object, seq: int | None = None) -> int:
        if seq is None:
            self.seq += 1
            seq = self.seq
        await self.transport.write(encode_frame(kind, seq, [str(f) for f in fields]))
        return seq

    def since(self, start: int, kind: str | None = None) -> list[Frame]:
        return [f for _, f in self.frames[start:] if kind is None or f.kind == kind]

    async def ack(self, seq: int, start: int, timeout: float = 1.0) -> Frame:
        def find() -> Frame | None:
            return next((f for f in self.since(start, "A") if f.fields[0] == str(seq)), None)

        return await self.changed.until(find, timeout, f"the A for seq {seq}")

    async def command(self, kind: str, *fields: object, seq: int | None = None) -> tuple[list[Frame], Frame]:
        """Send and wait for the ACK; returns (the non-sample frames up to and including it, the ACK)."""
        start = len(self.frames)
        seq = await self.send(kind, *fields, seq=seq)
        a = await self.ack(seq, start)
        got = [f for f in self.since(start) if f.kind != "S"]
        return got[: got.index(a) + 1], a


@dataclass
class Rigged:
    fe: FirmwareFrontEnd
    host: RawHost
    changed: Changed
    heater_log: list[tuple[float, dict[str, Any]]] = field(default_factory=list)


@contextlib.asynccontextmanager
async def on_pty(tmp_path: Path, rig: SimulatedRig, speed: float) -> AsyncIterator[Rigged]:
    """The simulator's loop in miniature: the firmware host behind a pty, ticked every few ms; a host on the
    slave side (opened before the first tick, so the boot frame is not lost to pyserial's input flush)."""
    changed = Changed()
    rigged_log: list[tuple[float, dict[str, Any]]] = []

    def log(event: dict[str, Any]) -> None:
        rigged_log.append((time.monotonic(), event))
        changed.set()

    fe = FirmwareFrontEnd(rig, speed=speed, serial="SIM-0001", seed=5)
    fe.log_heater = log  # assignable after construction, as the server does it
    port = PtyPort(tmp_path / "frontend")
    port.plug()
    host = RawHost(str(tmp_path / "frontend"), changed)
    stop = asyncio.Event()

    async def pump() -> None:
        while not stop.is_set():
            wall = time.monotonic()
            data = port.read()
            if data:
                fe.receive(data, wall)
            for chunk in fe.tick(wall):
                port.write(chunk)
            changed.set()  # the device's state may have moved on even when nothing was sent
            with contextlib.suppress(TimeoutError):
                await asyncio.wait_for(stop.wait(), TICK_S)

    tasks = [asyncio.create_task(pump()), asyncio.create_task(host.read_forever())]
    try:
        yield Rigged(fe, host, changed, rigged_log)
    finally:
        stop.set()
        for t in tasks:
            t.cancel()
        await asyncio.gather(*tasks, return_exceptions=True)
        host.transport.close()
        port.unplug()


def samples(frames: list[Frame]) -> list[Sample]:
    out = []
    for f in frames:
        msg = parse_message(f)
        if isinstance(msg, Sample):
            out.append(msg)
    return out


def line_source_rise_K(q_W_per_m: float, t_s: float, rig: SimulatedRig) -> float:
    """Long-time probe rise with contact resistance: q/(4πk)·[2h + ln(4κt/a²) − γ], h = k/(aH)
    (Blackwell 1954, J. Appl. Phys. 25:137; Carslaw & Jaeger 1959 §13.7)."""
    k = rig.material.k_W_per_mK
    kappa = k / rig.material.rho_c_J_per_m3K
    a = rig.probe.radius_m
    h = k / (a * float(rig.probe.contact_conductance or math.inf))
    return q_W_per_m / (4 * math.pi * k) * (2 * h + math.log(4 * kappa * t_s / a**2) - EULER_GAMMA)


async def test_boot_identify_configure_heat_and_samples_at_the_configured_rate(tmp_path: Path) -> None:
    rig = make_rig()
    async with on_pty(tmp_path, rig, speed=100.0) as r:
        host = r.host
        boot = await r.changed.until(lambda: host.since(0, "B"), 1.0, "the boot frame")
        assert host.frames[0][1] == boot[0]  # the device's first frame ...
        assert boot[0].seq == 0  # ... with seq 0 (PROTOCOL.md §4.2)
        assert boot[0].fields == (r.fe.boot_id, "1.0.0", "1", "POWERON")
        assert re.fullmatch(r"[0-9A-F]{8}", r.fe.boot_id)

        got, ack = await host.command("I")
        assert [f.kind for f in got] == ["D", "A"]
        assert got[0].fields == ("linerig-fe", "SIM-0001", "1.0.0", "1", "1", r.fe.boot_id)
        assert ack.fields == (str(host.seq), "OK", "")

        start = len(host.frames)
        await host.command("C", "1", "T", "T", "100")
        base = await r.changed.until(lambda: samples(host.since(start))[2:], 1.0, "samples")
        baseline = base[-1].channels[0].value
        heat_from = len(host.frames)
        await host.command("P", "20", "1000")
        on_event = r.heater_log[-1][1]
        assert on_event["heater_on"] and on_event["power_W_per_m"] == 20.0 and on_event["reason"] == "host command"

        async def renew() -> None:
            while True:
                await host.send("L", 1000)
                await asyncio.sleep(0.2)  # the host's renewal cadence (PROTOCOL.md §6), not a synchronisation

        renewer = asyncio.create_task(renew())
        try:
            await r.changed.until(
                lambda: [s for s in samples(host.since(heat_from)) if s.heater_on][119:], 5.0, "120 heated samples")
        finally:
            renewer.cancel()
        heated = [s for s in samples(host.since(heat_from)) if s.heater_on]
        await host.command("O")
        assert not r.fe.heater_on

    all_samples = samples([f for _, f in host.frames])
    ms = [s.device_ms for s in all_samples]
    assert {b - a for a, b in itertools.pairwise(ms)} == {1000}  # 1 Hz in device time, no gaps
    c = host.decoder.counters
    assert (c.bad_frames, c.seq_gaps, c.duplicates) == (0, 0, 0)

    # the firmware regulates 20 W/m into the 100 mm heater; it reports RMS V and A (PROTOCOL.md §4.3)
    assert all(abs(s.heater_V * s.heater_A / 0.1 - 20.0) < 0.4 for s in heated[2:])
    # and the probe warms as a line source with contact resistance would (long-time form, within 3 %)
    t_on = on_event["device_t_s"]
    late = [s for s in heated if s.device_ms / 1000 - t_on >= 30.0]
    assert len(late) >= 10
    for s in late:
        expect = line_source_rise_K(20.0, s.device_ms / 1000 - t_on, rig)
        assert abs((s.channels[0].value - baseline) / expect - 1.0) < 0.03, (s.device_ms, expect)


@pytest.mark.parametrize(("speed", "lease_ms", "expect_s"), [(20.0, 500, 0.5), (300.0, 5000, 1.0)])
async def test_lease_runs_out_in_wall_time_whatever_the_speed(
    tmp_path: Path, speed: float, lease_ms: int, expect_s: float
) -> None:
    """The lease is min(lease_ms, 1000) ms of wall time (PROTOCOL.md §6), not of the sped-up device clock."""
    async with on_pty(tmp_path, make_rig(), speed=speed) as r:
        host = r.host
        await host.command("C", "1", "T", "T", "100")
        sent = time.monotonic()
        got, ack = await host.command("P", "20", str(lease_ms))
        assert ack.fields[1] == "OK"
        start = len(host.frames)
        fault = await r.changed.until(lambda: host.since(start, "F"), 3.0, "F,LEASE")
        assert fault[0].fields == ("LEASE", "expired")
        off_wall, off = r.heater_log[-1]
        on = r.heater_log[-2][1]
        assert off["heater_on"] is False and off["reason"] == "lease expired"
        got, _ = await host.command("L", "1000")
        assert got[-1].fields[1:] == ("ERR", "NOTARMED")
    lasted = off_wall - sent
    assert lasted >= expect_s - 0.02  # never early by more than one simulator tick (the re-based clocks step in ticks)
    assert lasted <= expect_s + 0.25  # the lease plus the simulator's tick and scheduling latency
    # in device time the heater ran about speed times longer: the firmware's clock is not what timed the lease.
    # A loaded machine makes the simulator fall behind its speed (never ahead), so the lower side is loose;
    # timed on the device clock, the heating would have lasted the lease itself, a tiny fraction of this.
    ran_device_s = off["device_t_s"] - on["device_t_s"]
    assert 0.5 * speed * lasted <= ran_device_s <= 1.2 * speed * lasted, (ran_device_s, speed * lasted)


async def test_a_late_retry_is_reacked_and_not_reapplied(tmp_path: Path) -> None:
    """PROTOCOL.md §5: a repeated command within 2000 ms is answered again and not applied, so a late retry of
    P cannot re-arm a heater whose lease ran out. At speed 200 that window is 10 s of device time: it must be
    judged in wall time too."""
    async with on_pty(tmp_path, make_rig(), speed=200.0) as r:
        host = r.host
        await host.command("C", "1", "T", "T", "100")
        _, first = await host.command("P", "20", "300", seq=5)
        start = len(host.frames)
        await r.changed.until(lambda: host.since(start, "F"), 2.0, "the lease to run out")
        n_events = len(r.heater_log)
        got, again = await host.command("P", "20", "300", seq=5)
        assert again.fields == first.fields and first.fields[:2] == ("5", "OK") and first.fields[2].isdigit()
        assert again.seq != first.seq  # a new frame from the device, not a copy
        got, _ = await host.command("Q")
        assert got[0].kind == "T" and got[0].fields[:3] == ("0", "0.000", "0")  # still off
        assert len(r.heater_log) == n_events
        # the same fields under a new seq are a new command
        _, ack = await host.command("P", "20", "300", seq=6)
        assert ack.fields[:2] == ("6", "OK") and int(ack.fields[2]) > int(first.fields[2]) and r.fe.heater_on
        await host.command("O")


async def test_reset_sends_a_new_boot_frame_and_forgets_everything(tmp_path: Path) -> None:
    async with on_pty(tmp_path, make_rig(), speed=50.0) as r:
        host = r.host
        await host.command("C", "1", "T", "T", "100")
        await host.command("P", "20", "1000")
        old_id = r.fe.boot_id
        start = len(host.frames)
        r.fe.reset(time.monotonic())
        boot = await r.changed.until(lambda: host.since(start, "B"), 1.0, "a new boot frame")
        assert boot[0].seq == 0 and boot[0].fields[0] == r.fe.boot_id != old_id
        assert boot[0].fields[3] == "WATCHDOG"
        assert r.heater_log[-1][1]["heater_on"] is False and r.heater_log[-1][1]["reason"] == "reset"
        assert not r.fe.heater_on and not r.fe.configured
        got, _ = await host.command("Q")
        assert got[0].fields[0] == "0" and got[0].fields[4] == "-"  # unconfigured (PROTOCOL.md §8)
        _, ack = await host.command("P", "20", "1000")
        assert ack.fields[1:] == ("ERR", "NOTCONFIGURED")


def _replay_block() -> list[tuple[str, bytes]]:
    lines: list[tuple[str, bytes]] = []
    inside = False
    for line in DOC.read_text(encoding="utf-8").splitlines():
        if line.startswith("```frames replay"):
            inside = True
        elif inside and line.startswith("```"):
            break
        elif inside and line.strip():
            direction, _, frame = line.partition(" ")
            lines.append((direction, frame.encode("ascii")))
    assert lines, "PROTOCOL.md lost its replayed session"
    return lines


async def test_replayed_session_of_the_protocol_document(tmp_path: Path) -> None:
    """Every command of PROTOCOL.md §10.1, sent as written; every answer as written, bar the boot id, the
    serial, device sequence numbers (samples interleave here) and the ms the lease has already run."""
    script = _replay_block()
    async with on_pty(tmp_path, make_rig(three_sensor_needle()), speed=1.0) as r:
        host = r.host
        doc_boot = decode_line(script[0][1])
        boot = await r.changed.until(lambda: host.since(0, "B"), 1.0, "the boot frame")
        assert boot[0].seq == 0 and boot[0].fields[1:] == doc_boot.fields[1:]
        doc_id, doc_serial = doc_boot.fields[0], "E6614103E7452D2F"
        i = 1
        while i < len(script):
            raw = script[i][1]
            cmd = decode_line(raw)
            expected = []
            i += 1
            while i < len(script) and script[i][0] == "<":
                expected.append(decode_line(script[i][1]))
                i += 1
            start = len(host.frames)
            await host.transport.write(raw + b"\n")
            await host.ack(cmd.seq, start)
            got = [f for f in host.since(start) if f.kind != "S"]
            got = got[: len(expected)]
            assert [f.kind for f in got] == [f.kind for f in expected], cmd
            for g, e in zip(got, expected, strict=True):
                want = tuple(r.fe.boot_id if x == doc_id else "SIM-0001" if x == doc_serial else x for x in e.fields)
                if e.kind == "T" and e.fields[0] == "1":  # lease_left_ms: the doc's instant, our few ms later
                    assert 900 <= int(g.fields[2]) <= int(want[2]), (g, e)
                    g, want = g.fields[:2] + g.fields[3:], want[:2] + want[3:]
                    assert g == want
                elif e.kind == "A" and cmd.kind in "PO" and e.fields[1] == "OK" and e.fields[2]:
                    # switch-on/off time (PROTOCOL.md §4.2): the doc's instant is 0, ours is the simulated clock
                    assert g.fields[:2] == want[:2] and g.fields[2].isdigit(), (cmd, g, e)
                else:
                    assert g.fields == want, (cmd, g, e)


async def test_wire_faults_act_on_the_bytes_leaving_the_device(tmp_path: Path) -> None:
    async with on_pty(tmp_path, make_rig(), speed=100.0) as r:
        host = r.host
        await host.command("C", "10", "T", "T", "100")
        await r.changed.until(lambda: samples(host.since(0))[5:], 1.0, "samples")
        r.fe.faults.silent = True
        before = r.fe.samples_sent
        r.fe.faults.garbage_bytes = 50  # used up (and lost) while silent
        n = len(host.frames)
        await r.changed.until(lambda: r.fe.samples_sent > before + 50, 2.0, "the device to keep sampling")
        assert len(host.frames) in (n, n + 1)  # at most one frame was already in the pty
        r.fe.faults.silent = False
        r.fe.faults.corrupt_fraction = 0.5
        start = len(host.frames)
        await r.changed.until(lambda: samples(host.since(start))[20:], 2.0, "samples after the silence")
        c = host.decoder.counters
        assert c.lost_frames >= 50  # the frames sent while silent are counted as lost
        assert c.bad_frames > 0  # corrupted frames are dropped by CRC, never delivered


# ---- the firmware's limits on the simulated board, in simulated wall time (no pty, deterministic) ----------


class Bench:
    """Drives a FirmwareFrontEnd with a made-up wall clock and reads it with the daemon's decoder."""

    def __init__(self, rig: SimulatedRig | None = None, speed: float = 100.0) -> None:
        self.rig = rig or make_rig()
        self.events: list[dict[str, Any]] = []
        self.fe = FirmwareFrontEnd(self.rig, speed=speed, log_heater=self.events.append)
        self.decoder = FrameDecoder()
        self.frames: list[Frame] = []
        self.wall = 1000.0
        self.seq = 0
        self.run(0.01)

    def _take(self) -> list[Frame]:
        new = []
        for chunk in self.fe.tick(self.wall):
            new += self.decoder.feed(chunk)
        self.frames += new
        return new

    def send(self, kind: str, *fields: object) -> list[Frame]:
        self.seq += 1
        self.fe.receive(encode_frame(kind, self.seq, [str(f) for f in fields]), self.wall)
        return self._take()

    def run(self, wall_s: float, renew: bool = False) -> list[Frame]:
        new: list[Frame] = []
        end = self.wall + wall_s
        next_renew = self.wall + 0.2
        while self.wall < end - 1e-9:
            self.wall = min(end, self.wall + 0.01)
            if renew and self.wall >= next_renew:
                new += self.send("L", 1000)
                next_renew += 0.2
            new += self._take()
        return new

    def of(self, kind: str, frames: list[Frame] | None = None) -> list[Frame]:
        return [f for f in (self.frames if frames is None else frames) if f.kind == kind]


def test_open_thermocouple_on_the_heater_channel_trips_latches_and_needs_o() -> None:
    b = Bench()
    b.send("C", "1", "T", "T", "100")
    b.send("P", "20", "1000")
    b.run(0.3, renew=True)
    b.rig.inject("open_tc:0")
    got = b.run(0.1, renew=True)
    assert ("TC_OPEN", "ch0") in [f.fields for f in b.of("F", got)]
    assert b.events[-1]["heater_on"] is False and b.events[-1]["reason"] == "fault TC_OPEN: ch0"
    assert b.send("P", "20", "1000")[-1].fields[1:] == ("ERR", "FAULT")
    repeats = b.of("F", b.run(5.5))  # the latched fault repeats every 5 s of wall time (PROTOCOL.md §7.1)
    assert [f.fields for f in repeats] == [("TC_OPEN", "ch0")]
    b.rig.inject("open_tc:0", on=False)
    b.run(0.1)
    assert b.send("O")[-1].fields[1] == "OK"
    assert b.send("P", "20", "1000")[-1].fields[1] == "OK"


def test_open_heater_is_found_by_the_firmware() -> None:
    b = Bench()
    b.rig.inject("heater_open")
    b.send("C", "10", "T", "T", "100")
    b.send("P", "20", "1000")
    got = b.run(0.1)  # 10 s of device time: far more than the 3 control cycles it takes
    codes = [f.fields[0] for f in b.of("F", got)]
    assert codes == ["HEATER_OPEN"]
    assert b.rig.sample().delivered_W_per_m == 0.0


def test_shorted_heater_shows_a_resistance_far_below_nominal() -> None:
    """The rig's battery limits current to 2.5 A, so a cable short never draws the 6 A the firmware trips on;
    the samples still show R = V/I far below the 40 Ω heater, which is the daemon's resistance window to judge,
    and none of the power reaches the ground."""
    b = Bench()
    b.rig.inject("heater_short")
    b.send("C", "10", "T", "T", "100")
    b.send("P", "20", "1000")
    got = b.run(0.05)
    heated = [s for s in samples(got) if s.heater_A > 0]
    assert heated
    assert all(s.heater_V / s.heater_A < 10.0 for s in heated)
    assert b.rig.sample().delivered_W_per_m == 0.0


def test_regulated_power_through_battery_sag_and_the_overpower_fault() -> None:
    """P = V·I of the reported RMS values (PROTOCOL.md §4.3) and the heat the rig receives agree with the
    request; the regulator fault makes both 1.5 times larger, visibly."""
    b = Bench()
    b.send("C", "1", "T", "T", "100")
    b.send("P", "25", "1000")
    got = samples(b.run(0.5, renew=True))[3:]
    assert all(abs(s.heater_V * s.heater_A / 0.1 / 25.0 - 1) < 0.01 for s in got)
    assert b.rig.sample().delivered_W_per_m == pytest.approx(25.0, rel=0.01)
    b.fe.set_overpower(1.5)
    got = samples(b.run(0.3, renew=True))[3:]
    assert all(abs(s.heater_V * s.heater_A / 0.1 / 37.5 - 1) < 0.01 for s in got)
    assert b.fe.power_set == 25.0  # what the host asked for; the fault is in the firmware


def test_raw_emf_mode_reports_microvolts_against_the_cold_junction() -> None:
    rig = make_rig(initial_ground_C=20.0, ambient_C=0.0, channel_offset_sd_K=0.0)
    b = Bench(rig)
    b.send("C", "1", "T", "E", "100")
    s = samples(b.run(0.1))[-1]
    # type T: E(20 °C) = 790 µV against a reference junction at 0 °C (NIST Monograph 175, type T table);
    # the cold junction wanders around 0 °C, so compare with its reported value through the reference function
    # and a Seebeck coefficient of 38.7 µV/K near 0 °C (same table; from memory)
    assert s.channels[0].value == pytest.approx(790.0 - 38.7 * s.cj_C, abs=3.0)  # 3 µV ≈ 0.08 K of noise
    assert s.channels[0].value == pytest.approx(float(its90.emf_for_temperature(20.0, s.cj_C, "T")), abs=2.0)


def test_stalled_loop_skips_slots_and_the_physics_keeps_up() -> None:
    b = Bench(speed=100.0)
    b.send("C", "10", "T", "T", "100")
    t0 = b.rig.t_s
    b.wall += 20.0  # the process was stopped for 20 s: 2000 s of device time, 20 000 control cycles
    got = b._take()
    assert b.fe.fw.control.missed > 0
    assert len(samples(got)) <= MAX_CYCLES_PER_CALL + 1
    assert b.rig.t_s == pytest.approx(t0 + 2000.0, abs=0.11)


def test_speed_change_keeps_device_time_continuous_and_clock_stuck_freezes_samples() -> None:
    b = Bench(speed=10.0)
    b.send("C", "1", "T", "T", "100")
    b.run(1.0)
    before = b.fe.device_time(b.wall)
    b.fe.speed = 100.0
    assert b.fe.device_time(b.wall) == pytest.approx(before)
    assert b.fe.device_time(b.wall + 1.0) == pytest.approx(before + 100.0)
    b.fe.set_clock_stuck(True)
    stuck = {s.device_ms for s in samples(b.run(0.2))}
    assert len(stuck) == 1
    b.fe.set_clock_stuck(False)
    assert len({s.device_ms for s in samples(b.run(0.2))}) > 10


def test_the_firmware_still_has_the_fields_kept_in_wall_time() -> None:
    device, _ = firmware_modules()
    fw = device.FrontEnd(object(), lambda frame: None, "00000000")
    for path in LINK_FIELDS:
        obj: Any = fw
        for part in path.split("."):
            assert hasattr(obj, part), path
            obj = getattr(obj, part)


@pytest.mark.parametrize(("error", "code"), [(OSError, "BUS"), (RuntimeError, "CRASH")])
def test_a_failing_board_read_switches_the_heater_off_and_is_reported(
    monkeypatch: pytest.MonkeyPatch, error: type[Exception], code: str
) -> None:
    """A dead converter bus is the firmware's BUS fault; anything else escaping it is caught as the board's
    main loop does (hardware/firmware/main.py): heater off, F,CRASH, carry on."""
    b = Bench()
    b.send("C", "1", "T", "T", "100")
    b.send("P", "20", "1000")
    b.run(0.05, renew=True)

    def broken() -> None:
        raise error("converter gone")

    monkeypatch.setattr(b.fe.hal, "read", broken)
    got = b.run(0.02)
    assert [f.fields[0] for f in b.of("F", got)][:1] == [code]
    assert b.events[-1]["heater_on"] is False and b.events[-1]["reason"].startswith(f"fault {code}")
    assert b.rig.sample().delivered_W_per_m == 0.0
    monkeypatch.undo()
    assert b.send("Q")[0].kind == "T"  # still answering
