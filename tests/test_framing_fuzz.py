"""Extra property tests for the daemon's frame parser (daemon/rig/framing.py) and message layer.

Outside reference: CRC-32 detects every burst error of 32 bits or fewer (a property of any CRC of degree 32;
Peterson & Brown 1961, "Cyclic Codes for Error Detection", Proc. IRE 49:228-235), so single-byte
substitutions must always be caught; other corruptions are caught with probability 1 - 2^-32.
"""

from __future__ import annotations

import contextlib

from hypothesis import given, settings
from hypothesis import strategies as st

from linerig.daemon.rig.framing import FrameDecoder, decode_line, encode_frame
from linerig.daemon.rig.messages import ChannelValue, MessageError, Sample, parse_message, sample_fields

FIELD = st.text(alphabet=st.characters(min_codepoint=32, max_codepoint=126, blacklist_characters="$*,"), max_size=10)


def _sample_frame(seq: int, n: int = 3) -> bytes:
    chans = tuple(ChannelValue(18.25 + i, 0) for i in range(n))
    return encode_frame("S", seq, sample_fields(Sample(seq, 1000 + seq, 21.5, 8.94, 0.2235, 12.39, True, chans)))


def _samples(frames: list) -> list[Sample]:
    return [m for f in frames if isinstance(m := parse_message(f), Sample)]


@settings(max_examples=300)
@given(st.binary(max_size=400).map(lambda b: b.replace(b"#", b"$").replace(b"%", b"\n").replace(b"&", b"*")))
def test_random_bytes_dense_in_delimiters_never_crash(data: bytes) -> None:
    dec = FrameDecoder()
    frames = dec.feed(data)
    for f in frames:  # anything accepted is a well-formed frame that round-trips
        assert decode_line(encode_frame(f.kind, f.seq, list(f.fields)).rstrip(b"\n")) == f
    c = dec.counters
    assert c.frames == len(frames) and c.skipped_bytes <= len(data)


@given(st.lists(st.binary(max_size=30), min_size=6, max_size=6), st.integers(0, 65535))
def test_good_frames_survive_any_garbage_between_them(garbage: list[bytes], seq0: int) -> None:
    frames = [_sample_frame((seq0 + i) % 65536) for i in range(5)]
    stream = garbage[0] + b"".join(f + g for f, g in zip(frames, garbage[1:], strict=True))
    dec = FrameDecoder()
    got = dec.feed(stream) + dec.feed(b"\n")
    seqs = [f.seq for f in got if f.kind == "S"]
    assert seqs == [(seq0 + i) % 65536 for i in range(5)]
    assert len(_samples(got)) == 5


@given(st.lists(st.integers(1, 40), min_size=1, max_size=40), st.binary(max_size=60))
def test_chunking_does_not_change_the_result(cuts: list[int], noise: bytes) -> None:
    stream = noise + b"".join(_sample_frame(i) for i in range(6)) + noise
    whole = FrameDecoder()
    expect = whole.feed(stream)
    parts = FrameDecoder()
    got, pos = [], 0
    for n in cuts * 20:
        if pos >= len(stream):
            break
        got += parts.feed(stream[pos : pos + n])
        pos += n
    got += parts.feed(stream[pos:])
    assert got == expect and parts.counters == whole.counters


@st.composite
def corrupted(draw: st.DrawFn) -> bytes:
    frame = bytearray(_sample_frame(draw(st.integers(0, 65535))))
    body = len(frame) - 1  # leave the LF alone: corruption inside the frame
    op = draw(st.sampled_from(["sub", "del", "ins", "swap", "trunc", "burst"]))
    i = draw(st.integers(0, body - 1))
    if op == "sub":
        b = draw(st.integers(0, 255).filter(lambda b: b != frame[i]))
        frame[i] = b
    elif op == "del":
        del frame[i]
    elif op == "ins":
        frame.insert(max(i, 1), draw(st.integers(0, 255)))  # after the "$": a byte before it is not corruption
    elif op == "swap":
        j = draw(st.integers(0, body - 1).filter(lambda j: frame[j] != frame[i]))
        frame[i], frame[j] = frame[j], frame[i]
    elif op == "trunc":
        frame = frame[:i] + b"\n"
    else:
        n = draw(st.integers(1, 4))
        for k in range(i, min(i + n, body)):
            frame[k] ^= draw(st.integers(1, 255))
    return bytes(frame)


@settings(max_examples=500)
@given(corrupted())
def test_corrupted_frames_never_yield_samples(frame: bytes) -> None:
    dec = FrameDecoder()
    assert _samples(dec.feed(frame) + dec.feed(b"\n")) == []


@given(st.lists(st.booleans(), min_size=2, max_size=60), st.integers(0, 65535))
def test_dropped_frames_are_counted_exactly(keep: list[bool], seq0: int) -> None:
    keep[0] = True
    stream = b"".join(_sample_frame((seq0 + i) % 65536) for i, k in enumerate(keep) if k)
    dec = FrameDecoder()
    dec.feed(stream)
    last = max(i for i, k in enumerate(keep) if k)
    lost = sum(1 for k in keep[: last + 1] if not k)
    assert dec.counters.lost_frames == lost
    assert dec.counters.frames == sum(keep)


@given(st.sampled_from("SBDATF"), st.lists(FIELD, max_size=14))
def test_messages_with_any_fields_parse_or_raise_message_error(kind: str, fields: list[str]) -> None:
    frame = decode_line(encode_frame(kind, 1, fields).rstrip(b"\n"))
    with contextlib.suppress(MessageError):
        parse_message(frame)
