"""Probe profile TOML: the schema others write to, and errors that name the file and key."""

from pathlib import Path

import pytest

from linerig.daemon.probe import ProbeProfileError, load_probe_profile

GOOD = """
[probe]
name = "LN-100 lab needle"
serial = "LN100-0007"
kind = "dual"
heater_length_mm = 100.0
radius_mm = 0.635
heat_capacity_MJ_per_m3K = 2.5
heater_resistance_ohm = 41.0
heater_tcr_per_K = 0.0
thermocouple = "T"
[[sensor]]
name = "heater"
radial_mm = 0.0
axial_mm = 50.0
[[sensor]]
name = "far"
radial_mm = 6.0
axial_mm = 50.0
"""


def _write(tmp_path: Path, text: str) -> Path:
    p = tmp_path / "probe.toml"
    p.write_text(text)
    return p


def test_loads_and_gives_si(tmp_path: Path) -> None:
    p = load_probe_profile(_write(tmp_path, GOOD))
    assert p.radius_m == pytest.approx(0.635e-3)
    assert p.length_m == pytest.approx(0.1)
    assert p.heat_capacity_J_per_m3K == pytest.approx(2.5e6)
    assert p.spacing_m("far") == pytest.approx(6e-3)
    assert p.sensor_radius_m("heater") == pytest.approx(0.635e-3)
    assert p.sensor("far").axial_mm == 50.0
    assert p.with_sensor("far", 6.2).spacing_m("far") == pytest.approx(6.2e-3)


@pytest.mark.parametrize(("old", "new", "needle"), [
    ('radius_mm = 0.635', 'radius_mm = -1', "probe.radius_mm"),
    ('radius_mm = 0.635', '', "probe.radius_mm"),
    ('kind = "dual"', 'kind = "triple"', "probe.kind"),
    ('heater_length_mm = 100.0', 'heater_length_mm = "long"', "probe.heater_length_mm"),
    ('radial_mm = 6.0', 'radial_mm = 0.3', "sensor[1].radial_mm"),
    ('name = "far"', 'name = "heater"', "sensor[1].name"),
    ('thermocouple = "T"', 'thermocouple = "Q"', "probe.thermocouple"),
    ('serial = "LN100-0007"', 'serial = "x"\ncolour = "red"', "probe.colour"),
])
def test_errors_name_file_and_key(tmp_path: Path, old: str, new: str, needle: str) -> None:
    path = _write(tmp_path, GOOD.replace(old, new, 1))
    with pytest.raises(ProbeProfileError) as e:
        load_probe_profile(path)
    assert needle in str(e.value)
    assert str(path) in str(e.value)


def test_bad_toml_and_missing_file(tmp_path: Path) -> None:
    with pytest.raises(ProbeProfileError, match="not valid TOML"):
        load_probe_profile(_write(tmp_path, "[probe\nname="))
    with pytest.raises(ProbeProfileError, match="cannot read"):
        load_probe_profile(tmp_path / "absent.toml")
    assert issubclass(ProbeProfileError, ValueError)
