"""Where things are in a delimited logger export: the separator, the header line, a units line, the data rows.

Rules (each result is echoed with the map key that overrides it):
- separator: tab, then semicolon, then comma, the first that splits the last lines of the file into the same
  number (two or more) of fields. A semicolon or tab file whose numbers have decimal commas therefore never
  reads as comma-separated.
- header: the first line with that many fields that is mostly text and is followed by data (a line mostly of
  numbers, dates or times), possibly with one line of units between them. Lines above it are the logger's notes.
- data: every later non-blank line. Lines at the very end with another number of fields are left out and named
  (a footer, or a last line cut short when the logger stopped); anywhere else they are an error.
"""

from __future__ import annotations

import csv
from collections import Counter
from dataclasses import dataclass

from .clock import CLOCK, DATE, STAMP
from .errors import Choice, LoggerImportError
from .numbers import looks_numeric
from .units import looks_like_units_row

DELIMITERS = {"\t": "tab", ";": "semicolon", ",": "comma"}
TAIL = 50


@dataclass(frozen=True)
class Layout:
    delimiter: str
    header_line: int
    names: list[str]
    units_line: int | None
    units: list[str] | None
    rows: list[tuple[int, list[str]]]  # (line number, cells as written: strip before use)
    choices: list[Choice]


def split(line: str, delimiter: str, name: str, line_no: int) -> list[str]:
    """The cells of a line, unstripped (a data row's cells are stripped when their column is read); a quote left
    open is an error naming the line."""
    if '"' not in line:
        return line.split(delimiter)
    try:
        return next(csv.reader([line], delimiter=delimiter, strict=True))
    except csv.Error as e:
        raise LoggerImportError(f"{name}: line {line_no}: a quoted cell is not closed ({e})") from e


def _loose(line: str, delimiter: str) -> list[str]:
    """The cells of a line for looking (the logger's notes may hold stray quotes)."""
    if '"' not in line:
        return [c.strip() for c in line.split(delimiter)]
    return [c.strip() for c in next(csv.reader([line], delimiter=delimiter))]


def _is_value(cell: str) -> bool:
    return bool(looks_numeric(cell) or STAMP.match(cell) or DATE.match(cell) or CLOCK.match(cell))


def _is_data(cells: list[str]) -> bool:
    filled = [c for c in cells if c]
    values = sum(_is_value(c) for c in filled)
    return values > 0 and 2 * values > len(filled)


def find_delimiter(numbered: list[tuple[int, str]], name: str, given: str | None) -> tuple[str, Choice]:
    if given is not None:
        return given, Choice("separator", DELIMITERS.get(given, repr(given)), "from the map")
    tail = [text for _, text in numbered[-TAIL:]]
    for d, label in DELIMITERS.items():
        n, seen = Counter(len(_loose(t, d)) for t in tail).most_common(1)[0]
        if n >= 2 and seen >= 0.9 * len(tail):
            return d, Choice("separator", label, f"the last {len(tail)} lines split into {n} fields",
                             "[file] delimiter")
    raise LoggerImportError(
        f"{name}: no separator found: the last lines do not split into the same number of fields at tabs, "
        "semicolons or commas (decimal commas in a comma-separated file cannot be read: export it with semicolons "
        "or tabs); set [file] delimiter in the map")


