"""Front-end firmware: the command set of PROTOCOL.md, read back with the daemon's own decoder so both
sides of the wire are proven to agree."""

from __future__ import annotations

import itertools
from pathlib import Path

import pytest
from firmware_path import FW_DIR, FakeRig, Harness

from linerig.daemon.probe import load_probe_profile
from linerig.daemon.rig.messages import Ack, Boot, Identity, Sample, Status


def test_boot_frame_first_and_heater_off() -> None:
    h = Harness(reset_cause="WATCHDOG")
    assert h.messages[0][1] == "B"
    boot = h.messages[0][2]
    assert isinstance(boot, Boot)
    assert boot == Boot("1A2B3C4D", "1.0.0", 1, "WATCHDOG")
    assert h.rig.duty_log == [(0, 0.0)]


def test_identify_then_ack() -> None:
    h = Harness(rig=FakeRig(n_channels=4))
    got = h.send("I", seq=41)
    assert [k for _, k, _ in got] == ["D", "A"]
    ident = got[0][2]
    assert isinstance(ident, Identity)
    assert (ident.protocol, ident.n_channels, ident.boot_id, ident.serial) == (1, 4, "1A2B3C4D", "TEST0001")
    assert got[1][2] == Ack(41, True, "")


def test_unconfigured_device_sends_no_samples_and_refuses_power() -> None:
    h = Harness()
    h.run(2000)
    assert h.of("S") == []
    ack = h.send("P", 5.0, 1000)[-1][2]
    assert isinstance(ack, Ack) and ack.detail == "NOTCONFIGURED"


