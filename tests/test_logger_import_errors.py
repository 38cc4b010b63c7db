"""linerig import refuses what it cannot read without a guess: exit 2, the line and column named, and the map key
that settles it. Each case is a small invented export, written as a file and run through the real command."""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable
from pathlib import Path

import pytest

from linerig.daemon.runcsv import read_run_csv
from linerig.tui.cli import main

T0 = dt.datetime(2024, 4, 23, 10, 0, 0)


def lines(*, n_base: int = 5, n_heat: int = 10, sep: str = ";", stamp: Callable[[dt.datetime], str] | None = None,
          header: str = "Timestamp;T1;q", units: str | None = ";°C;W/m", comma: bool = True) -> list[str]:
    """A small export: a timestamp, one temperature and the power per metre, baseline then heating at 5 W/m.
    Line 1 is the header, line 2 the units (when given), data from the next line."""
    stamp = stamp or (lambda t: t.strftime("%d.%m.%Y %H:%M:%S"))
    out = [header.replace(";", sep)] + ([units.replace(";", sep)] if units is not None else [])
    for i in range(n_base + n_heat):
        temp = 21.5 + (0.1 * (i - n_base + 1) if i >= n_base else 0.0)
        q = 5.0 if i >= n_base else 0.0
        cells = [stamp(T0 + dt.timedelta(seconds=i)), f"{temp:.3f}", f"{q:.2f}"]
        if comma:
            cells[1:] = [c.replace(".", ",") for c in cells[1:]]
        out.append(sep.join(cells))
    return out


def with_cell(text: list[str], line: int, column: int, value: str) -> list[str]:
    """The export with one cell (file line, column from 1) replaced."""
    cells = text[line - 1].split(";")
    cells[column - 1] = value
    return [*text[: line - 1], ";".join(cells), *text[line:]]


def run_import(capsys: pytest.CaptureFixture[str], tmp_path: Path, text: list[str] | str,
               mapping: str | None = None, *extra: str) -> tuple[int, str, str]:
    src = tmp_path / "logger.csv"
    src.write_text(text if isinstance(text, str) else "\n".join(text) + "\n", encoding="utf-8")
    argv = ["import", str(src), "-o", str(tmp_path / "run.csv"), *extra]
    if mapping is not None:
        (tmp_path / "map.toml").write_text(mapping, encoding="utf-8")
        argv += ["--map", str(tmp_path / "map.toml")]
    capsys.readouterr()
    rc = main(argv)
    out, err = capsys.readouterr()
    return rc, out, err


def refused(capsys: pytest.CaptureFixture[str], tmp_path: Path, text: list[str] | str, *said: str,
            mapping: str | None = None) -> str:
    rc, _, err = run_import(capsys, tmp_path, text, mapping)
    assert rc == 2, err
    for s in said:
        assert s in err, f"{s!r} not in {err!r}"
    assert not (tmp_path / "run.csv").exists()  # nothing half-made is left behind
    return err


