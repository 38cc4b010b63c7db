"""The run CSV format: ``time_s``, ``q_W_per_m``, then ``T_<sensor>_C`` columns; ``#`` lines are comments.

``time_s`` is seconds from heater on (baseline rows negative) and strictly increasing; ``q_W_per_m`` is the
measured heater power per metre, held from that row until the next (0 when off); temperatures in °C. Every
problem is reported with the file line number and the column, so a bad file never turns into a number that
looks like a result.

Comment lines of the form ``# key: value`` before the column header are the run's metadata. Those the reduction
uses: ``probe_serial``, ``calibration_factor`` and ``calibration_factor_u`` (the probe factor applied to the
stored result and its standard uncertainty), ``calibration`` (where that factor comes from, in words) and
``probe_profile`` (the probe profile as one line of JSON, as linerigd stores it).
"""

from __future__ import annotations

import array
import contextlib
import csv
import io
import math
import re
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import TextIO

import numpy as np

from .reduction.data import RunData, out_of_bounds, value_problem

_SENSOR_COL = re.compile(r"^T_([A-Za-z0-9_]+)_C$")
_META = re.compile(r"^#\s*([A-Za-z_][A-Za-z0-9_]*)\s*:\s*(.*?)\s*$")
PROBE_SERIAL, PROBE_PROFILE = "probe_serial", "probe_profile"
CAL_FACTOR, CAL_FACTOR_U, CAL_SOURCE = "calibration_factor", "calibration_factor_u", "calibration"
# Plain decimal numbers only: float() would also take "1_1.0", full-width digits and "infinity"
_NUMBER = re.compile(r"[+-]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][+-]?[0-9]+)?", re.ASCII)
_NON_FINITE = re.compile(r"[+-]?(?:nan|inf|infinity)", re.ASCII | re.IGNORECASE)
_BOM = "\ufeff"  # a UTF-8 byte order mark, as spreadsheets write one at the start of a CSV
# bytes a data block may hold for the fast reader; anything else (a comment, a quote, a letter) goes the slow way
_FAST_BYTES = np.zeros(256, dtype=bool)
_FAST_BYTES[np.frombuffer(b"0123456789.+-eE,\r\n", dtype=np.uint8)] = True
FAST_MIN_BYTES = 1 << 20  # below this the line-by-line reader is quick enough and always exact
_BLOCK = 1 << 24


class RunCsvError(ValueError):
    """A run CSV that cannot be read; the message names the line (and row) and the column."""


@dataclass(frozen=True)
class HeaderValue:
    text: str
    line: int


@dataclass(frozen=True)
class FileCalibration:
    """The probe factor a run CSV says its stored result carries."""

    factor: float
    factor_u: float
    source: str


def file_calibration(meta: dict[str, HeaderValue], name: str) -> FileCalibration | None:
    """The ``calibration_factor`` (and ``_u``) of a run CSV's header; None when it names none.

    Raises RunCsvError naming the line when a value is not a usable number: a factor must not be guessed.
    """
    if CAL_FACTOR not in meta:
        if CAL_FACTOR_U in meta:
            raise RunCsvError(f"{name}: line {meta[CAL_FACTOR_U].line}: {CAL_FACTOR_U} without {CAL_FACTOR}")
        return None
    factor = _header_number(meta[CAL_FACTOR], CAL_FACTOR, name, zero_ok=False)
    u = _header_number(meta[CAL_FACTOR_U], CAL_FACTOR_U, name, zero_ok=True) if CAL_FACTOR_U in meta else 0.0
    return FileCalibration(factor, u, meta[CAL_SOURCE].text if CAL_SOURCE in meta else "")


SAMPLE_RADIUS = "sample_radius_m"


def file_sample_radius_m(meta: dict[str, HeaderValue], name: str) -> float | None:
    """The radius of the sample the run's probe sat in (``sample_radius_m``; None: in the ground)."""
    return _header_number(meta[SAMPLE_RADIUS], SAMPLE_RADIUS, name, zero_ok=False) if SAMPLE_RADIUS in meta else None


def _header_number(v: HeaderValue, key: str, name: str, *, zero_ok: bool) -> float:
    try:
        x = float(v.text)
    except ValueError:
        x = math.nan
    if not math.isfinite(x) or x < 0 or (x == 0 and not zero_ok):
        raise RunCsvError(f"{name}: line {v.line}: {key} {v.text!r} is not a finite number "
                          f"{'>= 0' if zero_ok else '> 0'}")
    return x


@contextlib.contextmanager
def _named(path: Path) -> Iterator[None]:
    """An OSError while the file is read becomes a RunCsvError naming the file."""
    try:
        yield
    except OSError as e:
        raise RunCsvError(f"{path}: cannot read ({e.strerror or e})") from None


def _decode(raw: bytes, name: str) -> str:
    try:
        return raw.decode("utf-8").removeprefix(_BOM)
    except UnicodeDecodeError as e:
        line = raw.count(b"\n", 0, e.start) + 1
        raise RunCsvError(f"{name}: line {line}: byte 0x{raw[e.start]:02X} is not UTF-8 text; "
                          "save the file as UTF-8 CSV") from None


