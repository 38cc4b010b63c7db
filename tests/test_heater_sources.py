"""Both heater power sources through real pseudo-terminals into the simulated rig.

ScpiHeater drives the SCPI supply emulator (`ScpiSupplySim`), whose output heats a `SimulatedRig` through
`RigLoad`; FrontEndHeater drives the real front-end firmware hosted by `FirmwareFrontEnd`.

Outside checks: Ohm's law and Joule heating (P = V²/R = V·I) for the power per metre; the heater lease of
hardware/PROTOCOL.md §6 (off within 1 s of the host going quiet).
"""

from __future__ import annotations

import asyncio
import contextlib
import time
from collections.abc import AsyncIterator, Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pytest
from waiting import Changed

from linerig.daemon.rig.frontend import FrontEnd, FrontEndHandlers
from linerig.daemon.rig.heater import FrontEndHeater, HeaterNotArmed, HeaterSource, ScpiHeater, open_scpi_heater
from linerig.daemon.rig.messages import Fault, Sample
from linerig.daemon.rig.scpi import ScpiError, SupplyLimits
from linerig.daemon.rig.transport import SerialTransport
from linerig.daemon.sim.firmware_host import FirmwareFrontEnd
from linerig.daemon.sim.materials import get_material
from linerig.daemon.sim.rig_model import ProbeSpec, SensorSpec, SimulatedRig
from linerig.daemon.sim.scpi_sim import ScpiSupplySim
from linerig.daemon.sim.server import PtyPort
from linerig.daemon.sim.supply_link import RigLoad, ScpiPort, make_supply

TICK_S = 0.005
LENGTH_M = 0.1
LIMITS = SupplyLimits(v_max=30.0, i_max=1.0, p_max_W=10.0)


def needle(tcr_per_K: float = 5e-5) -> ProbeSpec:
    """A 100 mm, 40 Ω lab needle; a copper-like TCR (about 0.0039/K, from memory) makes R follow the heating."""
    return ProbeSpec(heater_length_m=LENGTH_M, radius_m=0.635e-3, probe_rho_c=3.2e6, heater_resistance_ohm=40.0,
                     sensors=(SensorSpec("heater", 0.0, 0.05),), heater_tcr_per_K=tcr_per_K, name="test needle")


def make_rig(probe: ProbeSpec | None = None) -> SimulatedRig:
    return SimulatedRig(get_material("moist-sand"), probe or needle(), seed=11)


@contextlib.asynccontextmanager
async def pumped(tick: Callable[[PtyPort, float], None], link: Path, changed: Changed) -> AsyncIterator[PtyPort]:
    """A simulated device's loop on the master side of a real pty, every few ms (as daemon/sim/server.py)."""
    port = PtyPort(link)
    port.plug()
    stop = asyncio.Event()

    async def run() -> None:
        while not stop.is_set():
            tick(port, time.monotonic())
            changed.set()
            with contextlib.suppress(TimeoutError):
                await asyncio.wait_for(stop.wait(), TICK_S)

    task = asyncio.create_task(run())
    try:
        yield port
    finally:
        stop.set()
        await task
        port.unplug()


# ---- the SCPI supply --------------------------------------------------------------------------------------


@dataclass
class SupplyRig:
    rig: SimulatedRig
    supply: ScpiSupplySim
    load: RigLoad
    heater: ScpiHeater
    changed: Changed


@contextlib.asynccontextmanager
async def scpi_rig(tmp_path: Path, speed: float = 20.0, tcr_per_K: float = 5e-5) -> AsyncIterator[SupplyRig]:
    rig = make_rig(needle(tcr_per_K))
    supply, load = make_supply(rig, seed=4)
    port_io = ScpiPort(supply)
    last = [time.monotonic()]
    changed = Changed()

    def tick(port: PtyPort, wall: float) -> None:
        data = port.read()
        if data:
            port.write(port_io.feed(data))
        rig.advance(max(0.0, wall - last[0]) * speed)
        last[0] = wall
        load.sync()

    async with pumped(tick, tmp_path / "supply", changed):
        # nominal 44 Ω against a true 40 Ω: the loop has to find the real resistance itself
        heater = await open_scpi_heater(str(tmp_path / "supply"), LENGTH_M, 44.0, LIMITS, timeout_s=0.1)
        try:
            yield SupplyRig(rig, supply, load, heater, changed)
        finally:
            heater.close()


async def steps(heater: HeaterSource, n: int, every_s: float = 0.05) -> None:
    for _ in range(n):
        await heater.keep_alive()
        await asyncio.sleep(every_s)  # the daemon's keep-alive cadence, shortened; not a synchronisation


