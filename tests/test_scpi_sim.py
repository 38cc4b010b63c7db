"""The SCPI supply emulator on its own: command syntax, CV/CC physics, error queue and fault injection.

Behaviour is checked against SCPI-1999 and IEEE 488.2 conventions (short/long keyword forms, ';' message
units, SYST:ERR? FIFO reading '0,"No error"' when empty, -350 "Queue overflow" as the last entry, *CLS
clearing the queue and *RST not, *ESR? bit 7 = power on, read-to-clear) and against Ohm's law.
"""

from __future__ import annotations

import math

import pytest

from linerig.daemon.sim.scpi_sim import ESR_CME, ESR_EXE, ESR_PON, QUEUE_DEPTH, ScpiSupplySim


def ask(sim: ScpiSupplySim, cmd: str) -> str:
    out = sim.handle(cmd.encode())
    assert len(out) == 1 and out[0].endswith(b"\n"), (cmd, out)
    return out[0].decode("ascii").strip()


class Recorder:
    def __init__(self) -> None:
        self.calls: list[tuple[float, bool]] = []

    def set_heater_electrical(self, volts: float, on: bool) -> None:
        self.calls.append((volts, on))


def test_identity_and_keyword_forms() -> None:
    sim = ScpiSupplySim()
    assert ask(sim, "*IDN?") == "LINERIG,SIMPSU-3005,SIM000042,1.04"
    sim.handle(b"SOURce:VOLTage 7.25")
    assert ask(sim, "volt?") == "7.250"  # keywords are case-insensitive
    sim.handle(b":SOUR:CURR 0.5")
    assert ask(sim, "CURRENT?") == "0.500"
    assert ask(sim, "*OPC?") == "1"
    assert sim.handle(b"VOLT 3") == []  # settings owe no reply


def test_several_message_units_in_one_line() -> None:
    sim = ScpiSupplySim()
    assert sim.handle(b"VOLT 12;CURR 0.5;:OUTP ON") == []
    assert ask(sim, "VOLT?;CURR?;OUTP?") == "12.000;0.500;1"


def test_constant_voltage_and_constant_current() -> None:
    sim = ScpiSupplySim(heater_ohm=20.0, noise_V=0.0, noise_A=0.0)
    sim.handle(b"VOLT 10;CURR 1;OUTP ON")
    assert sim.operating_point() == (10.0, 0.5, "CV")  # Ohm's law: 10 V / 20 Ω
    sim.handle(b"CURR 0.25")
    assert sim.operating_point() == (5.0, 0.25, "CC")  # the current limit sets V = I·R
    assert float(ask(sim, "MEAS:VOLT?")) == 5.0 and float(ask(sim, "MEAS:CURR?")) == 0.25
    sim.set_heater_ohm(math.inf)
    assert sim.operating_point() == (10.0, 0.0, "CV")  # open heater
    sim.handle(b"OUTP OFF")
    assert sim.operating_point() == (0.0, 0.0, "OFF")
    assert float(ask(sim, "MEAS:VOLT?")) == 0.0


def test_readback_noise_is_small_and_seeded() -> None:
    a = ScpiSupplySim(seed=3)
    b = ScpiSupplySim(seed=3)
    for s in (a, b):
        s.handle(b"VOLT 10;CURR 1;OUTP ON")
    va = [float(ask(a, "MEAS:VOLT?")) for _ in range(200)]
    vb = [float(ask(b, "MEAS:VOLT?")) for _ in range(200)]
    assert va == vb
    mean = sum(va) / len(va)
    assert abs(mean - 10.0) < 0.001 and 0.0005 < max(abs(v - 10.0) for v in va) < 0.02


