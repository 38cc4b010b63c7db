"""SCPI supply driver over a real pseudo-terminal, with the supply emulator on the other side.

The driver opens the pty's slave end with pyserial (as it would a USB serial adapter); the emulator
answers on the master end from the same event loop. Faults are the emulator's: garbled and missing
replies, error-queue entries, a heater that changes resistance or shorts.
"""

from __future__ import annotations

import asyncio
import contextlib
import math
import os
import time
from collections.abc import AsyncIterator

import pytest
import serial

from linerig.daemon.rig.scpi import (
    ESR_PON,
    ConstantPowerLoop,
    PowerLimitExceeded,
    ScpiDeviceError,
    ScpiIdentityError,
    ScpiRangeError,
    ScpiSupply,
    ScpiTimeout,
    SupplyLimits,
    voltage_setpoint,
)
from linerig.daemon.sim.scpi_sim import ScpiSupplySim

LIMITS = SupplyLimits(v_max=30.0, i_max=3.0, p_max_W=20.0)


class PtySupply:
    """The emulator on the master side of a pty, served by the running event loop."""

    def __init__(self, sim: ScpiSupplySim) -> None:
        self.sim = sim
        self.master, self.slave = os.openpty()
        os.set_blocking(self.master, False)
        self.path = os.ttyname(self.slave)
        self._buf = bytearray()
        asyncio.get_running_loop().add_reader(self.master, self._on_data)

    def _on_data(self) -> None:
        try:
            self._buf += os.read(self.master, 4096)
        except OSError:
            return
        while (i := self._buf.find(b"\n")) >= 0:
            line = bytes(self._buf[:i])
            del self._buf[: i + 1]
            for reply in self.sim.handle(line):
                os.write(self.master, reply)

    def inject(self, data: bytes) -> None:
        """Bytes the supply sends unasked (a late reply to an earlier query)."""
        os.write(self.master, data)

    def close(self) -> None:
        asyncio.get_running_loop().remove_reader(self.master)
        os.close(self.master)
        os.close(self.slave)


class SerialLineTransport:
    """LineTransport over a pyserial port, driven by the event loop's reader callbacks."""

    def __init__(self, port: serial.Serial) -> None:
        self.port = port
        self._buf = bytearray()
        self._event = asyncio.Event()
        asyncio.get_running_loop().add_reader(port.fileno(), self._on_readable)

    def _on_readable(self) -> None:
        data = self.port.read(self.port.in_waiting or 1)
        if data:
            self._buf += data
            self._event.set()

    async def write(self, data: bytes) -> None:
        self.port.write(data)

    async def readline(self, timeout: float) -> bytes:
        deadline = time.monotonic() + timeout
        while True:
            i = self._buf.find(b"\n")
            if i >= 0:
                line = bytes(self._buf[: i + 1])
                del self._buf[: i + 1]
                return line
            left = deadline - time.monotonic()
            if left <= 0:
                partial = bytes(self._buf)
                self._buf.clear()
                return partial
            self._event.clear()
            with contextlib.suppress(TimeoutError):
                await asyncio.wait_for(self._event.wait(), left)

    def reset_input_buffer(self) -> None:
        self.port.reset_input_buffer()
        self._buf.clear()

    def close(self) -> None:
        asyncio.get_running_loop().remove_reader(self.port.fileno())
        self.port.close()


@pytest.fixture
async def rig() -> AsyncIterator[tuple[ScpiSupply, ScpiSupplySim, PtySupply]]:
    sim = ScpiSupplySim(heater_ohm=20.0, seed=7)
    pty_side = PtySupply(sim)
    port = serial.serial_for_url(pty_side.path, baudrate=9600, timeout=0)
    transport = SerialLineTransport(port)
    supply = ScpiSupply(transport, LIMITS, timeout_s=0.3, expect_idn="LINERIG,SIMPSU")
    try:
        yield supply, sim, pty_side
    finally:
        transport.close()
        pty_side.close()


async def test_open_identifies_and_leaves_output_off(rig: tuple[ScpiSupply, ScpiSupplySim, PtySupply]) -> None:
    supply, sim, _ = rig
    sim.output = True  # left on by someone else
    ident = await supply.open()
    assert (ident.maker, ident.model, ident.serial) == ("LINERIG", "SIMPSU-3005", "SIM000042")
    assert sim.output is False
    assert sim.esr == 0  # power-on flag read and cleared
    # the startup order from the reliability notes: *CLS, *IDN?, OUTP OFF, OUTP?, SYST:ERR?, *ESR?
    assert sim.log[:6] == ["*CLS", "*IDN?", "OUTP OFF", "OUTP?", "SYST:ERR?", "*ESR?"]


async def test_wrong_instrument_is_refused(rig: tuple[ScpiSupply, ScpiSupplySim, PtySupply]) -> None:
    supply, sim, _ = rig
    sim.maker = "OTHER"
    with pytest.raises(ScpiIdentityError, match="expected an instrument"):
        await supply.open()


