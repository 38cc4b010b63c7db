"""The logger importer's parts on small invented inputs: units in names, clocks, footers, columns by number."""

from __future__ import annotations

import numpy as np
import pytest

from linerig.daemon.logger_import import LoggerMap, import_logger, parse_map
from linerig.daemon.logger_import.clock import Cells, from_clock, from_timestamps
from linerig.daemon.logger_import.units import parse_unit, split_name


@pytest.mark.parametrize(("name", "split"), [
    ("Ch1 (°C)", ("Ch1", "°C")), ("T needle [degC]", ("T needle", "degC")), ("Ch2 / K", ("Ch2", "K")),
    ("Elapsed sec", ("Elapsed", "sec")), ("Heater V", ("Heater V", None)), ("Probe C", ("Probe C", None)),
    ("Ch 1 (probe)", ("Ch 1 (probe)", None)), ("q (W/m)", ("q", "W/m")), ("I heater (mA)", ("I heater", "mA")),
])
def test_a_unit_is_read_from_a_name_only_where_it_cannot_be_a_label(name: str, split: tuple[str, str | None]) -> None:
    assert split_name(name) == split


def test_temperature_units_convert_to_celsius() -> None:
    # ITS-90 defines 0 °C as 273.15 K; 212 °F is 100 °C by the Fahrenheit scale's definition
    kelvin, fahrenheit = parse_unit("K"), parse_unit("°F")
    assert kelvin is not None and fahrenheit is not None
    np.testing.assert_allclose(kelvin.convert(np.array([273.15, 300.0])), [0.0, 26.85])
    np.testing.assert_allclose(fahrenheit.convert(np.array([32.0, 212.0])), [0.0, 100.0])


def _cells(*texts: str) -> Cells:
    return Cells("log.txt", "'Time'", list(range(2, 2 + len(texts))), list(texts))


def test_twelve_o_clock_on_a_twelve_hour_clock() -> None:
    wall, how = from_timestamps(_cells("04/23/2024 11:59:59 PM", "04/24/2024 12:00:01 AM",
                                       "04/24/2024 12:00:03 PM"), None)
    assert how.value == "month-first"
    np.testing.assert_array_equal(wall.seconds, [0.0, 2.0, 2.0 + 12 * 3600 + 2])


def test_clock_times_with_fractions_and_zones() -> None:
    wall, _ = from_timestamps(_cells("2024-04-23T09:59:59.75+01:00", "2024-04-23 09:00:00,25Z"), None)
    np.testing.assert_allclose(wall.seconds, [0.0, 0.5])  # 08:59:59.75 UTC, then 09:00:00.25 UTC
    wall = from_clock(_cells("23:59:59", "00:00:00.5"))
    np.testing.assert_allclose(wall.seconds, [0.0, 1.5])
    assert wall.notes[0].value == "passed before line 3"


def _export(*rows: str, header: str = "t (s)\tT (K)\tP (mW)") -> bytes:
    return ("\n".join([header, *rows]) + "\n").encode()


def test_a_footer_is_left_out_and_said_and_columns_can_be_named_by_number() -> None:
    rows = [f"{i}\t{290.0 + 0.01 * max(i - 2, 0):.2f}\t{0 if i < 3 else 500}" for i in range(8)]
    m = parse_map("[columns]\ntime = 1\ntemperatures = { tip = 2 }\npower = 3\n[heater]\nlength_mm = 50\n", "m")
    imported = import_logger(_export(*rows, "end of log"), "log.txt", m)
    d = imported.data
    np.testing.assert_array_equal(d.time_s, np.arange(8) - 3.0)
    np.testing.assert_allclose(d.temps_C["tip"][:3], 16.85)  # 290 K
    np.testing.assert_allclose(d.q_W_per_m, [0, 0, 0, 10, 10, 10, 10, 10])  # 0.5 W over 50 mm
    said = [c.text() for c in imported.choices]
    assert "left out: line 10 (at the end, not 3 fields like the header)" in said


def test_a_short_line_inside_the_data_is_an_error_not_a_footer() -> None:
    rows = [f"{i}\t{290.0 + 0.01 * i:.2f}\t{0 if i < 3 else 500}" for i in range(20)]
    rows[4] = "4\t290.04"
    with pytest.raises(ValueError, match=r"log.txt: line 6: 2 fields, the header on line 1 has 3"):
        import_logger(_export(*rows), "log.txt", LoggerMap(length_mm=50.0))


def test_elapsed_milliseconds_and_milliamps_are_scaled() -> None:
    rows = [f"{i * 250};{20 + 0.1 * max(i - 2, 0):.1f};{0 if i < 2 else 12.0};{0 if i < 2 else 250}"
            for i in range(6)]
    text = _export(*rows, header="Time (ms);Temp (°C);Heater (V);Heater (mA)")
    imported = import_logger(text, "log.txt", LoggerMap(length_mm=100.0))
    np.testing.assert_allclose(imported.data.time_s, [-0.5, -0.25, 0.0, 0.25, 0.5, 0.75])
    np.testing.assert_allclose(imported.data.q_W_per_m[2:], 30.0)  # 12 V × 0.25 A over 0.1 m
