"""Frame codec for the front end: ``$KIND,SEQ,field,...*CRC32HEX\\n`` (hardware/PROTOCOL.md §2).

This is the firmware's own copy, written for MicroPython (no dataclasses, no typing
module) and tested under CPython against the daemon's decoder so both sides agree.
CRC-32/ISO-HDLC comes from ``binascii.crc32`` on both.
"""

import binascii

MAX_FRAME_BYTES = 240
SEQ_MODULUS = 65536
_RESERVED = (36, 42, 10, 13)  # $ * LF CR


def crc32(data: bytes) -> int:
    return binascii.crc32(data) & 0xFFFFFFFF


def encode(kind: str, seq: int, fields: list) -> bytes:
    """Build one frame; raises ValueError if a field holds a reserved or non-ASCII byte."""
    body = ",".join([kind, str(seq % SEQ_MODULUS)] + [str(f) for f in fields]).encode()
    for b in body:
        if b in _RESERVED or b < 32 or b > 126:
            raise ValueError("reserved byte in frame body")
    frame = b"$" + body + b"*" + ("%08X" % crc32(body)).encode() + b"\n"  # noqa: UP031 (MicroPython-safe)
    if len(frame) > MAX_FRAME_BYTES:
        raise ValueError("frame too long")
    return frame


def decode(line: bytes) -> tuple:
    """(kind, seq, fields) for one line without its LF; raises ValueError saying why."""
    if line.endswith(b"\r"):
        line = line[:-1]
    if not line.startswith(b"$"):
        raise ValueError("no start byte")
    star = line.rfind(b"*")
    if star < 0 or len(line) - star != 9:
        raise ValueError("no CRC field")
    body = line[1:star]
    if line[star + 1 :] != ("%08X" % crc32(body)).encode():  # noqa: UP031
        raise ValueError("CRC mismatch")
    for b in body:
        if b < 32 or b > 126:
            raise ValueError("non-ASCII body")
    parts = body.decode().split(",")
    if len(parts) < 2 or not parts[0] or not parts[1].isdigit():
        raise ValueError("bad kind or sequence")
    seq = int(parts[1])
    if seq >= SEQ_MODULUS:
        raise ValueError("sequence out of range")
    return parts[0], seq, parts[2:]


class LineBuffer:
    """Collects bytes into lines; an over-long line is dropped and counted, never grown without bound."""

    def __init__(self, limit: int = MAX_FRAME_BYTES) -> None:
        self.limit = limit
        self.buf = bytearray()
        self.overflows = 0
        self._discarding = False

    def feed(self, data: bytes) -> list:
        lines = []
        for b in data:
            if b == 10:
                if not self._discarding:
                    lines.append(bytes(self.buf))
                self.buf = bytearray()
                self._discarding = False
            elif self._discarding:
                continue
            elif b == 36 and self.buf:
                # a new start byte: whatever came before was cut short; keep only the new frame
                self.buf = bytearray(b"$")
                self.overflows += 1
            else:
                self.buf.append(b)
                if len(self.buf) > self.limit:
                    self.buf = bytearray()
                    self._discarding = True
                    self.overflows += 1
        return lines