async def test_setpoints_are_read_back_and_range_checked(rig: tuple[ScpiSupply, ScpiSupplySim, PtySupply]) -> None:
    supply, sim, _ = rig
    await supply.open()
    assert await supply.set_voltage(6.5) == pytest.approx(6.5)
    assert await supply.set_current(0.8) == pytest.approx(0.8)
    assert (sim.v_set, sim.i_set) == (6.5, 0.8)
    n = len(sim.log)
    with pytest.raises(ScpiRangeError, match="SupplyLimits"):
        await supply.set_voltage(31.0)
    with pytest.raises(ScpiRangeError):
        await supply.set_current(-0.1)
    with pytest.raises(ScpiRangeError):
        await supply.set_voltage(math.nan)
    assert len(sim.log) == n  # refused before anything was sent


async def test_measure_follows_ohms_law(rig: tuple[ScpiSupply, ScpiSupplySim, PtySupply]) -> None:
    supply, _, _ = rig
    await supply.open()
    await supply.set_current(1.0)
    await supply.set_voltage(10.0)
    await supply.output(True)
    r = await supply.measure()
    assert r.volts == pytest.approx(10.0, abs=0.01)
    assert r.amps == pytest.approx(0.5, abs=0.003)  # 10 V into 20 Ω (CV)
    assert r.ohms == pytest.approx(20.0, rel=0.01)
    assert await supply.output_state() is True


async def test_garbled_replies_are_retried_after_resync(rig: tuple[ScpiSupply, ScpiSupplySim, PtySupply]) -> None:
    supply, sim, _ = rig
    await supply.open()
    await supply.set_voltage(5.0)
    sim.faults.garble_next = 2
    assert await supply.set_voltage(7.0) == pytest.approx(7.0)
    assert supply.stats.garbled >= 1 and supply.stats.resyncs >= 2  # open() resyncs once too
    assert "*CLS" in sim.log[-6:]


async def test_missing_reply_times_out_then_recovers(rig: tuple[ScpiSupply, ScpiSupplySim, PtySupply]) -> None:
    supply, sim, _ = rig
    await supply.open()
    sim.faults.drop_next = 1
    r = await supply.measure()
    assert r.volts == 0.0
    assert supply.stats.timeouts == 1 and supply.stats.retries == 1


async def test_stale_bytes_do_not_answer_the_next_query(rig: tuple[ScpiSupply, ScpiSupplySim, PtySupply]) -> None:
    supply, _, pty_side = rig
    await supply.open()
    await supply.set_voltage(3.0)
    pty_side.inject(b"27.5\n")  # a late reply to something we gave up on
    assert await supply.query_float("VOLT?", 0, 30) == pytest.approx(3.0)


async def test_persistent_silence_gives_up_and_off_still_returns(
    rig: tuple[ScpiSupply, ScpiSupplySim, PtySupply],
) -> None:
    supply, sim, _ = rig
    await supply.open()
    sim.faults.drop_rate = 1.0
    supply.timeout_s = 0.05  # every reply is lost: keep the test short
    with pytest.raises(ScpiTimeout, match="gave up"):
        await supply.measure()
    assert await supply.off() is False  # never raises, reports that it could not confirm
    sim.faults.drop_rate = 0.0
    supply.timeout_s = 0.3
    await supply.output(True)
    assert await supply.off() is True and sim.output is False


async def test_error_queue_is_drained_with_a_bound(rig: tuple[ScpiSupply, ScpiSupplySim, PtySupply]) -> None:
    supply, sim, _ = rig
    await supply.open()
    sim.push_error(-222, "Data out of range")
    sim.push_error(-113, "Undefined header")
    with pytest.raises(ScpiDeviceError) as info:
        await supply.check_errors()
    assert info.value.errors == [(-222, "Data out of range"), (-113, "Undefined header")]
    await supply.check_errors()  # empty again
    for _ in range(100):
        sim.push_error(-222, "Data out of range")
    found = await supply.errors()
    assert len(found) == 20 and found[-1] == (-350, "Queue overflow")  # SCPI queue overflow entry
    sim.faults.garble_rate = 1.0  # a supply that only ever answers garbage
    n = len(sim.log)
    found = await supply.errors()
    assert len(sim.log) - n == supply.error_drain_max


async def test_refused_set_is_seen_by_readback(rig: tuple[ScpiSupply, ScpiSupplySim, PtySupply]) -> None:
    supply, sim, _ = rig
    await supply.open()
    await supply.set_voltage(4.0)
    sim.faults.error_on_next_set = (-222, "Data out of range")
    # the refused set is caught by readback, retried after *CLS, and lands
    assert await supply.set_voltage(9.0) == pytest.approx(9.0)
    assert supply.stats.retries == 1


async def test_concurrent_callers_get_their_own_replies(rig: tuple[ScpiSupply, ScpiSupplySim, PtySupply]) -> None:
    supply, _, _ = rig
    await supply.open()
    await supply.set_current(2.0)
    await supply.set_voltage(12.0)
    await supply.output(True)
    results = await asyncio.gather(*(supply.query_float(q, 0, 30) for q in ["VOLT?", "CURR?", "OUTP?"] * 10))
    assert results == [12.0, 2.0, 1.0] * 10