def test_error_queue_fifo_overflow_and_clear() -> None:
    sim = ScpiSupplySim()
    assert ask(sim, "SYST:ERR?") == '+0,"No error"'
    sim.handle(b"FOO 1")
    sim.handle(b"VOLT 99")
    sim.handle(b"VOLT abc")
    sim.handle(b"OUTP")
    assert ask(sim, "SYST:ERR?") == '-113,"Undefined header"'
    assert ask(sim, "SYST:ERR?") == '-222,"Data out of range"'
    assert ask(sim, "SYST:ERR?") == '-104,"Data type error"'
    assert ask(sim, "SYST:ERR?") == '-109,"Missing parameter"'
    assert ask(sim, "SYST:ERR?") == '+0,"No error"'
    for _ in range(50):
        sim.handle(b"NOPE")
    entries = [ask(sim, "SYST:ERR?") for _ in range(QUEUE_DEPTH + 1)]
    assert entries[QUEUE_DEPTH - 1] == '-350,"Queue overflow"' and entries[-1] == '+0,"No error"'
    sim.handle(b"NOPE")
    sim.handle(b"*RST")
    assert ask(sim, "SYST:ERR?").startswith("-113")  # *RST does not clear the queue
    sim.handle(b"NOPE")
    sim.handle(b"*CLS")
    assert ask(sim, "SYST:ERR?") == '+0,"No error"'  # *CLS does


def test_event_status_register() -> None:
    sim = ScpiSupplySim()
    assert int(ask(sim, "*ESR?")) & ESR_PON
    assert int(ask(sim, "*ESR?")) == 0  # read clears it
    sim.handle(b"NOPE")
    sim.handle(b"VOLT 99")
    assert int(ask(sim, "*ESR?")) == ESR_CME | ESR_EXE
    sim.handle(b"VOLT 5;OUTP ON")
    sim.power_cycle()
    assert not sim.output and sim.v_set == 0.0
    assert int(ask(sim, "*ESR?")) & ESR_PON


def test_reset_turns_output_off() -> None:
    sim = ScpiSupplySim()
    sim.handle(b"VOLT 5;OUTP 1")
    assert ask(sim, "OUTP?") == "1"
    sim.handle(b"*RST")
    assert ask(sim, "OUTP?") == "0" and ask(sim, "VOLT?") == "0.000"


def test_load_hook_sees_every_change() -> None:
    load = Recorder()
    sim = ScpiSupplySim(heater_ohm=10.0, load=load)
    sim.handle(b"CURR 2;VOLT 6")
    sim.handle(b"OUTP ON")
    sim.handle(b"VOLT 8")
    sim.set_heater_ohm(2.0)  # now current-limited: 2 A × 2 Ω = 4 V
    sim.handle(b"OUTP OFF")
    assert load.calls[-4:] == [(6.0, True), (8.0, True), (4.0, True), (0.0, False)]


def test_fault_injection() -> None:
    sim = ScpiSupplySim(seed=5)
    sim.faults.drop_next = 1
    assert sim.handle(b"*IDN?") == []
    sim.faults.garble_next = 3
    garbled = [sim.handle(b"*IDN?")[0] for _ in range(3)]
    for g in garbled:
        assert g.endswith(b"\n")
        with pytest.raises((UnicodeDecodeError, AssertionError)):
            text = g.decode("ascii")
            assert text.strip() == "LINERIG,SIMPSU-3005,SIM000042,1.04"
    assert ask(sim, "*IDN?").startswith("LINERIG")
    sim.faults.drop_rate = 0.5
    got = sum(len(sim.handle(b"*OPC?")) for _ in range(400))
    assert 150 < got < 250
    sim.faults.drop_rate = 0.0
    sim.faults.error_on_next_set = (-222, "Data out of range")
    sim.handle(b"VOLT 4")
    assert sim.v_set == 0.0 and ask(sim, "SYST:ERR?") == '-222,"Data out of range"'
    sim.handle(b"VOLT 4")
    assert sim.v_set == 4.0
    sim.handle(b"\xff\xfe")
    assert ask(sim, "SYST:ERR?") == '-101,"Invalid character"'
