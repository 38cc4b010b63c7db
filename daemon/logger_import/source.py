"""Bytes to lines: the byte-order mark, the encoding, and line numbers as an editor shows them."""

from __future__ import annotations

import codecs
import re

from .errors import Choice, LoggerImportError

_BOMS = ((codecs.BOM_UTF8, "utf-8-sig", "UTF-8 with a byte-order mark"),
         (codecs.BOM_UTF16_LE, "utf-16", "UTF-16 (little-endian byte-order mark)"),
         (codecs.BOM_UTF16_BE, "utf-16", "UTF-16 (big-endian byte-order mark)"))
_NEWLINE = re.compile(r"\r\n|\n|\r")
KEY = "[file] encoding"


def decode(raw: bytes, name: str, encoding: str | None = None) -> tuple[str, Choice]:
    """The text of a logger file. Without a byte-order mark UTF-8 is tried first, then Windows-1252, which many
    spreadsheet exports on Windows use (the ° of °C is where the two differ)."""
    if encoding is not None:
        enc = "utf-8-sig" if encoding.lower().replace("_", "-") in ("utf-8", "utf8") else encoding
        try:
            return raw.decode(enc), Choice("encoding", encoding, "from the map")
        except LookupError as e:
            raise LoggerImportError(f"{name}: {KEY} {encoding!r} is not an encoding Python knows "
                                    "(e.g. \"utf-8\", \"cp1252\", \"latin-1\", \"utf-16\")") from e
        except UnicodeDecodeError as e:
            raise LoggerImportError(f"{name}: line {_line_of(raw, e.start)}: byte 0x{raw[e.start]:02x} is not "
                                    f"{encoding}; set {KEY} to the file's encoding") from e
    for bom, codec, label in _BOMS:
        if raw.startswith(bom):
            try:
                return raw.decode(codec), Choice("encoding", label, "found")
            except UnicodeDecodeError as e:
                raise LoggerImportError(f"{name}: the file starts with a {label.split(' (')[0]} mark but is not "
                                        f"valid {codec} (byte {e.start}); set {KEY}") from e
    if b"\x00" in raw[:4096]:
        raise LoggerImportError(f"{name}: the file holds NUL bytes: UTF-16 without a byte-order mark? "
                                f"Set {KEY} = \"utf-16-le\" (or \"utf-16-be\")")
    try:
        return raw.decode("utf-8"), Choice("encoding", "UTF-8", "found")
    except UnicodeDecodeError as e:
        first = _line_of(raw, e.start)
    for codec, label in (("cp1252", "Windows-1252"), ("latin-1", "Latin-1")):
        try:
            return raw.decode(codec), Choice("encoding", label, f"not UTF-8 from line {first}", KEY)
        except UnicodeDecodeError:
            continue
    raise AssertionError("latin-1 decodes every byte")  # pragma: no cover


def lines_of(text: str) -> list[str]:
    """The lines, split at CR LF, LF or CR only (so numbering matches an editor's, unlike str.splitlines)."""
    lines = _NEWLINE.split(text)
    if lines and lines[-1] == "":
        lines.pop()
    return lines


def _line_of(raw: bytes, offset: int) -> int:
    return raw.count(b"\n", 0, offset) + 1
