"""Hostile run CSVs: what spreadsheets and loggers really write is read, and what no heated probe could record
ends `linerig reduce` with exit 2 and one line naming the problem, never a number that looks like a result.

The base record is the invented Examplemoor field run in examples/; each case changes one thing in it.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest

from linerig.daemon import runcsv
from linerig.daemon.reduction.data import ImplausibleRun, RunData
from linerig.daemon.reduction.linesource import fit_window
from linerig.daemon.runcsv import RunCsvError, read_run_csv
from linerig.tui.cli import main

ROOT = Path(__file__).resolve().parent.parent
RUN_CSV = ROOT / "examples" / "examplemoor" / "run_BH1_1.5m.csv"
TEXT = RUN_CSV.read_text(encoding="utf-8")


def _rows(edit: Callable[[float, float, float], tuple[str, str, str]]) -> str:
    """The example with every data row rewritten by ``edit(t, q, T)`` (cells as text)."""
    out = []
    for line in TEXT.splitlines():
        if line.startswith("#") or line.startswith("time_s"):
            out.append(line)
            continue
        t, q, temp = (float(c) for c in line.split(","))
        out.append(",".join(edit(t, q, temp)))
    return "\n".join(out) + "\n"


def _first_row(old: str, new: str) -> str:
    assert old in TEXT
    return TEXT.replace(old, new, 1)


def _second_temperature(cell: str) -> str:
    """The example with the temperature of its second data row (line 5) replaced by ``cell``."""
    return re.sub(r"^-58\.0,0\.0,[^\n]*$", f"-58.0,0.0,{cell}", TEXT, count=1, flags=re.MULTILINE)


def _plain(t: float, q: float, temp: float) -> tuple[str, str, str]:
    return repr(t), repr(q), repr(temp)


REDUCE_LEVEL = ("falls while", "does not rise")  # refused by the reduction; the others as the file is read
BAD: list[tuple[str, str | bytes, str]] = [
    # float() takes these, a CSV reader must not: each was read as a number before
    ("underscore in a number", _first_row("\n-58.0,0.0,", "\n-5_8.0,0.0,"), "line 5 (data row 2), column time_s"),
    ("full-width digits", _first_row("\n-58.0,0.0,", "\n-５８.0,0.0,"), "line 5 (data row 2), column time_s"),
    ("unclosed quote", _first_row("\n-58.0,0.0,1", '\n-58.0,0.0,"1'), "line 5 (data row 2): not valid CSV"),
    ("quote inside a number", _first_row("\n-58.0,0.0,1", '\n-58.0,0.0,1"'), "column T_heater_C"),
    ("infinity spelled out", _second_temperature("infinity"), "line 5 (data row 2), column T_heater_C: 'infinity' "
                                                             "is not a finite number"),
    ("overflow to infinity", _second_temperature("1e400"), "line 5 (data row 2), column T_heater_C: "),
    ("below absolute zero", _second_temperature("-300"), "absolute zero"),
    ("absurd power", _rows(lambda t, q, T: _plain(t, q * 1e9, T)), "above 1000 W/m"),
    ("power past float range in the fit", _rows(lambda t, q, T: _plain(t, q * 1e150, T)), "above 1000 W/m"),
    ("time in the wrong unit", _rows(lambda t, q, T: _plain(t * 1e12, q, T)), "beyond ±1e+09 s"),
    # the sensor cools while heated: before, k = 480,729 with exit 0 or a fit error depending on the shape
    ("falling temperature", _rows(lambda t, q, T: _plain(t, q, T if t < 0 else 2 * 11.0 - T)),
     "T_heater_C falls while the heater is on"),
    ("a whole record drifting down", _rows(lambda t, q, T: _plain(t, q, 11.0 - 0.004 * (t + 60)
                                                                  + (T - round(T, 2)))),
     "T_heater_C does not rise while the heater is on"),
    # a thermocouple shorted at its plug reads the plug: flat, with its noise (no rise, k anything)
    ("shorted sensor", _rows(lambda t, q, T: _plain(t, q, 11.0 + (T - round(T, 2)))),
     "does not rise while the heater is on"),
    ("not UTF-8", TEXT.encode().replace(b"probe tip", b"probe \xb0tip"), "is not UTF-8 text"),
]


@pytest.mark.parametrize(("case", "content", "named"), BAD, ids=[b[0] for b in BAD])
def test_reduce_refuses_with_one_line_and_exit_2(tmp_path: Path, capsys: pytest.CaptureFixture[str], case: str,
                                                 content: str | bytes, named: str) -> None:
    path = tmp_path / "bad.csv"
    if isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_text(content, encoding="utf-8")
    rc = main(["reduce", str(path), "--json"])
    out = capsys.readouterr()
    assert rc == 2, (case, out.out[:200])
    assert out.out == ""
    lines = out.err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("linerig reduce: error: ") and str(path) in lines[0], out.err
    assert named in lines[0], lines[0]


def test_a_byte_order_mark_is_read_like_the_same_file_without_one(tmp_path: Path) -> None:
    # spreadsheets write a UTF-8 BOM at the start of a CSV export (it was refused: "got '\ufeff# ...'")
    path = tmp_path / "bom.csv"
    path.write_bytes(b"\xef\xbb\xbf" + TEXT.encode())
    plain, bom = read_run_csv(RUN_CSV), read_run_csv(path)
    assert np.array_equal(plain.time_s, bom.time_s) and np.array_equal(plain.temps_C["heater"],
                                                                        bom.temps_C["heater"])


def test_a_crlf_file_with_quoted_numbers_reads_the_same(tmp_path: Path) -> None:
    quoted = _rows(lambda t, q, T: (f'"{t!r}"', repr(q), repr(T))).replace("\n", "\r\n")
    path = tmp_path / "crlf.csv"
    path.write_bytes(quoted.encode())
    assert np.array_equal(read_run_csv(path).time_s, read_run_csv(RUN_CSV).time_s)


@pytest.fixture
def fast_reader(monkeypatch: pytest.MonkeyPatch) -> None:
    """The numpy reader for every file, not only for those above 1 MB."""
    monkeypatch.setattr(runcsv, "FAST_MIN_BYTES", 0)


def test_the_fast_reader_gives_the_line_readers_record(tmp_path: Path, fast_reader: None) -> None:
    path = tmp_path / "plain.csv"
    path.write_text(_rows(_plain).replace("# Invented field run, Examplemoor substation, BH1, probe tip 1.575 m\n",
                                          "\ufeff# Invented field run\n# probe_serial: FN-0412\n"))
    got = runcsv._read_fast(path, True)
    assert got is not None  # a header and plain numbers: numpy's reader took it
    fast, fast_meta = got
    slow, slow_meta = runcsv._read_lines(path.read_text(encoding="utf-8-sig"), str(path), True)
    assert fast_meta == slow_meta and fast_meta["probe_serial"].text == "FN-0412"  # the header's metadata too
    for a, b in ((fast.time_s, slow.time_s), (fast.q_W_per_m, slow.q_W_per_m),
                 (fast.temps_C["heater"], slow.temps_C["heater"])):
        assert np.array_equal(a, b)


READ_BAD = [b for b in BAD if isinstance(b[1], str) and not any(w in b[2] for w in REDUCE_LEVEL)]


@pytest.mark.parametrize(("case", "content", "named"), READ_BAD, ids=[b[0] for b in READ_BAD])
def test_the_fast_reader_names_the_same_line(tmp_path: Path, fast_reader: None, case: str, content: str,
                                            named: str) -> None:
    path = tmp_path / "bad.csv"
    path.write_text(content, encoding="utf-8")
    with pytest.raises((RunCsvError, ImplausibleRun)) as fast:
        read_run_csv(path)
    with pytest.raises((RunCsvError, ImplausibleRun)) as slow:
        runcsv._read_lines(content, str(path), True)
    # the same line and column (the fast reader no longer has the cell's text, only its value)
    assert named in str(fast.value) and named in str(slow.value)
    assert str(fast.value).split(": ")[:2] == str(slow.value).split(": ")[:2]


def test_time_going_back_is_named_by_the_fast_reader_too(tmp_path: Path, fast_reader: None) -> None:
    text = _first_row("\n-56.0,0.0,", "\n-58.5,0.0,")
    path = tmp_path / "back.csv"
    path.write_text(text)
    with pytest.raises(RunCsvError, match=r"line 6 \(data row 3\), column time_s: -58.5 does not increase"):
        read_run_csv(path)


def test_records_built_in_memory_are_held_to_the_same_bounds() -> None:
    t = np.arange(-5.0, 20.0)
    with pytest.raises(ImplausibleRun, match="column q_W_per_m, sample 6: power 1e\\+10 W/m"):
        RunData(t, np.where(t >= 0, 1e10, 0.0), {"heater": 20 + 0.1 * t.clip(0)})
    with pytest.raises(ImplausibleRun, match="column T_heater_C, sample 1: temperature -274"):
        RunData(t, np.where(t >= 0, 5.0, 0.0), {"heater": np.full(t.size, -274.0)})
    # a channel without a reading (NaN) is a gap, not an impossible value
    RunData(t, np.where(t >= 0, 5.0, 0.0), {"heater": np.where(t == 3, math.nan, 20.0)})


def test_a_slope_beyond_floating_point_is_a_fit_error_not_a_division_by_zero() -> None:
    # q ≥ 1e150 made a³ underflow to 0 in α's variance (ZeroDivisionError before)
    t = np.linspace(10, 300, 50)
    u = np.log(t)
    with pytest.raises(ValueError, match="beyond any medium"):
        fit_window(t, u, 1e-70 * u, np.ones_like(t), 10, 300, r_m=1e-3)
