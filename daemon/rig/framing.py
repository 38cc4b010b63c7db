"""Checked frames on a byte stream: ``$KIND,SEQ,field,...*CRC\\n``.

The decoder is a pure incremental parser: it imports no I/O, so the same code
reads a live port, a capture file or fuzzed bytes. Anything that is not a whole,
CRC-correct frame is counted and skipped; the parser resynchronises at the next
``$``. CRC-32/ISO-HDLC (zlib's), whose check value over b"123456789" is
0xCBF43926, is built into both CPython and MicroPython.
"""

from __future__ import annotations

import binascii
from dataclasses import dataclass, field

MAX_FRAME_BYTES = 240
SEQ_MODULUS = 1 << 16


class FrameError(ValueError):
    """A frame could not be built (a field holds a byte the wire cannot carry)."""


@dataclass(frozen=True)
class Frame:
    kind: str
    seq: int
    fields: tuple[str, ...]


def crc32(data: bytes) -> int:
    return binascii.crc32(data) & 0xFFFFFFFF


def encode_frame(kind: str, seq: int, fields: tuple[str, ...] | list[str] = ()) -> bytes:
    body = ",".join([kind, str(seq % SEQ_MODULUS), *fields])
    if any(c in body for c in "$*") or not (body.isascii() and body.isprintable()):
        raise FrameError(f"frame {kind!r} holds a reserved or non-ASCII character: {body!r}")
    raw = body.encode("ascii")
    frame = b"$" + raw + b"*" + b"%08X" % crc32(raw) + b"\n"
    if len(frame) > MAX_FRAME_BYTES:
        raise FrameError(f"frame {kind!r} is {len(frame)} bytes; the limit is {MAX_FRAME_BYTES}")
    return frame


def decode_line(line: bytes) -> Frame:
    """Decode one line (without its terminator) or raise ValueError saying why."""
    if not line.startswith(b"$"):
        raise ValueError("no start byte")
    star = line.rfind(b"*")
    if star < 0 or len(line) - star != 9:
        raise ValueError("no CRC field")
    body, crc_text = line[1:star], line[star + 1 :]
    if crc_text != b"%08X" % crc32(body):
        raise ValueError("CRC mismatch")
    try:
        text = body.decode("ascii")
    except UnicodeDecodeError:
        raise ValueError("non-ASCII body") from None
    if not text.isprintable():
        raise ValueError("control byte in body")
    parts = text.split(",")
    if len(parts) < 2 or not parts[0] or not parts[1].isdigit():
        raise ValueError("bad kind or sequence")
    seq = int(parts[1])
    if seq >= SEQ_MODULUS:
        raise ValueError("sequence out of range")
    return Frame(parts[0], seq, tuple(parts[2:]))


@dataclass
class LinkCounters:
    """What the decoder threw away, for the safety supervisor and the run log."""

    frames: int = 0
    bad_frames: int = 0
    skipped_bytes: int = 0
    seq_gaps: int = 0
    lost_frames: int = 0
    duplicates: int = 0


@dataclass
class FrameDecoder:
    """Feed bytes, get frames. Tracks the peer's sequence numbers."""

    counters: LinkCounters = field(default_factory=LinkCounters)
    track_sequence: bool = True
    """False on the device side, which must see a repeated command to answer it again (PROTOCOL.md §5)."""
    _buf: bytearray = field(default_factory=bytearray)
    _last_seq: int | None = None

    def feed(self, data: bytes) -> list[Frame]:
        self._buf.extend(data)
        out: list[Frame] = []
        while True:
            start = self._buf.find(b"$")
            if start < 0:
                self.counters.skipped_bytes += len(self._buf)
                self._buf.clear()
                break
            if start:
                self.counters.skipped_bytes += start
                del self._buf[:start]
            end = self._buf.find(b"\n")
            nxt = self._buf.find(b"$", 1)
            if 0 <= nxt < (end if end >= 0 else len(self._buf)):
                # a new start byte before the terminator: the first frame was cut short
                self.counters.bad_frames += 1
                self.counters.skipped_bytes += nxt
                del self._buf[:nxt]
                continue
            if end < 0:
                if len(self._buf) > MAX_FRAME_BYTES:
                    self.counters.bad_frames += 1
                    self.counters.skipped_bytes += len(self._buf)
                    self._buf.clear()
                break
            line = bytes(self._buf[:end]).rstrip(b"\r")
            del self._buf[: end + 1]
            if len(line) + 1 > MAX_FRAME_BYTES:
                self.counters.bad_frames += 1
                self.counters.skipped_bytes += len(line) + 1
                continue
            try:
                frame = decode_line(line)
            except ValueError:
                self.counters.bad_frames += 1
                self.counters.skipped_bytes += len(line) + 1
                continue
            if not self.track_sequence or self._accept_seq(frame.seq):
                self.counters.frames += 1
                out.append(frame)
        return out

    def _accept_seq(self, seq: int) -> bool:
        last = self._last_seq
        if last is not None:
            step = (seq - last) % SEQ_MODULUS
            if step == 0:
                self.counters.duplicates += 1
                return False
            if step != 1:
                self.counters.seq_gaps += 1
                self.counters.lost_frames += step - 1 if step < SEQ_MODULUS // 2 else 0
        self._last_seq = seq
        return True

    def reset_sequence(self) -> None:
        """Forget the peer's sequence (after its reboot)."""
        self._last_seq = None
