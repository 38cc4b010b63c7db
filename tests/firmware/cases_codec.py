"""Frame codec (PROTOCOL.md §3), shared by both interpreters. The CPython-only module adds property tests
against the daemon's own decoder (tests/test_firmware_codec.py)."""

from check import raises
from probefw import codec


def test_crc_check_value() -> None:
    # CRC-32/ISO-HDLC check value over b"123456789" is 0xCBF43926 (Greg Cook, "Catalogue of parametrised CRC
    # algorithms"; the same value zlib documents for crc32).
    assert codec.crc32(b"123456789") == 0xCBF43926


def test_protocol_worked_frame() -> None:
    # PROTOCOL.md §3: the body I,0 has CRC 9FE2345F
    assert codec.encode("I", 0, []) == b"$I,0*9FE2345F\n"
    assert codec.decode(b"$I,0*9FE2345F") == ("I", 0, [])
    assert codec.decode(b"$I,0*9FE2345F\r") == ("I", 0, [])


def test_round_trip_over_kinds_sequences_and_fields() -> None:
    fields_sets = ([], [""], ["12.5", "1000"], ["a b", "", "~!#%&()"], ["x"] * 8)
    for kind in "BDSATFICPOLQ":
        for seq in (0, 1, 65535, 65536, 200_000):
            for fields in fields_sets:
                frame = codec.encode(kind, seq, fields)
                assert frame.endswith(b"\n") and frame.startswith(b"$")
                assert codec.decode(frame[:-1]) == (kind, seq % 65536, fields)


def test_every_single_byte_corruption_is_rejected() -> None:
    frame = codec.encode("P", 4321, ["12.5", "1000"])[:-1]
    for i in range(len(frame)):
        for byte in (0x00, 0x20, 0x24, 0x2A, 0x30, 0x41, 0x7E, 0xFF):
            if frame[i] == byte:
                continue
            bad = bytearray(frame)
            bad[i] = byte
            assert raises(ValueError, codec.decode, bytes(bad)), (i, byte)


def test_malformed_lines_are_rejected_with_a_reason() -> None:
    def with_crc(body: bytes) -> bytes:
        return b"$" + body + b"*" + ("%08X" % codec.crc32(body)).encode()  # noqa: UP031 (MicroPython-safe)

    for line in (b"I,0*9FE2345F", b"$I,0*9fe2345f", b"$I,0*9FE2345", with_crc(b"S,1,12\x01,00"),
                 with_crc(b",1"), with_crc(b"I,x"), with_crc(b"I,65536"), with_crc(b"I,-1"), with_crc(b"I")):
        assert raises(ValueError, codec.decode, line), line


def test_reserved_bytes_cannot_be_sent() -> None:
    for bad in ("a*b", "a$b", "a\nb", "\u00e9"):
        assert raises(ValueError, codec.encode, "F", 1, ["X", bad])
    assert raises(ValueError, codec.encode, "S", 1, ["1234567890"] * 30)  # longer than the 240-byte limit


def test_line_buffer_drops_over_long_lines_and_resyncs() -> None:
    lb = codec.LineBuffer()
    good = codec.encode("L", 3, ["1000"])
    out = lb.feed(b"x" * 1000 + b"\n" + good[:5])
    assert out == [] and lb.overflows == 1
    assert lb.feed(good[5:]) == [good[:-1]]
    # a frame cut short by a new start byte keeps only the new frame
    out = lb.feed(good[:7] + good)
    assert out == [good[:-1]] and lb.overflows == 2
    assert len(lb.buf) == 0
