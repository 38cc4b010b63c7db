"""Numbers as loggers write them: a decimal point or a decimal comma, never both in one file, no digit grouping.

A cell such as ``1,500`` is a decimal comma in a file whose other fractions use commas and an error in one whose
fractions use points: thousands separators are not read, because ``1,500`` and ``1.500`` would otherwise each mean
two numbers.
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable

from .errors import Choice, LoggerImportError

_POINT = re.compile(r"^[+-]?(\d+\.\d*|\.\d+)([eE][+-]?\d+)?$")
_COMMA = re.compile(r"^[+-]?(\d+,\d*|,\d+)([eE][+-]?\d+)?$")
_WHOLE = re.compile(r"^[+-]?\d+([eE][+-]?\d+)?$")
KEY = "[file] decimal"


def looks_numeric(cell: str) -> bool:
    c = cell.strip()
    return bool(_WHOLE.match(c) or _POINT.match(c) or _COMMA.match(c))


def decimal_mark(cells: Iterable[tuple[int, str, str]], delimiter: str, name: str,
                 given: str | None = None) -> tuple[str, Choice]:
    """The decimal mark of the number cells given as (line, column name, text).

    Raises LoggerImportError when both marks occur (naming one cell of each) or when the map's mark contradicts
    the file.
    """
    point: tuple[int, str, str] | None = None
    comma: tuple[int, str, str] | None = None
    for line, col, text in cells:
        c = text.strip()
        if point is None and _POINT.match(c):
            point = (line, col, c)
        elif comma is None and _COMMA.match(c):
            comma = (line, col, c)
        if point and comma:
            break
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
        if delimiter == ",":  # only inside quotes: the separator cannot also be the decimal mark unquoted
            how = f"found in quoted cells, e.g. line {comma[0]}, column {comma[1]}: {comma[2]!r}"
        else:
            how = f"found, e.g. line {comma[0]}, column {comma[1]}: {comma[2]!r}"
        return ",", Choice("decimal mark", "','", how, KEY)
    if point:
        return ".", Choice("decimal mark", "'.'", f"found, e.g. line {point[0]}, column {point[1]}: {point[2]!r}",
                           KEY)
    return ".", Choice("decimal mark", "none needed", "every number is whole", KEY)


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