async def test_session_turns_output_off_on_error(rig: tuple[ScpiSupply, ScpiSupplySim, PtySupply]) -> None:
    supply, sim, _ = rig
    with pytest.raises(RuntimeError, match="operator abort"):
        async with supply.session():
            await supply.set_voltage(5.0)
            await supply.output(True)
            assert sim.output
            raise RuntimeError("operator abort")
    assert sim.output is False


async def test_constant_power_tracks_a_warming_heater(rig: tuple[ScpiSupply, ScpiSupplySim, PtySupply]) -> None:
    supply, sim, _ = rig
    await supply.open()
    loop = ConstantPowerLoop(supply, target_W=5.0)
    await loop.start(r_guess_ohm=18.0)  # the nominal value is a little off
    powers = []
    for k in range(12):
        sim.set_heater_ohm(20.0 * (1 + 0.004 * k))  # a copper-like heater warming 1 K per cycle
        state = await loop.step()
        powers.append(sim.operating_point()[0] * sim.operating_point()[1])
        assert state.resistance_ohm == pytest.approx(sim.heater_ohm / (1 + 0.004) if k else 20.0, rel=0.02)
    # true power (from the emulator's own Ohm's law, after each new setpoint) within 1 % of target
    assert all(abs(p - 5.0) / 5.0 < 0.01 for p in powers[1:])
    assert await loop.stop() and sim.output is False


async def test_constant_power_caps_a_partial_short(rig: tuple[ScpiSupply, ScpiSupplySim, PtySupply]) -> None:
    supply, sim, _ = rig
    await supply.open()
    loop = ConstantPowerLoop(supply, target_W=15.0)
    await loop.start(r_guess_ohm=20.0)
    sim.i_set = 3.0  # the current-limit backstop lost (a front-panel key was pressed)
    sim.set_heater_ohm(8.0)  # partial short: 17.3 V into 8 Ω would be 37 W
    await loop.step()  # sees it and re-solves V = sqrt(P·R)
    assert sim.operating_point()[0] ** 2 / 8.0 <= LIMITS.p_max_W * 1.001


async def test_constant_power_trips_when_the_supply_ignores_it(
    rig: tuple[ScpiSupply, ScpiSupplySim, PtySupply],
) -> None:
    supply, sim, _ = rig
    await supply.open()
    loop = ConstantPowerLoop(supply, target_W=15.0)
    await loop.start(r_guess_ohm=20.0)
    sim.faults.stuck_output_V = 17.3  # the supply's regulator fails: setpoints are accepted but not obeyed
    sim.set_heater_ohm(8.0)  # 17.3 V into 8 Ω is 37 W
    with pytest.raises(PowerLimitExceeded, match="output off"):
        for _ in range(5):
            await loop.step()
    assert sim.output is False
    assert loop._over == loop.trip_count


async def test_over_current_reading_turns_output_off(rig: tuple[ScpiSupply, ScpiSupplySim, PtySupply]) -> None:
    supply, sim, _ = rig
    await supply.open()
    loop = ConstantPowerLoop(supply, target_W=15.0)
    await loop.start(r_guess_ohm=20.0)
    sim.i_set = 5.0  # the current-limit backstop lost
    sim.set_heater_ohm(3.0)  # 17.3 V into 3 Ω: 5 A, beyond the rig's 3 A
    with pytest.raises(ScpiRangeError, match="MEAS:CURR"):
        await loop.step()
    assert sim.output is False


async def test_reset_and_power_on_detection(rig: tuple[ScpiSupply, ScpiSupplySim, PtySupply]) -> None:
    supply, sim, _ = rig
    await supply.open()
    assert await supply.event_status() & ESR_PON == 0
    await supply.set_voltage(5.0)
    await supply.output(True)
    sim.power_cycle()  # the supply browned out: output off, setpoints lost (IEEE 488.2 PON bit set)
    assert await supply.event_status() & ESR_PON
    assert await supply.output_state() is False
    await supply.output(True)
    await supply.reset()
    assert sim.output is False and sim.v_set == 0.0


def test_voltage_setpoint_clamps() -> None:
    lim = SupplyLimits(v_max=24.0, i_max=1.0, p_max_W=10.0)
    assert voltage_setpoint(5.0, 20.0, 0.0, lim) == pytest.approx(10.0)  # sqrt(5 × 20)
    assert voltage_setpoint(50.0, 20.0, 0.0, lim) == pytest.approx(math.sqrt(10.0 * 20.0))  # P_max
    assert voltage_setpoint(9.0, 1000.0, 0.0, lim) == pytest.approx(24.0)  # V_max
    assert voltage_setpoint(9.0, 5.0, 0.0, lim) == pytest.approx(5.0)  # I_max × R
    assert voltage_setpoint(5.0, 20.0, 8.0, lim, max_step_frac=0.1) == pytest.approx(8.8)  # rate limit
    with pytest.raises(ValueError, match="resistance"):
        voltage_setpoint(5.0, math.inf, 0.0, lim)
