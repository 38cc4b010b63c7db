"""Meaning of the front-end frames (protocol version 1, see hardware/PROTOCOL.md).

Frames are plain text so that a person with a terminal can read them; this module
turns their fields into typed values and back. Kinds sent by the host are
upper-case words of one letter that the device never sends, and vice versa.
"""

from __future__ import annotations

from dataclasses import dataclass

from linerig.daemon.rig.framing import Frame

PROTOCOL_VERSION = 1

# host -> device
CMD_IDENTIFY = "I"
CMD_CONFIGURE = "C"
CMD_POWER = "P"  # set heater power per metre and arm it under a lease
CMD_OFF = "O"
CMD_LEASE = "L"
CMD_STATUS = "Q"

# device -> host
MSG_BOOT = "B"
MSG_IDENTITY = "D"
MSG_SAMPLE = "S"
MSG_ACK = "A"
MSG_STATUS = "T"
MSG_FAULT = "F"

# per-channel fault bits (same meaning in firmware and simulator)
FAULT_OPEN = 0x01  # open thermocouple
FAULT_RANGE = 0x02  # reading outside the converter's range
FAULT_CJ = 0x04  # cold-junction sensor fault
FAULT_STALE = 0x08  # converter did not update


class MessageError(ValueError):
    """A frame with a known kind whose fields do not parse."""


@dataclass(frozen=True)
class ChannelValue:
    value: float  # °C, or µV when the channel is configured for raw emf
    fault: int


@dataclass(frozen=True)
class Sample:
    seq: int
    device_ms: int
    cj_C: float
    heater_V: float
    heater_A: float
    supply_V: float
    heater_on: bool
    channels: tuple[ChannelValue, ...]


@dataclass(frozen=True)
class Boot:
    boot_id: str
    firmware: str
    protocol: int
    reset_cause: str


@dataclass(frozen=True)
class Identity:
    model: str
    serial: str
    firmware: str
    protocol: int
    n_channels: int
    boot_id: str


@dataclass(frozen=True)
class Ack:
    cmd_seq: int
    ok: bool
    detail: str


@dataclass(frozen=True)
class Status:
    heater_on: bool
    power_set_W_per_m: float
    lease_left_ms: int
    rate_hz: float
    mode: str


@dataclass(frozen=True)
class Fault:
    code: str
    detail: str


Message = Sample | Boot | Identity | Ack | Status | Fault


def _need(frame: Frame, n: int, at_least: bool = False) -> tuple[str, ...]:
    f = frame.fields
    if (len(f) < n) if at_least else (len(f) != n):
        raise MessageError(f"{frame.kind} frame has {len(f)} fields, expected {'>= ' if at_least else ''}{n}")
    return f


def parse_message(frame: Frame) -> Message | None:
    """Typed message for a device frame, None for an unknown kind (newer firmware)."""
    try:
        return _parse(frame)
    except (ValueError, IndexError) as exc:
        if isinstance(exc, MessageError):
            raise
        raise MessageError(f"{frame.kind} frame fields do not parse: {exc}") from None


def _parse(frame: Frame) -> Message | None:
    k = frame.kind
    if k == MSG_SAMPLE:
        f = _need(frame, 6, at_least=True)
        rest = f[6:]
        if len(rest) % 2:
            raise MessageError("S frame channel fields must come in value,fault pairs")
        chans = tuple(ChannelValue(float(rest[i]), int(rest[i + 1], 16)) for i in range(0, len(rest), 2))
        return Sample(frame.seq, int(f[0]), float(f[1]), float(f[2]), float(f[3]), float(f[4]), f[5] == "1", chans)
    if k == MSG_BOOT:
        f = _need(frame, 4)
        return Boot(f[0], f[1], int(f[2]), f[3])
    if k == MSG_IDENTITY:
        f = _need(frame, 6)
        return Identity(f[0], f[1], f[2], int(f[3]), int(f[4]), f[5])
    if k == MSG_ACK:
        f = _need(frame, 3)
        return Ack(int(f[0]), f[1] == "OK", f[2])
    if k == MSG_STATUS:
        f = _need(frame, 5)
        return Status(f[0] == "1", float(f[1]), int(f[2]), float(f[3]), f[4])
    if k == MSG_FAULT:
        f = _need(frame, 2)
        return Fault(f[0], f[1])
    return None


def sample_fields(s: Sample) -> list[str]:
    out = [str(s.device_ms), f"{s.cj_C:.4f}", f"{s.heater_V:.4f}", f"{s.heater_A:.5f}", f"{s.supply_V:.3f}",
           "1" if s.heater_on else "0"]
    for c in s.channels:
        out += [f"{c.value:.4f}", f"{c.fault:02X}"]
    return out
