"""Strict JSON lines for the control socket: one line at once, or one large line in pieces.

A day of samples is a reply of tens of MB. Encoded in one call it holds the event loop (and, in a thread, the
GIL) for a second or more, while the loop keeps the heater's lease and limits; ``iter_encode`` makes the same bytes
a few kB at a time, so the loop can run between pieces and the client can take them as they come.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterator
from typing import Any

PIECE_ITEMS = 2048  # list items encoded per call
PIECE_BYTES = 64 * 1024  # bytes handed out at a time


def _finite(value: Any) -> Any:
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _finite(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_finite(v) for v in value]
    return value


def _jsonable(value: Any) -> Any:
    if hasattr(value, "item"):
        return value.item()
    if isinstance(value, tuple | set):
        return list(value)
    raise TypeError(f"cannot encode {type(value).__name__}")


def _dumps(obj: Any) -> str:
    try:
        return json.dumps(obj, separators=(",", ":"), allow_nan=False, default=_jsonable)
    except ValueError:
        return json.dumps(_finite(obj), separators=(",", ":"), allow_nan=False, default=_jsonable)


def encode(obj: dict[str, Any]) -> bytes:
    """One line of strict JSON; a NaN or infinity anywhere becomes null."""
    return (_dumps(obj) + "\n").encode()


def iter_encode(obj: dict[str, Any], newline: bool = True) -> Iterator[bytes]:
    """The bytes of ``encode(obj)`` (without its newline when not ``newline``), in pieces of about PIECE_BYTES;
    long lists are encoded a slice at a time."""
    buf: list[str] = []
    size = 0
    for text in _walk(obj):
        buf.append(text)
        size += len(text)
        if size >= PIECE_BYTES:
            yield "".join(buf).encode()
            buf, size = [], 0
    if newline:
        buf.append("\n")
    yield "".join(buf).encode()


def _walk(value: Any) -> Iterator[str]:
    if isinstance(value, dict):
        yield "{"
        for i, (key, item) in enumerate(value.items()):
            yield ("," if i else "") + json.dumps(str(key)) + ":"
            yield from _walk(item)
        yield "}"
    elif isinstance(value, list | tuple) and len(value) > PIECE_ITEMS:
        yield "["
        for start in range(0, len(value), PIECE_ITEMS):
            yield ("," if start else "") + _dumps(list(value[start:start + PIECE_ITEMS]))[1:-1]
        yield "]"
    else:
        yield _dumps(value)