def test_the_small_export_itself_imports(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    rc, out, err = run_import(capsys, tmp_path, lines())
    assert rc == 0, err
    run = read_run_csv(tmp_path / "run.csv")
    assert run.time_s[0] == -5.0 and run.q_W_per_m[5] == 5.0 and run.temps_C["T1"][0] == 21.5
    assert "heater on: line 8 (logger time 23.04.2024 10:00:05)" in out


def test_decimal_commas_in_a_comma_separated_file(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    text = lines(sep=",", units=None, header="Timestamp,T1 (°C),q (W/m)")  # "21,500" splits into two fields
    refused(capsys, tmp_path, text, "line 2 splits into 5 fields at commas but line 1 above it into fewer",
            "decimal commas in a comma-separated file", "semicolons or tabs")


def test_a_day_month_order_the_file_does_not_settle(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    text = lines(stamp=lambda t: t.replace(day=3, month=4).strftime("%d/%m/%Y %H:%M:%S"))
    refused(capsys, tmp_path, text, "line 3, column 'Timestamp': '03/04/2024 10:00:00'", "day/month order",
            '[time] date_order = "day-first" or "month-first"')
    rc, out, err = run_import(capsys, tmp_path, text, '[time]\ndate_order = "month-first"\n')
    assert rc == 0, err
    assert "date order: month-first (from the map)" in out
    # the map cannot contradict a date that decides it
    text[4] = text[4].replace("03/04/2024", "13/04/2024")
    (tmp_path / "run.csv").unlink()
    refused(capsys, tmp_path, text, "line 5, column 'Timestamp': '13/04/2024 10:00:02' is day-first",
            "[time] date_order = 'month-first'", mapping='[time]\ndate_order = "month-first"\n')


def test_two_columns_that_could_be_the_time(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    text = lines(header="Timestamp;Elapsed;T1;q", units=";s;°C;W/m")
    text[2:] = [f"{row.split(';')[0]};{i},0;{';'.join(row.split(';')[1:])}" for i, row in enumerate(text[2:])]
    refused(capsys, tmp_path, text, "more than one column could be the time", "column 1 'Timestamp' (timestamp)",
            "column 2 'Elapsed' (number)", "set [columns] time")
    rc, out, err = run_import(capsys, tmp_path, text, '[columns]\ntime = "Elapsed"\n')
    assert rc == 0, err
    assert "time: column 'Elapsed' (number) (from the map)" in out


def test_both_decimal_marks_in_one_file(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    text = with_cell(lines(), 10, 2, "21.600")
    refused(capsys, tmp_path, text, "line 10, column 'T1': '21.600' has a decimal point",
            "line 3, column 'T1': '21,500' a decimal comma", '[file] decimal = "." or ","')


@pytest.mark.parametrize(("cell", "said"), [("21,6x", "'21,6x' is not a number (decimal mark ',')"),
                                            ("", "is empty"), ("NaN", "'NaN' is not a number")])
def test_a_cell_that_is_not_a_number(capsys: pytest.CaptureFixture[str], tmp_path: Path, cell: str,
                                     said: str) -> None:
    text = with_cell(lines(), 10, 2, cell)
    refused(capsys, tmp_path, text, f"line 10, column 'T1': {said}", "correct the cell or remove the row")


def test_time_that_does_not_increase(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    text = lines()
    text[6] = text[6].replace("10:00:04", "10:00:03")
    refused(capsys, tmp_path, text, "line 7, column 'Timestamp': '23.04.2024 10:00:03' is not later than line 6's")


def test_a_quote_left_open(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    text = with_cell(lines(), 9, 2, '"21,800')
    refused(capsys, tmp_path, text, "line 9: a quoted cell is not closed")


def test_no_baseline_before_the_heater(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    refused(capsys, tmp_path, lines(n_base=0), "line 3, column 'q': the heater is on from the first data row",
            "no baseline")


def test_a_second_heating_in_one_file(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    text = lines(n_heat=4) + lines(n_base=3, n_heat=3)[2:]
    for i in range(11, len(text)):  # the second block continues the clock
        t = T0 + dt.timedelta(seconds=i - 2)
        text[i] = ";".join([t.strftime("%d.%m.%Y %H:%M:%S"), *text[i].split(";")[1:]])
    refused(capsys, tmp_path, text, "line 15, column 'q': the heater is on again after going off at line 12",
            "split the file", "[heater] on_fraction")


def test_a_heater_not_quite_off_is_not_written_as_off(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    text = with_cell(lines(), 4, 3, "0,60")  # 12 % of the 5 W/m plateau in the baseline
    refused(capsys, tmp_path, text, "line 4, column 'q': the heater reads 0.6 with the heater taken as off",
            "more than 5% of its plateau", "[heater] on_fraction")
    rc, out, err = run_import(capsys, tmp_path, with_cell(lines(), 4, 3, "0,02"))  # a shunt's offset
    assert rc == 0, err
    assert "off readings: up to 0.02 W/m, written as 0" in out
    assert read_run_csv(tmp_path / "run.csv").q_W_per_m[1] == 0.0


def test_watts_without_a_heater_length(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    refused(capsys, tmp_path, lines(header="Timestamp;T1;P", units=";°C;W"), "the heater power is in W",
            "set [heater] length_mm")
    rc, _, err = run_import(capsys, tmp_path, lines(header="Timestamp;T1;P", units=";°C;W"),
                              "[heater]\nlength_mm = 50\n")
    assert rc == 0, err
    assert read_run_csv(tmp_path / "run.csv").q_W_per_m.max() == pytest.approx(100.0)  # 5 W over 50 mm


def test_two_voltage_columns_need_the_map(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    text = lines(header="Timestamp;T1;Heater U;Heater I;Battery", units=";°C;V;A;V", comma=False)
    text[2:] = [f"{r};{'2.5;2.0' if r.endswith('5.00') else '0;0'};12.6" for r in text[2:]]
    text[2:] = [";".join(r.split(";")[:2] + r.split(";")[3:]) for r in text[2:]]  # drop the q column
    refused(capsys, tmp_path, text, "columns 'Heater U', 'Battery' are all in volts",
            "set [columns] voltage and [columns] current")
    rc, _, err = run_import(capsys, tmp_path, text,
                            '[columns]\nvoltage = "Heater U"\ncurrent = "Heater I"\n[heater]\nlength_mm = 100\n')
    assert rc == 0, err
    assert read_run_csv(tmp_path / "run.csv").q_W_per_m.max() == pytest.approx(50.0)  # 2.5 V × 2 A / 0.1 m


def test_no_power_and_no_temperature_columns(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    refused(capsys, tmp_path, lines(units=";°C;"), "no heater power found", "set [columns] q, power")
    refused(capsys, tmp_path, lines(units=";;W/m"), "no temperature column found",
            'set [columns] temperatures = { sensor = "column" }')


def test_a_column_in_the_wrong_unit_for_its_role(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    refused(capsys, tmp_path, lines(units=";V;W/m"), "column 'T1' is in V (units line 2), not a temperature",
            "[units] \"T1\"", mapping='[columns]\ntemperatures = { needle = "T1" }\n')


def test_mistakes_in_the_map_name_their_line(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    text = lines()
    refused(capsys, tmp_path, text, "map.toml line 2: [columns] temprature: unknown key",
            mapping='[columns]\ntemprature = "T1"\n')
    refused(capsys, tmp_path, text, "map.toml line 3: [columns] temperatures.probe: no column 'Ch9'",
            "the header has 'Timestamp', 'T1', 'q'", mapping='[columns]\n\ntemperatures = { probe = "Ch9" }\n')
    refused(capsys, tmp_path, text, "map.toml line 2: [columns] voltage: voltage without current",
            mapping='[columns]\nvoltage = "q"\n')
    refused(capsys, tmp_path, text, "map.toml: not valid TOML", "line 2",
            mapping='[heater]\nlength_mm = = 60\n')
    refused(capsys, tmp_path, text, "map.toml line 3: [file] decimal: the comma cannot be both",
            mapping='[file]\ndelimiter = ","\ndecimal = ","\n')
    refused(capsys, tmp_path, text, "map.toml line 2: [units] T1: 'degR' is not a unit linerig reads",
            mapping='[units]\nT1 = "degR"\n')


def test_an_existing_run_csv_is_never_overwritten_without_force(capsys: pytest.CaptureFixture[str],
                                                               tmp_path: Path) -> None:
    out = tmp_path / "run.csv"
    out.write_text("# somebody's earlier run\n", encoding="utf-8")
    rc, _, err = run_import(capsys, tmp_path, lines())
    assert rc == 2 and "run.csv exists" in err and "--force" in err
    assert out.read_text(encoding="utf-8") == "# somebody's earlier run\n"
    rc, _, err = run_import(capsys, tmp_path, lines(), None, "--force")
    assert rc == 0, err
    assert read_run_csv(out).time_s.size == 15
