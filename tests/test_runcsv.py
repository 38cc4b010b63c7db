"""Run CSV: round trip, and errors that name the line/row and the column."""

import io

import numpy as np
import pytest

from linerig.daemon.reduction.data import RunData
from linerig.daemon.runcsv import RunCsvError, read_run_csv, write_run_csv

HEAD = "# invented run, test site\ntime_s,q_W_per_m,T_heater_C,T_far_C\n"


def test_round_trip() -> None:
    t = np.arange(-5.0, 10.0)
    d = RunData(t, np.where(t >= 0, 4.5, 0.0), {"heater": 20 + 0.1 * t.clip(0), "far": 20 + 0.01 * t.clip(0)})
    buf = io.StringIO()
    write_run_csv(d, buf, comments=["probe LN-1", "site: test bench"])
    text = buf.getvalue()
    assert text.startswith("# probe LN-1\n")
    back = read_run_csv(text)
    assert np.array_equal(back.time_s, d.time_s)
    assert np.array_equal(back.temps_C["far"], d.temps_C["far"])
    assert back.sensor_names == ["heater", "far"]


@pytest.mark.parametrize(("body", "needles"), [
    ("-1,0,20,20\n0,5,20,abc\n1,5,20,20\n", ["line 4", "row 2", "T_far_C", "'abc'"]),
    ("-1,0,20,20\n0,5,20,nan\n1,5,20,20\n", ["line 4", "T_far_C", "NaN"]),
    ("-1,0,20,20\n0,5,20\n1,5,20,20\n", ["line 4", "3 fields"]),
    ("-1,0,20,20\n1,5,20,20\n1,5,20,20\n", ["line 5", "time_s", "strictly increasing"]),
    ("0,5,20,20\n1,5,20,20\n2,5,20,20\n", ["time_s", "no baseline"]),
    ("-1,0,20,20\n0,0,20,20\n1,0,20,20\n", ["q_W_per_m", "no power"]),
    ("-1,0,20,20\n0,-5,20,20\n1,5,20,20\n", ["line 4", "q_W_per_m", "negative"]),
])
def test_bad_rows_are_named(body: str, needles: list[str]) -> None:
    with pytest.raises(RunCsvError) as e:
        read_run_csv(HEAD + body)
    for n in needles:
        assert n in str(e.value)


@pytest.mark.parametrize(("header", "needle"), [
    ("time,q_W_per_m,T_heater_C", "column 1"),
    ("time_s,q,T_heater_C", "column 2"),
    ("time_s,q_W_per_m,heater", "column 3"),
    ("time_s,q_W_per_m", "T_<sensor>_C"),
    ("time_s,q_W_per_m,T_a_C,T_a_C", "appears twice"),
])
def test_bad_headers(header: str, needle: str) -> None:
    with pytest.raises(RunCsvError, match=needle):
        read_run_csv(header + "\n-1,0,20\n0,5,20\n1,5,20\n")


def test_baseline_optional_when_asked() -> None:
    d = read_run_csv("time_s,q_W_per_m,T_heater_C\n0,5,20\n1,5,20.5\n2,5,20.7\n", require_baseline=False)
    assert d.time_s[0] == 0.0