def read_run_csv(src: str | Path | TextIO, *, require_baseline: bool = True) -> RunData:
    """Parse a run CSV (a path, the text itself, or an open text stream)."""
    return read_run_file(src, require_baseline=require_baseline)[0]


def read_run_file(src: str | Path | TextIO, *, require_baseline: bool = True
                  ) -> tuple[RunData, dict[str, HeaderValue]]:
    """The samples and the ``# key: value`` metadata above the column header (first value of a key wins).

    A large file of plain numbers is read by numpy in one pass; any file the fast reader cannot take as it is
    (comments between rows, quotes, a bad cell) is read line by line, which names the first problem exactly.
    """
    if isinstance(src, str) and ("\n" in src or "," in src):
        return _read_lines(src.removeprefix(_BOM), "<text>", require_baseline)
    if isinstance(src, str | Path):
        path = Path(src)
        with _named(path):
            if path.stat().st_size >= FAST_MIN_BYTES and (got := _read_fast(path, require_baseline)) is not None:
                return got
            raw = path.read_bytes()
        return _read_lines(_decode(raw, str(path)), str(path), require_baseline)
    return _read_lines(src.read().removeprefix(_BOM), getattr(src, "name", "<stream>"), require_baseline)


def _metadata(line: str, line_no: int, meta: dict[str, HeaderValue]) -> None:
    """A ``# key: value`` comment above the column header (the first value of a key wins)."""
    m = _META.match(line)
    if m and m.group(1) not in meta:
        meta[m.group(1)] = HeaderValue(m.group(2), line_no)


def _read_lines(text: str, name: str, require_baseline: bool) -> tuple[RunData, dict[str, HeaderValue]]:
    header: list[str] | None = None
    header_line = 0
    meta: dict[str, HeaderValue] = {}
    values = array.array("d")  # 8 bytes a value, not a list of lists: a long file stays small
    prev_t = -math.inf
    row_no = 0
    for line_no, raw in enumerate(io.StringIO(text, newline=None), start=1):
        stripped = raw.strip()
        if not stripped or stripped.startswith("#"):
            if header is None:
                _metadata(stripped, line_no, meta)
            continue
        try:
            cells = [c.strip() for c in next(csv.reader([raw.rstrip("\n")], strict=True))]
        except csv.Error as e:
            where = f"{name}: line {line_no}" + (f" (data row {row_no + 1})" if header is not None else " (header)")
            raise RunCsvError(f"{where}: not valid CSV ({e}; an unclosed quote?)") from None
        if header is None:
            header = cells
            header_line = line_no
            _check_header(header, name, line_no)
            continue
        row_no += 1
        where = f"{name}: line {line_no} (data row {row_no})"
        if len(cells) != len(header):
            raise RunCsvError(f"{where}: {len(cells)} fields, the header on line {header_line} has {len(header)}")
        vals: list[float] = []
        for col, cell in zip(header, cells, strict=True):
            if _NUMBER.fullmatch(cell):
                v = float(cell)
            elif _NON_FINITE.fullmatch(cell):
                v = math.nan
            else:
                raise RunCsvError(f"{where}, column {col}: {cell!r} is not a number (plain decimal digits, an "
                                  "optional sign, point and exponent)")
            if not math.isfinite(v):
                raise RunCsvError(f"{where}, column {col}: {cell!r} is not a finite number (NaN or inf)")
            problem = value_problem(col, v)
            if problem:
                raise RunCsvError(f"{where}, column {col}: {problem}")
            vals.append(v)
        t = vals[0]
        if t <= prev_t:
            raise RunCsvError(f"{where}, column time_s: {t:g} does not increase (previous row {prev_t:g}); "
                              "time must be strictly increasing")
        prev_t = t
        values.extend(vals)
    if header is None:
        raise RunCsvError(f"{name}: no header line (expected time_s,q_W_per_m,T_<sensor>_C,...)")
    arr = np.frombuffer(values, dtype=float).reshape(row_no, len(header)).copy()
    return _finish(arr, header, name, require_baseline), meta


def _finish(arr: np.ndarray, header: list[str], name: str, require_baseline: bool) -> RunData:
    """Checks on the whole record, then the record."""
    if arr.shape[0] < 3:
        raise RunCsvError(f"{name}: only {arr.shape[0]} data rows; a run needs a baseline and a heating record")
    t, q = arr[:, 0], arr[:, 1]
    if not np.any((t >= 0) & (q > 0)):
        raise RunCsvError(f"{name}: column q_W_per_m: no power at t >= 0 (every heating row has q <= 0)")
    if require_baseline and not np.any(t < 0):
        raise RunCsvError(f"{name}: column time_s: no baseline rows (time_s < 0 before the heater came on); "
                          "record a baseline so drift can be removed")
    temps = {_SENSOR_COL.match(col).group(1): arr[:, i] for i, col in enumerate(header) if i >= 2}  # type: ignore[union-attr]
    return RunData(time_s=t, q_W_per_m=q, temps_C=temps)