async def test_scpi_heater_holds_the_requested_power_per_metre_in_the_rig(tmp_path: Path) -> None:
    async with scpi_rig(tmp_path, tcr_per_K=3.9e-3) as s:
        assert isinstance(s.heater, HeaterSource) and s.heater.kind == "scpi"
        assert s.supply.log[:2] == ["*CLS", "*IDN?"] and not s.supply.output  # session opened, output off
        await s.heater.arm(20.0)
        assert s.supply.output
        r_cold = s.rig.heater_resistance_ohm()
        await steps(s.heater, 16)
        # the probe warmed, so a copper-like heater's R rose; constant voltage would now give less power
        r_warm = s.rig.heater_resistance_ohm()
        assert r_warm > r_cold * 1.01
        truth = s.rig.sample().delivered_W_per_m
        assert truth == pytest.approx(20.0, rel=0.02)
        assert not s.load.clamped
        assert s.heater.measured_W_per_m == pytest.approx(20.0, rel=0.02)
        assert s.heater.heater_ohm == pytest.approx(r_warm, rel=0.01)
        # Joule heating at the supply's terminals, per metre: V²/R / L
        v, _, mode = s.supply.operating_point()
        assert mode == "CV" and v * v / r_warm / LENGTH_M == pytest.approx(truth, rel=1e-6)

        assert await s.heater.off() is True
        assert not s.supply.output and s.rig.sample().delivered_W_per_m == 0.0
        assert s.heater.measured_W_per_m == 0.0
        await s.heater.keep_alive()  # not armed: nothing happens
        assert not s.supply.output


async def test_a_garbled_reply_costs_a_resync_not_the_run(tmp_path: Path) -> None:
    async with scpi_rig(tmp_path) as s:
        await s.heater.arm(20.0)
        await steps(s.heater, 3)
        s.supply.faults.garble_next = 2
        await steps(s.heater, 3)
        stats = s.heater.supply.stats
        assert stats.garbled >= 1 and stats.resyncs >= 1
        assert s.supply.output and s.heater.armed
        assert s.rig.sample().delivered_W_per_m == pytest.approx(20.0, rel=0.02)
        assert await s.heater.off()


async def test_a_supply_that_stops_answering_never_makes_off_raise(tmp_path: Path) -> None:
    async with scpi_rig(tmp_path) as s:
        await s.heater.arm(20.0)
        await steps(s.heater, 2)
        s.supply.faults.drop_rate = 1.0  # it still obeys, it just never replies
        with pytest.raises(ScpiError):
            await s.heater.keep_alive()
        assert not s.heater.armed and s.heater.measured_W_per_m is None
        assert await s.heater.off() is False  # unconfirmed, but no exception
        # the loop's own off attempt got through: the supply obeyed OUTP OFF it could not confirm
        assert not s.supply.output and s.rig.sample().delivered_W_per_m == 0.0


async def test_an_output_that_goes_off_by_itself_is_reported(tmp_path: Path) -> None:
    async with scpi_rig(tmp_path) as s:
        await s.heater.arm(20.0)
        await steps(s.heater, 2)
        s.supply.power_cycle()  # a mains dropout: output off, settings back to defaults
        with pytest.raises(HeaterNotArmed):
            await steps(s.heater, 2)
        assert not s.heater.armed
        assert await s.heater.off()


def test_rig_load_follows_heater_faults_and_leaves_an_idle_rig_alone() -> None:
    rig = make_rig()
    supply, load = make_supply(rig, noise_V=0.0, noise_A=0.0)
    assert supply.heater_ohm == pytest.approx(rig.heater_resistance_ohm())
    rig.set_heater(True, 15.0)  # someone else (a front end's PWM) drives the heater
    load.sync()
    assert rig.sample().delivered_W_per_m == pytest.approx(15.0)  # an idle supply does not interfere
    rig.set_heater(False)
    for line in (b"VOLT 8.0", b"CURR 1.0", b"OUTP ON"):
        supply.handle(line)
    assert rig.sample().delivered_W_per_m == pytest.approx(8.0**2 / 40.0 / LENGTH_M, rel=1e-3)  # Ohm and Joule
    rig.inject("heater_open")
    load.sync()
    assert supply.heater_ohm == float("inf") and supply.operating_point()[1] == 0.0
    assert rig.sample().delivered_W_per_m == 0.0
    rig.inject("heater_open", on=False)
    rig.inject("heater_short")
    load.sync()
    assert supply.heater_ohm == 0.2 and supply.operating_point()[2] == "CC"  # the 1 A limit holds a short
    assert rig.sample().delivered_W_per_m == 0.0
    rig.inject("heater_short", on=False)
    load.sync()
    supply.handle(b"VOLT 20")  # 10 W: more than the rig's 12.8 V battery model can put into 40 Ω
    assert load.clamped


def test_scpi_port_answers_whole_lines_only_and_survives_an_overlong_one() -> None:
    supply = ScpiSupplySim()
    port = ScpiPort(supply)
    assert port.feed(b"*IDN") == b""
    assert port.feed(b"?\r\nVOLT 5;:OUTP ON\nOUTP?\n") == b"LINERIG,SIMPSU-3005,SIM000042,1.04\n1\n"
    assert port.feed(b"X" * 300) == b""
    assert port.feed(b"\nSYST:ERR?\n") == b'-363,"Input buffer overrun"\n'


