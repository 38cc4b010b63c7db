"""``linerig reduce`` end to end through the real entry point."""

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from linerig.daemon.reduction.synthetic import Medium, make_run
from linerig.daemon.runcsv import write_run_csv

ROOT = Path(__file__).resolve().parents[1]
PROFILE = """[probe]
name = "test needle"
kind = "single"
heater_length_mm = 100.0
radius_mm = 0.635
heat_capacity_MJ_per_m3K = 2.5
[[sensor]]
name = "heater"
radial_mm = 0.0
"""


def _cli(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "linerig.tui.cli", "reduce", *args], capture_output=True, text=True,
                          cwd=ROOT, timeout=60)


@pytest.fixture
def run_csv(tmp_path: Path) -> Path:
    # invented sandy-loam run: probe model (Blackwell 1954) with k = 1.5 W/(m·K), ρc = 2.5 MJ/(m³·K)
    d = make_run(Medium(1.5, 2.5e6), noise_K=0.003, recover_s=300, baseline_s=300,
                 rng=np.random.default_rng(0))
    p = tmp_path / "run.csv"
    write_run_csv(d, p, comments=["invented test run"])
    return p


def test_json_output_has_interface_keys(run_csv: Path, tmp_path: Path) -> None:
    prof = tmp_path / "p.toml"
    prof.write_text(PROFILE)
    out = _cli(str(run_csv), "--json", "--probe", str(prof), "--plot", str(tmp_path / "r.png"))
    assert out.returncode == 0, out.stderr
    s = json.loads(out.stdout)["sensors"]["heater"]
    for key in ("k_W_per_mK", "k_u_W_per_mK", "resistivity_mK_per_W", "alpha_mm2_per_s", "rho_c_MJ_per_m3K",
                "window_s", "stable_at_s", "method", "flags"):
        assert key in s
    assert s["k_W_per_mK"] == pytest.approx(1.5, rel=0.02)
    assert s["resistivity_mK_per_W"] == pytest.approx(1 / s["k_W_per_mK"])
    assert (tmp_path / "r.png").stat().st_size > 1000


def test_dimension_options_and_table(run_csv: Path) -> None:
    out = _cli(str(run_csv), "--radius-mm", "0.635", "--probe-heat-capacity", "2.5", "--calibration-factor",
               "1.02")
    assert out.returncode == 0, out.stderr
    assert "heater" in out.stdout and "W/(m" in out.stdout


@pytest.mark.parametrize(("text", "needle"), [
    ("time_s,q_W_per_m,T_heater_C\n-1,0,20\n0,5,x\n1,5,20\n", "column T_heater_C"),
    ("time_s,q_W_per_m,T_heater_C\n-1,0,20\n0,5,20\n0,5,20\n", "strictly increasing"),
    ("time_s,T_heater_C\n-1,20\n0,20\n", "column 2"),
])
def test_bad_input_exit_2_and_no_number(tmp_path: Path, text: str, needle: str) -> None:
    p = tmp_path / "bad.csv"
    p.write_text(text)
    out = _cli(str(p), "--json")
    assert out.returncode == 2
    assert needle in out.stderr
    assert out.stdout == ""


def test_bad_spacing_option(run_csv: Path) -> None:
    out = _cli(str(run_csv), "--radius-mm", "0.6", "--spacing", "far")
    assert out.returncode == 2 and "SENSOR=MM" in out.stderr