def _read_fast(path: Path, require_baseline: bool) -> tuple[RunData, dict[str, HeaderValue]] | None:
    """numpy's reader for a large file that is a header and then plain numbers, one row a line; None when the
    file is anything else (the line-by-line reader then finds and names the problem)."""
    name = str(path)
    with _named(path), path.open("rb") as fh:
        head = fh.read(1 << 16)
        header_line, offset = _header_position(head)
        if header_line == 0:
            return None
        above = _decode(head[:offset], name).splitlines()
        meta: dict[str, HeaderValue] = {}
        for line_no, line in enumerate(above[:-1], start=1):
            _metadata(line.strip(), line_no, meta)
        try:
            header = [c.strip() for c in next(csv.reader([above[-1]], strict=True))]
        except csv.Error:
            return None
        _check_header(header, name, header_line)
        fh.seek(offset)
        lines = 0
        last = b""
        while block := fh.read(_BLOCK):
            view = np.frombuffer(block, dtype=np.uint8)
            if not _FAST_BYTES[view].all():
                return None
            lines += block.count(b"\n")
            if b"\n\n" in block or b"\n\r\n" in block or (last == b"\n" and block[:1] in (b"\n", b"\r")):
                return None  # a blank line: rows no longer map to lines one to one
            last = block[-1:]
        rows = lines + (1 if last not in (b"\n", b"") else 0)
        fh.seek(offset)
        try:
            arr = np.loadtxt(fh, delimiter=",", dtype=float, ndmin=2, encoding=None)
        except ValueError:
            return None
    if arr.shape != (rows, len(header)):
        return None
    _check_columns(arr, header, name, header_line)
    return _finish(arr, header, name, require_baseline), meta


def _header_position(head: bytes) -> tuple[int, int]:
    """(1-based line of the header, byte offset just after it) in the file's first block; (0, 0) if not there."""
    pos = 3 if head.startswith(b"\xef\xbb\xbf") else 0
    line = 0
    while True:
        end = head.find(b"\n", pos)
        if end < 0:
            return 0, 0
        line += 1
        text = head[pos:end].strip()
        if text and not text.startswith(b"#"):
            return line, end + 1
        pos = end + 1


def _check_columns(arr: np.ndarray, header: list[str], name: str, header_line: int) -> None:
    """The line-by-line reader's per-value checks, on whole columns; the first problem is named by its line."""
    found: list[tuple[int, str, str]] = []
    for j, col in enumerate(header):
        v = arr[:, j]
        bad = np.flatnonzero(~np.isfinite(v) | out_of_bounds(col, v))
        if bad.size:
            i = int(bad[0])
            found.append((i, col, value_problem(col, float(v[i])) or "out of bounds"))
        if j == 0:
            back = np.flatnonzero(np.diff(v) <= 0)
            if back.size:
                i = int(back[0]) + 1
                found.append((i, col, f"{v[i]:g} does not increase (previous row {v[i - 1]:g}); "
                                      "time must be strictly increasing"))
    if found:
        i, col, why = min(found, key=lambda r: r[0])
        raise RunCsvError(f"{name}: line {header_line + 1 + i} (data row {i + 1}), column {col}: {why}")


def _check_header(header: list[str], name: str, line_no: int) -> None:
    where = f"{name}: line {line_no} (header)"
    if header[0] != "time_s":
        raise RunCsvError(f"{where}, column 1: expected 'time_s', got {header[0]!r}")
    if len(header) < 2 or header[1] != "q_W_per_m":
        raise RunCsvError(f"{where}, column 2: expected 'q_W_per_m', got {header[1] if len(header) > 1 else ''!r}")
    if len(header) < 3:
        raise RunCsvError(f"{where}: no sensor column; expected time_s,q_W_per_m,T_<sensor>_C,...")
    seen: set[str] = set()
    for i, col in enumerate(header[2:], start=3):
        if not _SENSOR_COL.match(col):
            raise RunCsvError(f"{where}, column {i}: {col!r} is not a sensor column T_<sensor>_C")
        if col in seen:
            raise RunCsvError(f"{where}, column {i}: {col!r} appears twice")
        seen.add(col)


def write_run_csv(data: RunData, dest: str | Path | TextIO, comments: Iterable[str] = ()) -> None:
    """Write a run in the same format (full float precision, comments first)."""
    buf = io.StringIO()
    for c in comments:
        for line in str(c).splitlines() or [""]:
            buf.write(f"# {line}\n")
    names = list(data.temps_C)
    buf.write(",".join(["time_s", "q_W_per_m", *[f"T_{n}_C" for n in names]]) + "\n")
    cols = [data.time_s, data.q_W_per_m, *[data.temps_C[n] for n in names]]
    for i in range(data.time_s.shape[0]):
        buf.write(",".join(repr(float(c[i])) for c in cols) + "\n")
    if isinstance(dest, str | Path):
        Path(dest).write_text(buf.getvalue(), encoding="utf-8")
    else:
        dest.write(buf.getvalue())