# ---- the front end ----------------------------------------------------------------------------------------


@dataclass
class FrontEndRig:
    rig: SimulatedRig
    fe: FirmwareFrontEnd
    driver: FrontEnd
    heater: FrontEndHeater
    changed: Changed
    heater_log: list[tuple[float, dict[str, Any]]] = field(default_factory=list)
    samples: list[Sample] = field(default_factory=list)
    faults: list[tuple[float, Fault]] = field(default_factory=list)


@contextlib.asynccontextmanager
async def frontend_rig(tmp_path: Path, speed: float = 50.0) -> AsyncIterator[FrontEndRig]:
    rig = make_rig()
    changed = Changed()
    fe = FirmwareFrontEnd(rig, speed=speed, seed=2)

    def tick(port: PtyPort, wall: float) -> None:
        data = port.read()
        if data:
            fe.receive(data, wall)
        for chunk in fe.tick(wall):
            port.write(chunk)

    async with pumped(tick, tmp_path / "frontend", changed):
        transport = SerialTransport(str(tmp_path / "frontend"))
        transport.open()
        handlers = FrontEndHandlers()
        driver = FrontEnd(transport, handlers)
        heater = FrontEndHeater(driver, LENGTH_M, lease_s=1.0)
        r = FrontEndRig(rig, fe, driver, heater, changed)
        fe.log_heater = lambda event: r.heater_log.append((time.monotonic(), event))

        def on_sample(s: Sample) -> None:
            r.samples.append(s)
            heater.observe(s)

        handlers.on_sample = on_sample
        handlers.on_fault = lambda f: r.faults.append((time.monotonic(), f))
        reader = asyncio.create_task(driver.read_forever())
        try:
            ident = await driver.identify()
            assert ident.protocol == 1 and ident.boot_id == fe.boot_id
            await driver.configure(5.0, "T", "T", LENGTH_M)
            yield r
        finally:
            reader.cancel()
            await asyncio.gather(reader, return_exceptions=True)
            transport.close()


async def test_frontend_heater_arms_the_firmware_and_keep_alive_holds_the_lease(tmp_path: Path) -> None:
    async with frontend_rig(tmp_path) as r:
        h = r.heater
        assert isinstance(h, HeaterSource) and h.kind == "frontend"
        assert h.measured_W_per_m is None and h.heater_ohm is None  # nothing read back yet
        await h.arm(20.0)
        assert r.fe.heater_on and r.fe.power_set == 20.0
        t_armed = time.monotonic()
        while time.monotonic() - t_armed < 1.6:  # longer than the 1 s lease: only renewals keep it on
            await h.keep_alive()
            await asyncio.sleep(0.25)  # the daemon's cadence
        assert r.fe.heater_on and not r.faults
        assert [e["heater_on"] for _, e in r.heater_log] == [True]
        on = [s for s in r.samples if s.heater_on][3:]
        assert len(on) > 100  # 5 Hz × 50 × 1.6 s of device time
        # the firmware's readback, P = V·I per metre and R = V/I (PROTOCOL.md §4.3), and the rig's truth
        assert h.measured_W_per_m == pytest.approx(20.0, rel=0.02)
        assert h.heater_ohm == pytest.approx(r.rig.heater_resistance_ohm(), rel=0.02)
        assert r.rig.sample().delivered_W_per_m == pytest.approx(20.0, rel=0.02)
        assert on[-1].channels[0].value > on[0].channels[0].value + 1.0  # the probe warms
        assert await h.off() is True
        assert not r.fe.heater_on and r.rig.sample().delivered_W_per_m == 0.0


async def test_without_keep_alive_the_firmware_switches_off_within_a_second(tmp_path: Path) -> None:
    async with frontend_rig(tmp_path) as r:
        h = r.heater
        await h.arm(20.0)
        await h.keep_alive()
        quiet_from = time.monotonic()
        await r.changed.until(lambda: any(f.code == "LEASE" for _, f in r.faults), 2.0, "F,LEASE")
        off_wall, off = r.heater_log[-1]
        assert off["heater_on"] is False and off["reason"] == "lease expired"
        assert off_wall - quiet_from <= 1.0 + 0.1  # the 1 s lease plus the simulator's tick
        assert r.rig.sample().delivered_W_per_m == 0.0
        with pytest.raises(HeaterNotArmed):
            await h.keep_alive()
        assert not h.armed
        assert await h.off() is True


async def test_frontend_heater_off_never_raises_on_a_dead_link(tmp_path: Path) -> None:
    async with frontend_rig(tmp_path, speed=10.0) as r:
        h = r.heater
        await h.arm(10.0)
        r.fe.faults.silent = True  # the device hears but cannot answer
        assert await h.off() is False  # O sent three times, never acknowledged, then once more blind
        assert not r.fe.heater_on  # the O got through although its ACK did not