def find_layout(lines: list[str], name: str, *, delimiter: str | None = None, header_line: int | None = None,
                units_line: int | None = None) -> Layout:
    """The layout of the file (``lines`` as read, numbered from 1). ``units_line`` 0 means none."""
    numbered = [(i, t) for i, t in enumerate(lines, start=1) if t.strip()]
    if not numbered:
        raise LoggerImportError(f"{name}: the file is empty")
    d, sep_choice = find_delimiter(numbered, name, delimiter)
    choices = [sep_choice]
    if header_line is None:
        pos, units_pos = _find_header(numbered, d, name, units_line)
        choices.append(Choice("header", f"line {numbered[pos][0]}", "the first text line followed by data",
                              "[file] header_line"))
    else:
        pos = next((k for k, (i, _) in enumerate(numbered) if i == header_line), -1)
        if pos < 0:
            raise LoggerImportError(f"{name}: [file] header_line = {header_line} is blank or past the end (the "
                                    f"file has {len(lines)} lines)")
        units_pos = _units_after(numbered, pos, d, name, units_line)
        choices.append(Choice("header", f"line {header_line}", "from the map"))
    header_at = numbered[pos][0]
    names = [c.strip() for c in split(numbered[pos][1], d, name, header_at)]
    units = None
    if units_pos is not None:
        units = [c.strip() for c in split(numbered[units_pos][1], d, name, numbered[units_pos][0])]
        choices.append(Choice("units line", f"line {numbered[units_pos][0]}", "from the map" if units_line else
                              "a line of units under the header", "[file] units_line"))
    if pos > 0:
        choices.append(Choice("skipped", f"lines {numbered[0][0]}–{header_at - 1}",
                              "the logger's notes above the header", "[file] header_line"))
    body = [(i, split(t, d, name, i)) for i, t in numbered[(units_pos if units_pos is not None else pos) + 1:]]
    rows, footer = _trim_footer(body, len(names), name, header_at, d)
    if footer:
        choices.append(Choice("left out", f"line{'s' if len(footer) > 1 else ''} {', '.join(map(str, footer))}",
                              f"at the end, not {len(names)} fields like the header"))
    if not rows:
        raise LoggerImportError(f"{name}: no data rows after the header on line {header_at}")
    return Layout(d, header_at, names, numbered[units_pos][0] if units_pos is not None else None, units, rows,
                  choices)


def _find_header(numbered: list[tuple[int, str]], d: str, name: str,
                 units_line: int | None) -> tuple[int, int | None]:
    """Positions in ``numbered`` of the header and of the units line (None when there is none)."""
    width = Counter(len(_loose(t, d)) for _, t in numbered[-TAIL:]).most_common(1)[0][0]
    cache: dict[int, list[str] | None] = {}

    def cells(k: int) -> list[str] | None:  # the cells of numbered[k] when it has the data's width
        if k not in cache:
            row = _loose(numbered[k][1], d) if k < len(numbered) else None
            cache[k] = row if row is not None and len(row) == width else None
        return cache[k]

    def data_at(k: int) -> bool:
        row = cells(k)
        return row is not None and _is_data(row)

    for k in range(len(numbered)):
        row = cells(k)
        if row is None or _is_data(row):
            if row is not None:
                break  # data before any header: stop looking
            continue
        below = cells(k + 1)
        if below is None:
            continue
        if units_line in (None, 0) and _is_data(below):
            return k, None
        wanted = (units_line is None and looks_like_units_row(below)) or units_line == numbered[k + 1][0]
        if wanted and data_at(k + 2):
            return k, k + 1
    if d == ",":
        first = next((k for k in range(len(numbered)) if data_at(k)), None)
        if first is not None and first > 0 and len(_loose(numbered[first - 1][1], d)) < width:
            raise LoggerImportError(
                f"{name}: line {numbered[first][0]} splits into {width} fields at commas but line "
                f"{numbered[first - 1][0]} above it into fewer: decimal commas in a comma-separated file? That "
                "cannot be read without a guess: export it with semicolons or tabs (or set [file] header_line if "
                "the header is elsewhere)")
    raise LoggerImportError(f"{name}: no column header found (a line of {width} names followed by data); set "
                            "[file] header_line (and [file] units_line) in the map")


def _units_after(numbered: list[tuple[int, str]], pos: int, d: str, name: str, units_line: int | None) -> int | None:
    if units_line == 0 or pos + 1 >= len(numbered):
        return None
    if units_line is not None:
        if numbered[pos + 1][0] != units_line:
            raise LoggerImportError(f"{name}: [file] units_line = {units_line} must be the line under the header "
                                    f"(line {numbered[pos][0]}), here line {numbered[pos + 1][0]}; or 0 for none")
        return pos + 1
    row = _loose(numbered[pos + 1][1], d)
    return pos + 1 if not _is_data(row) and looks_like_units_row(row) else None


def _trim_footer(body: list[tuple[int, list[str]]], width: int, name: str, header_at: int,
                 d: str) -> tuple[list[tuple[int, list[str]]], list[int]]:
    end = len(body)
    while end > 0 and len(body[end - 1][1]) != width:
        end -= 1
    for i, cells in body[:end]:
        if len(cells) != width:
            hint = (" (a decimal comma read as the separator? set [file] delimiter and [file] decimal)"
                    if d == "," and len(cells) > width else "")
            raise LoggerImportError(f"{name}: line {i}: {len(cells)} fields, the header on line {header_at} has "
                                    f"{width}{hint}")
    return body[:end], [i for i, _ in body[end:]]
