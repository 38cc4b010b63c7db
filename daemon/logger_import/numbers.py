"""Numbers as loggers write them: a decimal point or a decimal comma, never both in one file, no digit grouping.

A cell such as ``1,500`` is a decimal comma in a file whose other fractions use commas and an error in one whose
fractions use points: thousands separators are not read, because ``1,500`` and ``1.500`` would otherwise each mean
two numbers.
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence

import numpy as np

from .clock import Cells
from .errors import Choice, LoggerImportError

_POINT = re.compile(r"^[+-]?(\d+\.\d*|\.\d+)([eE][+-]?\d+)?$")
_COMMA = re.compile(r"^[+-]?(\d+,\d*|,\d+)([eE][+-]?\d+)?$")
_WHOLE = re.compile(r"^[+-]?\d+([eE][+-]?\d+)?$")
_POINT_CELL = re.compile(r"^[+-]?(?:\d+\.\d*|\.\d+)(?:[eE][+-]?\d+)?$", re.MULTILINE)
_COMMA_CELL = re.compile(r"^[+-]?(?:\d+,\d*|,\d+)(?:[eE][+-]?\d+)?$", re.MULTILINE)
_NUMBER = {mark: rf"[+-]?(?:\d+(?:{re.escape(mark)}\d*)?|{re.escape(mark)}\d+)(?:[eE][+-]?\d+)?" for mark in ".,"}
_COLUMN = {mark: re.compile(rf"(?:{n}\n)*{n}") for mark, n in _NUMBER.items()}
KEY = "[file] decimal"


def looks_numeric(cell: str) -> bool:
    c = cell.strip()
    return bool(_WHOLE.match(c) or _POINT.match(c) or _COMMA.match(c))


def _first(pattern: re.Pattern[str], cells: Cells) -> tuple[int, str, str] | None:
    """(line, column, text) of the column's first cell the pattern matches."""
    joined = "\n".join(cells.texts)
    m = pattern.search(joined)
    if m is None:
        return None
    i = joined.count("\n", 0, m.start())
    return cells.lines[i], cells.column, cells.texts[i]


def _earliest(pattern: re.Pattern[str], columns: Sequence[Cells]) -> tuple[int, str, str] | None:
    """The first such cell in reading order: by line, then by the order the columns are given."""
    found = [(f[0], k, f) for k, c in enumerate(columns) if (f := _first(pattern, c)) is not None]
    return min(found)[2] if found else None


def decimal_mark(columns: Sequence[Cells], delimiter: str, name: str,
                 given: str | None = None) -> tuple[str, Choice]:
    """The decimal mark of the number columns used.

    Raises LoggerImportError when both marks occur (naming one cell of each) or when the map's mark contradicts
    the file.
    """
    point = _earliest(_POINT_CELL, columns)
    comma = _earliest(_COMMA_CELL, columns)
    if given is not None:
        other = comma if given == "." else point
        if other is not None:
            raise LoggerImportError(f"{name}: line {other[0]}, column {other[1]}: {other[2]!r} has a decimal "
                                    f"{'comma' if given == '.' else 'point'}, but {KEY} = {given!r}")
        return given, Choice("decimal mark", repr(given), "from the map")
    if point and comma:
        raise LoggerImportError(
            f"{name}: line {point[0]}, column {point[1]}: {point[2]!r} has a decimal point and line {comma[0]}, "
            f"column {comma[1]}: {comma[2]!r} a decimal comma (digit grouping is not read); set {KEY} = \".\" or "
            "\",\" and correct the cells of the other kind")
    if comma:
        quoted = " in quoted cells" if delimiter == "," else ""  # the separator cannot also be the mark unquoted
        return ",", Choice("decimal mark", "','", f"found{quoted}, e.g. line {comma[0]}, column {comma[1]}: "
                           f"{comma[2]!r}", KEY)
    if point:
        return ".", Choice("decimal mark", "'.'", f"found, e.g. line {point[0]}, column {point[1]}: {point[2]!r}",
                           KEY)
    return ".", Choice("decimal mark", "none needed", "every number is whole", KEY)


def parse_column(texts: Sequence[str], decimal: str) -> np.ndarray | None:
    """Every (stripped) cell of a column at once, or None when some cell is not a finite number (parse_number
    names it)."""
    joined = "\n".join(texts)
    if not _COLUMN[decimal].fullmatch(joined):
        return None
    values = np.array((joined.replace(",", ".") if decimal == "," else joined).split("\n"), dtype=float)
    return values if bool(np.all(np.isfinite(values))) else None


def parse_number(text: str, decimal: str) -> float | None:
    """The value of a cell, or None when it is not a finite number in this file's notation."""
    c = text.strip()
    if decimal == ",":
        if not (_COMMA.match(c) or _WHOLE.match(c)):
            return None
        c = c.replace(",", ".")
    elif not (_POINT.match(c) or _WHOLE.match(c)):
        return None
    v = float(c)
    return v if math.isfinite(v) else None
