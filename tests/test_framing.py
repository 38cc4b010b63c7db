"""Frame codec and incremental decoder."""

from hypothesis import given
from hypothesis import strategies as st

from linerig.daemon.rig.framing import FrameDecoder, crc32, decode_line, encode_frame


def test_crc_check_value() -> None:
    # CRC-32/ISO-HDLC check value from the CRC catalogue (Greg Cook's "Catalogue of parametrised CRC
    # algorithms", the standard reference for CRC parameters): crc("123456789") = 0xCBF43926.
    assert crc32(b"123456789") == 0xCBF43926


def test_round_trip_split_at_every_offset() -> None:
    frames = [encode_frame("S", i, ["1000", "12.5", "0A"]) for i in range(3)]
    stream = b"".join(frames)
    for cut in range(len(stream) + 1):
        dec = FrameDecoder()
        got = dec.feed(stream[:cut]) + dec.feed(stream[cut:])
        assert [f.seq for f in got] == [0, 1, 2]
        assert dec.counters.bad_frames == 0


def test_garbage_and_corruption_are_counted_and_skipped() -> None:
    good = encode_frame("S", 1, ["5"])
    bad = bytearray(encode_frame("S", 2, ["6"]))
    bad[5] ^= 0x01
    dec = FrameDecoder()
    got = dec.feed(b"\x00\xffnoise" + bytes(bad) + good)
    assert [f.seq for f in got] == [1]
    assert dec.counters.bad_frames == 1
    assert dec.counters.skipped_bytes >= 7


def test_sequence_gap_and_duplicate() -> None:
    dec = FrameDecoder()
    dec.feed(encode_frame("S", 1) + encode_frame("S", 1) + encode_frame("S", 4))
    assert dec.counters.duplicates == 1
    assert dec.counters.seq_gaps == 1
    assert dec.counters.lost_frames == 2


def test_truncated_frame_before_next_start() -> None:
    dec = FrameDecoder()
    whole = encode_frame("S", 7, ["1"])
    got = dec.feed(whole[:6] + encode_frame("S", 8, ["2"]))
    assert [f.seq for f in got] == [8]
    assert dec.counters.bad_frames == 1


@given(st.binary(max_size=600))
def test_random_bytes_never_crash_or_yield(data: bytes) -> None:
    dec = FrameDecoder()
    for f in dec.feed(data):
        # a random frame passing CRC-32 is a 1-in-4-billion event; if it happens it must still be well formed
        assert decode_line(encode_frame(f.kind, f.seq, list(f.fields)).rstrip(b"\n")) == f


@given(st.binary(min_size=1, max_size=40), st.integers(min_value=0, max_value=30))
def test_corrupted_frames_never_yield(noise: bytes, pos: int) -> None:
    frame = bytearray(encode_frame("S", 3, ["123", "4.5"]))
    i = 1 + pos % (len(frame) - 2)
    frame[i] = (frame[i] + 1 + noise[0] % 250) % 256 or 1
    if frame[i] in b"$\n":
        frame[i] = ord("x")
    assert FrameDecoder().feed(bytes(frame)) == []
