"""hardware/PROTOCOL.md stays true: every worked frame decodes, the replayed session is what the firmware
really answers, and the tables agree with the code on both sides of the wire."""

from __future__ import annotations

import re

import pytest
from firmware_path import FakeRig
from probefw import device as fw_device
from probefw import limits as fw_limits
from probefw.device import FrontEnd

from linerig.daemon import resources
from linerig.daemon.rig import its90, messages
from linerig.daemon.rig.framing import Frame, crc32, decode_line

DOC = resources.hardware_doc("PROTOCOL.md")
COMMAND_FIELDS = {"I": 0, "C": 4, "P": 2, "O": 0, "L": 1, "Q": 0}


def _blocks() -> list[tuple[str, list[tuple[str, bytes]]]]:
    """(info string, [(direction, frame line without LF)]) for every ```frames block."""
    blocks: list[tuple[str, list[tuple[str, bytes]]]] = []
    current: list[tuple[str, bytes]] | None = None
    for line in DOC.read_text(encoding="utf-8").splitlines():
        if current is None and line.startswith("```frames"):
            current = []
            blocks.append((line[3:].strip(), current))
        elif current is not None and line.startswith("```"):
            current = None
        elif current is not None and line.strip():
            direction, _, frame = line.partition(" ")
            assert direction in "<>" and direction, f"frame lines start with < or >: {line!r}"
            current.append((direction, frame.encode("ascii")))
    return blocks


BLOCKS = _blocks()


def test_the_document_has_worked_examples() -> None:
    assert len(BLOCKS) >= 3
    assert any(info == "frames replay" for info, _ in BLOCKS)
    kinds = {decode_line(f).kind for _, lines in BLOCKS for _, f in lines}
    assert {"B", "D", "A", "T", "S", "F", "I", "C", "P", "O", "L", "Q"} <= kinds


@pytest.mark.parametrize("block", range(len(BLOCKS)))
def test_every_frame_decodes_and_means_something(block: int) -> None:
    _, lines = BLOCKS[block]
    last_dev_seq: int | None = None
    last_cmd: Frame | None = None
    for direction, raw in lines:
        frame = decode_line(raw)  # CRC, framing and sequence syntax
        if direction == "<":
            msg = messages.parse_message(frame)
            assert msg is not None, raw
            if last_dev_seq is not None:
                assert frame.seq == (last_dev_seq + 1) % 65536, f"device seq must count up by one: {raw!r}"
            last_dev_seq = frame.seq
            if isinstance(msg, messages.Ack):
                assert last_cmd is not None and msg.cmd_seq == last_cmd.seq, raw
                if last_cmd.kind not in COMMAND_FIELDS:
                    assert msg.detail == "UNKNOWN"
            if isinstance(msg, messages.Sample):
                assert all(c.fault in (0, messages.FAULT_OPEN) for c in msg.channels)
        else:
            if frame.kind in COMMAND_FIELDS:
                assert len(frame.fields) == COMMAND_FIELDS[frame.kind], raw
            last_cmd = frame


def test_replayed_session_matches_the_firmware_byte_for_byte() -> None:
    _, lines = next(b for b in BLOCKS if b[0] == "frames replay")
    boot = messages.parse_message(decode_line(lines[0][1]))
    ident = next(
        m for d, f in lines if d == "<" and isinstance(m := messages.parse_message(decode_line(f)), messages.Identity)
    )
    assert isinstance(boot, messages.Boot)
    out = bytearray()
    fe = FrontEnd(FakeRig(n_channels=ident.n_channels), out.extend, boot.boot_id, serial=ident.serial)
    fe.start(0, boot.reset_cause)
    produced: list[bytes] = []
    expected: list[bytes] = []
    for direction, raw in lines:
        if direction == ">":
            fe.receive(raw + b"\n", 0)
        else:
            expected.append(raw)
        produced += [f for f in bytes(out).split(b"\n") if f]
        out.clear()
    assert produced == expected


def test_crc_statements() -> None:
    text = DOC.read_text(encoding="utf-8")
    # CRC-32/ISO-HDLC check value (Greg Cook's CRC catalogue): 0xCBF43926
    assert "`CBF43926`" in text and crc32(b"123456789") == 0xCBF43926
    m = re.search(r"the body `I,0` \(bytes `49 2C 30`\) has CRC `([0-9A-F]{8})`", text)
    assert m and int(m.group(1), 16) == crc32(b"I,0")


def test_fault_bit_table_matches_both_sides() -> None:
    text = DOC.read_text(encoding="utf-8")
    table = dict(re.findall(r"^\| 0x(0[1248]) \| (\w+) \|", text, flags=re.M))
    assert table == {"01": "OPEN", "02": "RANGE", "04": "CJ", "08": "STALE"}
    for hexbits, name in table.items():
        assert getattr(messages, f"FAULT_{name}") == int(hexbits, 16) == getattr(fw_device, f"FAULT_{name}")


def test_limits_table_matches_the_firmware() -> None:
    text = DOC.read_text(encoding="utf-8")

    def row(label: str) -> str:
        m = re.search(rf"^\| {re.escape(label)} \| (.+) \|$", text, flags=re.M)
        assert m, label
        return m.group(1)

    assert row("Lease cap") == f"{fw_limits.LEASE_MAX_MS} ms"
    assert row("Probe temperature, any valid channel").startswith(f"{fw_limits.T_PROBE_MAX_C:g} °C")
    assert f"below {fw_limits.T_PROBE_MAX_C - fw_limits.T_REARM_MARGIN_K:g} °C" in row(
        "Probe temperature, any valid channel"
    )
    assert row("Requested power") == f"{fw_limits.POWER_MAX_W_PER_M:g} W/m, and {fw_limits.POWER_MAX_W:g} W total"
    assert row("Continuous on-time") == f"{fw_limits.ON_TIME_MAX_MS // 3_600_000} h"
    assert row("Supply low") == f"{fw_limits.SUPPLY_MIN_V:.1f} V"
    assert fw_device.RATES_HZ == (0.5, 1.0, 2.0, 5.0, 10.0)
    assert "`0.5 1 2 5 10`" in text and "`E J K N T`" in text
    assert set(fw_device.TC_TYPES) <= set(its90.TYPES)  # the host can convert every type the device accepts


def test_raw_emf_example_is_physically_consistent() -> None:
    # §10.3: type T, cold junction 21.5 °C; -130.83 µV must be 18.25 °C by the ITS-90 reference function
    # (NIST Monograph 175 coefficients in daemon/rig/its90.py)
    _, lines = BLOCKS[-1]
    sample = next(
        m for d, f in lines if d == "<" and isinstance(m := messages.parse_message(decode_line(f)), messages.Sample)
    )
    t = its90.temperature_from_emf(sample.channels[0].value, sample.cj_C, "T", refine=True)
    assert t == pytest.approx(18.25, abs=0.001)
