"""Front-end firmware's own frame codec against the daemon's (daemon/rig/framing.py): the two
implementations must accept and reject exactly the same lines (CPython only: hypothesis and the daemon's code;
the codec's own cases run under both interpreters from tests/firmware/cases_codec.py)."""

from __future__ import annotations

from firmware_path import FW_DIR  # noqa: F401  (puts the firmware on sys.path)
from hypothesis import given
from hypothesis import strategies as st
from probefw import codec

from linerig.daemon.rig import framing


@given(
    st.sampled_from("BDSATFICPOLQ"),
    st.integers(min_value=0, max_value=200_000),
    st.lists(st.text(alphabet=st.characters(min_codepoint=32, max_codepoint=126, blacklist_characters="$*,"),
                     max_size=12), max_size=8),
)
def test_both_encoders_produce_identical_bytes(kind: str, seq: int, fields: list[str]) -> None:
    assert codec.encode(kind, seq, fields) == framing.encode_frame(kind, seq, fields)
    kind2, seq2, fields2 = codec.decode(codec.encode(kind, seq, fields)[:-1])
    assert (kind2, seq2, fields2) == (kind, seq % 65536, fields)


@given(st.binary(max_size=80))
def test_both_decoders_agree_on_any_line(line: bytes) -> None:
    line = line.replace(b"\n", b"")
    try:
        mine = codec.decode(line)
    except ValueError:
        mine = None
    try:
        f = framing.decode_line(line.rstrip(b"\r"))
        theirs = (f.kind, f.seq, list(f.fields))
    except ValueError:
        theirs = None
    assert mine == theirs


def _with_crc(body: bytes) -> bytes:
    return b"$" + body + b"*" + b"%08X" % codec.crc32(body)


@given(st.binary(max_size=60).filter(lambda b: all(c >= 0x20 or c in b"\r" for c in b) and b"\n" not in b))
def test_both_decoders_agree_on_frames_with_a_correct_crc(body: bytes) -> None:
    # random lines almost never pass the CRC, so also compare on bodies that carry a correct one
    line = _with_crc(body)
    try:
        mine = codec.decode(line)
    except ValueError:
        mine = None
    try:
        f = framing.decode_line(line)
        theirs = (f.kind, f.seq, list(f.fields))
    except ValueError:
        theirs = None
    assert mine == theirs