def test_samples_at_the_configured_rate_and_without_gaps() -> None:
    for rate, expect_ms in ((10, 100), (2, 500), (0.5, 2000)):
        h = Harness()
        h.configure(rate_hz=rate)
        h.run(20_000)
        samples = [m for _, _, m in h.of("S") if isinstance(m, Sample)]
        times = [s.device_ms for s in samples][1:]  # the first slot is served at the first loop pass
        assert {b - a for a, b in itertools.pairwise(times)} == {expect_ms}
        assert len(samples) in (20_000 // expect_ms, 20_000 // expect_ms + 1)
        assert all(len(s.channels) == 3 for s in samples)
    c = h.decoder.counters
    assert (c.bad_frames, c.seq_gaps, c.duplicates) == (0, 0, 0)


def test_raw_emf_mode_reports_microvolts() -> None:
    rig = FakeRig(ambient_C=40.0, cj_C=20.0)
    h = Harness(rig=rig)
    h.configure(tc_type="K", mode="E")
    h.run(500)
    s = [m for _, _, m in h.of("S") if isinstance(m, Sample)][-1]
    # type K, 40 °C against a 20 °C cold junction: E(40) - E(20) = 1.6118 - 0.7981 mV (NIST Monograph 175)
    assert abs(s.channels[0].value - (1611.8 - 798.1)) < 0.2
    assert s.cj_C == 20.0


def test_bad_configuration_is_refused() -> None:
    h = Harness()
    for fields in (("3", "K", "T", "100"), ("10", "X", "T", "100"), ("10", "K", "Q", "100"),
                   ("10", "K", "T", "0"), ("10", "K", "T"), ("ten", "K", "T", "100"), ("nan", "K", "T", "1")):
        ack = h.send("C", *fields)[-1][2]
        assert isinstance(ack, Ack) and ack.detail == "BADARG", fields
    ack = h.send("Z")[-1][2]
    assert isinstance(ack, Ack) and ack.detail == "UNKNOWN"


def test_reconfiguring_while_heating_is_refused() -> None:
    h = Harness()
    h.configure()
    h.send("P", 5.0, 1000)
    ack = h.send("C", "1", "K", "T", "100")[-1][2]
    assert isinstance(ack, Ack) and ack.detail == "BUSY"


def test_duplicate_command_is_reacked_not_reapplied() -> None:
    h = Harness()
    h.configure()
    first = h.send("P", 5.0, 1000, seq=100)[-1][2]
    assert isinstance(first, Ack) and first.ok and h.rig.duty > 0
    h.run(1500)  # the ACK was "lost", the host is slow to retry, and meanwhile the lease lapses
    assert h.rig.duty == 0.0
    n = len(h.rig.duty_log)
    retry = h.send("P", 5.0, 1000, seq=100)  # the same frame again, inside the 2 s retry window
    assert [k for _, k, _ in retry] == ["A"] and retry[0][2] == first  # the same answer, switch-on time included
    assert h.rig.duty == 0.0 and len(h.rig.duty_log) == n  # answered, not re-applied: no re-arming
    h.send("O", seq=101)
    again = h.send("O", seq=101)
    assert [k for _, k, _ in again] == ["A"] and again[0][2] == Ack(101, True, "")
    # queries are always answered in full
    assert [k for _, k, _ in h.send("Q", seq=102)] == ["T", "A"]
    assert [k for _, k, _ in h.send("Q", seq=102)] == ["T", "A"]


def test_a_retry_after_the_window_or_with_new_fields_is_a_new_command() -> None:
    h = Harness()
    h.configure()
    h.send("P", 5.0, 1000, seq=7)
    h.run(2500)  # lease lapsed, and outside the 2 s retry window
    assert h.rig.duty == 0.0
    h.send("P", 5.0, 1000, seq=7)  # a restarted host reusing seq 7 is obeyed
    assert h.rig.duty > 0
    h.send("P", 4.0, 1000, seq=7)  # same seq, different power: a new command
    assert h.fe.power_set_W_per_m == 4.0


def test_status_frame() -> None:
    h = Harness()
    h.configure(rate_hz=5, mode="T")
    got = h.send("Q", seq=9)
    assert [k for _, k, _ in got] == ["T", "A"]
    assert got[0][2] == Status(False, 0.0, 0, 5.0, "T")


def test_off_is_always_accepted() -> None:
    h = Harness()
    ack = h.send("O")[-1][2]
    assert isinstance(ack, Ack) and ack.ok
    h.configure()
    h.send("P", 5.0, 1000)
    assert h.rig.duty > 0
    h.send("O")
    assert h.rig.duty == 0.0 and not h.fe.heater_on


def test_every_frame_the_firmware_sends_decodes_on_the_host() -> None:
    rig = FakeRig(heater_short_ohm=None)
    h = Harness(rig=rig)
    h.send("I")
    h.configure(rate_hz=10)
    h.send("P", 5.0, 1000)
    h.run(3000, renew_every_ms=200)
    h.send("Q")
    h.run(2000)
    kinds = {k for _, k, _ in h.messages}
    assert {"B", "D", "A", "S", "T", "F"} <= kinds
    assert all(m is not None for _, _, m in h.messages)
    c = h.decoder.counters
    assert c.frames == len(h.messages) and (c.bad_frames, c.seq_gaps, c.skipped_bytes) == (0, 0, 0)


@pytest.mark.parametrize("profile", sorted((FW_DIR.parent / "probes").glob("*.toml")), ids=lambda p: p.stem)
def test_example_probe_profiles_work_with_the_firmware(profile: Path) -> None:
    # Each example probe, driven from a 12.6 V battery at 20 W/m: the firmware accepts its configuration and
    # holds the power (true power from the simulated board's Ohm's law).
    probe = load_probe_profile(profile)
    assert probe.heater_length_mm is not None and probe.heater_resistance_ohm is not None
    rig = FakeRig(n_channels=len(probe.sensors), r0_ohm=probe.heater_resistance_ohm, v_start=12.6, v_end=12.6)
    h = Harness(rig=rig)
    h.configure(rate_hz=1, tc_type=probe.thermocouple or "T", length_mm=probe.heater_length_mm)
    ack = h.send("P", 20.0, 1000)[-1][2]
    assert isinstance(ack, Ack) and ack.ok
    h.run(2000, renew_every_ms=200)
    assert rig.true_power_W() == pytest.approx(20.0 * probe.heater_length_mm / 1000.0, rel=0.01)
    assert not h.of("F")
