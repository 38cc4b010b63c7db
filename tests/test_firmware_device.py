"""Front-end firmware, CPython only: what needs the daemon's own code. Every frame the firmware sends decodes
with the daemon's decoder, the example probe profiles work with it, and the shared board model's thermocouple
table is the ITS-90 reference function. The command set itself is asserted under both interpreters in
tests/firmware/cases_device.py."""

from __future__ import annotations

from pathlib import Path

import pytest
from firmware_path import FW_DIR, FakeRig, Harness, board

from linerig.daemon.probe import load_probe_profile
from linerig.daemon.rig import its90


def test_every_frame_the_firmware_sends_decodes_on_the_host() -> None:
    h = Harness(rig=FakeRig(heater_short_ohm=None))
    h.send("I")
    h.configure(rate_hz=10)
    h.send("P", 5.0, 1000)
    h.run(3000, renew_every_ms=200)
    h.send("Q")
    h.run(2000)
    kinds = {k for _, k, _ in h.messages}
    assert {"B", "D", "A", "S", "T", "F"} <= kinds
    (check,) = h.checks  # firmware_path.DaemonCheck, the daemon's own decoder
    c = check.decoder.counters
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
    assert h.ack(h.send("P", 20.0, 1000)).ok
    h.run(2000, renew_every_ms=200)
    assert rig.true_power_W() == pytest.approx(20.0 * probe.heater_length_mm / 1000.0, rel=0.01)
    assert not h.of("F")


def test_board_thermocouple_table_is_the_its90_reference_function() -> None:
    # The shared board model (it must run on MicroPython, without numpy) tabulates type K every 10 °C; the
    # table must be the ITS-90 reference function (NIST Monograph 175, via daemon/rig/its90.py), and linear
    # interpolation between its points must stay within 1.2 µV (0.03 K) of it.
    for i, uv in enumerate(board.K_TABLE_UV):
        assert uv == pytest.approx(its90.emf_uV(board.K_TABLE_T0 + 10.0 * i, "K"), abs=0.006)
    for t in [board.K_TABLE_T0 + 0.37 * k for k in range(540)]:
        assert board.emf_k_uV(t) == pytest.approx(float(its90.emf_uV(t, "K")), abs=1.2)
