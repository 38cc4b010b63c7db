"""rig.toml: what it accepts, and errors that name file, key and line and say what is expected."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from linerig.daemon import resources
from linerig.daemon.config import RigConfig, key_line, load_config, parse_config
from linerig.daemon.errors import ConfigError

ROOT = Path(__file__).resolve().parent.parent
PROFILE = resources.default_probe_path()

GOOD = f"""\
# a lab rig
[devices]
frontend = "/dev/linerig-frontend"
supply = "socket://127.0.0.1:5025"
rate_hz = 2

[daemon]
socket = "run/linerigd.sock"
database = "/var/lib/linerig/linerig.db"
max_database_MB = 500

[probes]
profiles = ["{PROFILE}"]
active = "DEMO-0001"

[limits]
max_power_W_per_m = 40
max_rise_K = 8.5
lease_s = 0.5

[run]
heat_s = 900
baseline_s = 120

[presets.quick]
heat_s = 300
auto_stop = true
stop_tolerance = 0.03

[presets."long soak"]
heat_s = 1800
cycles = 3
reequilibrate_s = 3600
"""


def test_a_full_file_is_read(tmp_path: Path) -> None:
    cfg = parse_config(GOOD, "rig.toml", tmp_path)
    assert cfg.devices.frontend == "/dev/linerig-frontend" and cfg.devices.rate_hz == 2.0
    assert cfg.devices.supply == "socket://127.0.0.1:5025"
    assert cfg.daemon.socket == tmp_path / "run" / "linerigd.sock"  # relative to the file
    assert cfg.daemon.max_database_MB == 500
    assert cfg.probe.serial == "DEMO-0001" and len(cfg.probes) == 1
    assert cfg.limits.max_power_W_per_m == 40 and cfg.limits.lease_s == 0.5
    assert cfg.limits.max_probe_C == 85.0  # unset limits keep their defaults
    assert cfg.plan.heat_s == 900 and cfg.plan.baseline_s == 120
    assert cfg.presets["quick"].heat_s == 300 and cfg.presets["quick"].auto_stop
    assert cfg.presets["quick"].stop_tolerance == 0.03 and cfg.plan.stop_tolerance == 0.02
    assert cfg.presets["quick"].baseline_s == 120  # a preset starts from [run]
    assert cfg.presets["long soak"].cycles == 3


def test_defaults_without_any_file() -> None:
    cfg = RigConfig()
    assert cfg.devices.frontend is None and cfg.presets == {}
    assert cfg.probe.name == "default lab needle"


def test_key_line_finds_tables_dotted_and_quoted_keys() -> None:
    assert key_line(GOOD, ["limits", "max_rise_K"]) == 18
    assert key_line(GOOD, ["presets", "long soak", "cycles"]) == 32
    assert key_line(GOOD, ["presets", "quick"]) == 25
    assert key_line("a.b = 1\n[c]\nd = 2\n", ["a", "b"]) == 1
    assert key_line("[x]\ny = 1", ["x", "z"]) is None


@pytest.mark.parametrize(("old", "new", "line", "words"), [
    ("max_rise_K = 8.5", "max_rise_K = -1", 18, "limits.max_rise_K: expected at least 0.1 K"),
    ("max_rise_K = 8.5", 'max_rise_K = "hot"', 18, "expected a finite number"),
    ("lease_s = 0.5", "lease_s = 2", 19, "at most 1 s"),
    ("max_rise_K = 8.5", "max_rise = 8.5", 18, "limits.max_rise: unknown key; expected one of:"),
    # limits that defeat themselves, or sit above the front end's flashed ones (hardware/firmware/probefw/limits.py)
    ("lease_s = 0.5", "lease_s = 0.001", 19, "limits.lease_s: expected at least 0.2 s"),
    ("lease_s = 0.5", "stale_after_s = 1e9", 19, "limits.stale_after_s: expected at most 10 s"),
    ("lease_s = 0.5", "max_heating_s = 1e12", 19, "expected at most 3600 s (the front end's flashed limit)"),
    ("lease_s = 0.5", "max_probe_C = 500", 19, "expected at most 95 °C (the front end's flashed limit)"),
    ("lease_s = 0.5", "precheck_margin_K = 1000", 19, "limits.precheck_margin_K: expected at most 20 K"),
    ("lease_s = 0.5", "min_supply_V = 5", 19, "limits.min_supply_V: expected at least 9 V"),
    ("lease_s = 0.5", "frame_window = 1e6", 19, "limits.frame_window: expected a whole number from 5 to 1000"),
    ("heat_s = 900", "heat_s = 0", 22, "run.heat_s: expected a number > 0"),
    ("heat_s = 900", "heat_s = 4000", 22, "run.heat_s: heating time 4000 s is above the limit 3600 s"),
    ("auto_stop = true", 'auto_stop = "yes"', 27, "presets.quick.auto_stop: expected true or false"),
    ("cycles = 3", "cycles = 0", 32, "expected a whole number from 1 to 1000"),
    ("stop_tolerance = 0.03", "stop_tolerance = 2", 28, "presets.quick.stop_tolerance: expected a fraction above 0 "
                                                        "and at most 0.2"),
    ("rate_hz = 2", "rate_hz = 50", 5, "devices.rate_hz: expected a sample rate from 0.1 to 20 Hz"),
    ('frontend = "/dev/linerig-frontend"', 'frontend = "ttyACM0"', 3, "absolute device path or a pyserial URL"),
    ('active = "DEMO-0001"', 'active = "NOPE-1"', 14, "probes.active: expected the serial or name of a listed"),
    ("max_database_MB = 500", "max_database_MB = 0", 10, "expected a size in MB > 0"),
    ("[presets.quick]", "[preset.quick]", 25, "preset: unknown section"),
])
def test_errors_name_file_key_line_and_what_is_expected(old: str, new: str, line: int, words: str) -> None:
    assert old in GOOD
    with pytest.raises(ConfigError) as e:
        parse_config(GOOD.replace(old, new), "/etc/linerig/rig.toml")
    msg = str(e.value)
    assert msg.startswith(f"/etc/linerig/rig.toml line {line}: "), msg
    assert words in msg, msg


def test_the_power_limit_over_the_whole_heater_stays_under_the_front_ends() -> None:
    rod = ROOT / "hardware" / "probes" / "field-rod.toml"   # 1.5 m heated length
    text = f'[probes]\nprofiles = ["{rod}"]\n[limits]\nmax_power_W_per_m = 40\n'
    with pytest.raises(ConfigError, match=r"line 4: limits.max_power_W_per_m: 40 W/m over the 1.5 m heater is 60.0 W, "
                                          r"above 45 W \(the front end's flashed limit\); at most 30 W/m"):
        parse_config(text, "rig.toml")
    parse_config(text.replace("= 40", "= 30"), "rig.toml")
    # a SCPI supply heats instead: the front end's total-power limit does not bind, the supply's ceilings do
    parse_config('[devices]\nsupply = "/dev/linerig-supply"\n' + text, "rig.toml")


def test_a_config_that_is_not_utf8_is_one_line_naming_file_and_line(tmp_path: Path) -> None:
    bad = tmp_path / "rig.toml"
    bad.write_bytes(b"[limits]\n# max \xb0C\nmax_rise_K = 8\n")  # a Latin-1 degree sign
    with pytest.raises(ConfigError, match=r"rig.toml line 2: byte 0xB0 is not UTF-8 text"):
        load_config(bad)
    done = subprocess.run([sys.executable, "-m", "linerig.daemon.main", "--config", str(bad), "--check-config"],
                          capture_output=True, text=True, timeout=30, cwd=ROOT)
    assert done.returncode == 2 and done.stderr.count("\n") == 1 and "Traceback" not in done.stderr, done.stderr


def test_an_unknown_group_on_the_command_line_is_one_line(tmp_path: Path) -> None:
    done = subprocess.run([sys.executable, "-m", "linerig.daemon.main", "--frontend", "/dev/null", "--group",
                           "no-such-group-here", "--socket", str(tmp_path / "s.sock"), "--db", str(tmp_path / "r.db")],
                          capture_output=True, text=True, timeout=30, cwd=ROOT)
    assert done.returncode == 2 and "Traceback" not in done.stderr, done.stderr
    assert done.stderr.strip().splitlines() == ["linerigd: --group no-such-group-here: no such group on this machine; "
                                                "create it (see systemd/README.md) or leave --group out"]
    assert not (tmp_path / "r.db").exists()


def test_a_plan_sensor_must_be_on_the_probe() -> None:
    with pytest.raises(ConfigError, match=r"line 2: run.sensor: expected one of the active probe's sensors"):
        parse_config('[run]\nsensor = "far"\n', "rig.toml")


def test_bad_toml_reports_tomllibs_line(tmp_path: Path) -> None:
    with pytest.raises(ConfigError, match=r"rig.toml: not valid TOML: .*line 2"):
        parse_config("[limits]\nmax_rise_K = = 3\n", "rig.toml")


def test_a_broken_probe_profile_is_reported_against_the_config_key(tmp_path: Path) -> None:
    (tmp_path / "bad.toml").write_text('[probe]\nname = "x"\nradius_mm = -1\nheater_length_mm = 100\n')
    text = '[probes]\nprofiles = ["bad.toml"]\n'
    with pytest.raises(ConfigError) as e:
        parse_config(text, str(tmp_path / "rig.toml"), tmp_path)
    assert "rig.toml line 2: probes.profiles: profile 'bad.toml' cannot be used" in str(e.value)
    assert "radius_mm must be > 0" in str(e.value)


def test_unknown_group_and_missing_file(tmp_path: Path) -> None:
    with pytest.raises(ConfigError, match=r"line 2: daemon.group: no group 'no-such-group-here'"):
        parse_config('[daemon]\ngroup = "no-such-group-here"\n', "rig.toml")
    with pytest.raises(ConfigError, match="no such file"):
        load_config(tmp_path / "missing.toml")


def test_check_config_command_and_exit_code_2_on_a_bad_file(tmp_path: Path) -> None:
    good = tmp_path / "rig.toml"
    good.write_text(GOOD)
    done = subprocess.run([sys.executable, "-m", "linerig.daemon.main", "--config", str(good), "--check-config"],
                          capture_output=True, text=True, timeout=30, cwd=ROOT)
    assert done.returncode == 0, done.stderr
    assert "presets: long soak, quick" in done.stdout
    good.write_text(GOOD.replace("max_rise_K = 8.5", "max_rise_K = 0"))
    done = subprocess.run([sys.executable, "-m", "linerig.daemon.main", "--config", str(good), "--check-config"],
                          capture_output=True, text=True, timeout=30, cwd=ROOT)
    assert done.returncode == 2
    assert f"ConfigError: {good} line 18: limits.max_rise_K: expected at least 0.1 K" in done.stderr


def test_without_config_or_front_end_the_daemon_says_what_to_do(tmp_path: Path) -> None:
    done = subprocess.run([sys.executable, "-m", "linerig.daemon.main", "--config", str(tmp_path / "none.toml")],
                          capture_output=True, text=True, timeout=30, cwd=ROOT)
    assert done.returncode == 2 and "no such file" in done.stderr
    empty = tmp_path / "empty.toml"
    empty.write_text("")
    done = subprocess.run([sys.executable, "-m", "linerig.daemon.main", "--config", str(empty)],
                          capture_output=True, text=True, timeout=30, cwd=ROOT)
    assert done.returncode == 2 and "give --frontend PORT" in done.stderr


def test_the_example_for_etc_linerig_parses(tmp_path: Path) -> None:
    text = resources.service_file("rig.toml.example").read_text()
    (tmp_path / "probes").mkdir()
    (tmp_path / "probes" / "lab-needle.toml").write_text(PROFILE.read_text())
    text = text.replace('group = "linerig"', 'group = "root"')  # the service's group may not exist here
    cfg = parse_config(text, str(tmp_path / "rig.toml"), tmp_path)
    assert cfg.devices.frontend == "/dev/linerig-frontend" and cfg.presets["lab-cycles"].cycles == 5


def test_the_service_unit_passes_systemd_analyze_verify(tmp_path: Path) -> None:
    """The unit as linerig-setup installs it: pointed at this environment's commands."""
    import shutil

    from linerig.daemon.install.render import unit_text

    if shutil.which("systemd-analyze") is None:
        pytest.skip("systemd-analyze is not installed here")
    if not (Path(sys.executable).parent / "linerigd").exists():
        pytest.skip("linerigd is not installed in this environment")
    (tmp_path / "linerigd.service").write_text(unit_text(Path(sys.executable).parent))
    done = subprocess.run(["systemd-analyze", "verify", str(tmp_path / "linerigd.service")], capture_output=True,
                          text=True, timeout=60)
    assert done.returncode == 0 and "linerigd.service" not in done.stderr, done.stderr
