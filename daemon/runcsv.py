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

import csv
import io
import math
import re
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import TextIO

import numpy as np

from .reduction.data import RunData

_SENSOR_COL = re.compile(r"^T_([A-Za-z0-9_]+)_C$")
_META = re.compile(r"^#\s*([A-Za-z_][A-Za-z0-9_]*)\s*:\s*(.*?)\s*$")
PROBE_SERIAL, PROBE_PROFILE = "probe_serial", "probe_profile"
CAL_FACTOR, CAL_FACTOR_U, CAL_SOURCE = "calibration_factor", "calibration_factor_u", "calibration"


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


def _header_number(v: HeaderValue, key: str, name: str, *, zero_ok: bool) -> float:
    try:
        x = float(v.text)
    except ValueError:
        x = math.nan
    if not math.isfinite(x) or x < 0 or (x == 0 and not zero_ok):
        raise RunCsvError(f"{name}: line {v.line}: {key} {v.text!r} is not a finite number "
                          f"{'>= 0' if zero_ok else '> 0'}")
    return x


def _open_text(src: str | Path | TextIO) -> tuple[str, str]:
    if isinstance(src, Path):
        try:
            return src.read_text(encoding="utf-8"), str(src)
        except (OSError, UnicodeDecodeError) as e:
            raise RunCsvError(f"{src}: cannot read ({e})") from e
    if isinstance(src, str):
        if "\n" in src or "," in src:
            return src, "<text>"
        return _open_text(Path(src))
    return src.read(), getattr(src, "name", "<stream>")


def read_run_csv(src: str | Path | TextIO, *, require_baseline: bool = True) -> RunData:
    """Parse a run CSV (a path, the text itself, or an open text stream)."""
    return read_run_file(src, require_baseline=require_baseline)[0]


def read_run_file(src: str | Path | TextIO, *, require_baseline: bool = True
                  ) -> tuple[RunData, dict[str, HeaderValue]]:
    """The samples and the ``# key: value`` metadata above the column header (first value of a key wins)."""
    text, name = _open_text(src)
    header: list[str] | None = None
    header_line = 0
    meta: dict[str, HeaderValue] = {}
    rows: list[list[float]] = []
    prev_t = -math.inf
    row_no = 0
    for line_no, raw in enumerate(text.splitlines(), start=1):
        stripped = raw.strip()
        if not stripped or stripped.startswith("#"):
            m = _META.match(stripped)
            if header is None and m and m.group(1) not in meta:
                meta[m.group(1)] = HeaderValue(m.group(2), line_no)
            continue
        cells = [c.strip() for c in next(csv.reader([raw]))]
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
            try:
                v = float(cell)
            except ValueError:
                raise RunCsvError(f"{where}, column {col}: {cell!r} is not a number") from None
            if not math.isfinite(v):
                raise RunCsvError(f"{where}, column {col}: {cell!r} is not a finite number (NaN or inf)")
            vals.append(v)
        t, q = vals[0], vals[1]
        if t <= prev_t:
            raise RunCsvError(f"{where}, column time_s: {t:g} does not increase (previous row {prev_t:g}); "
                              "time must be strictly increasing")
        if q < 0:
            raise RunCsvError(f"{where}, column q_W_per_m: power {q:g} is negative")
        prev_t = t
        rows.append(vals)
    if header is None:
        raise RunCsvError(f"{name}: no header line (expected time_s,q_W_per_m,T_<sensor>_C,...)")
    if len(rows) < 3:
        raise RunCsvError(f"{name}: only {len(rows)} data rows; a run needs a baseline and a heating record")
    arr = np.asarray(rows, dtype=float)
    t, q = arr[:, 0], arr[:, 1]
    if not np.any((t >= 0) & (q > 0)):
        raise RunCsvError(f"{name}: column q_W_per_m: no power at t >= 0 (every heating row has q <= 0)")
    if require_baseline and not np.any(t < 0):
        raise RunCsvError(f"{name}: column time_s: no baseline rows (time_s < 0 before the heater came on); "
                          "record a baseline so drift can be removed")
    temps = {_SENSOR_COL.match(col).group(1): arr[:, i] for i, col in enumerate(header) if i >= 2}  # type: ignore[union-attr]
    return RunData(time_s=t, q_W_per_m=q, temps_C=temps), meta


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
