"""linerig import: logger exports in six dialects, written from known records, reduce to the k of the record.

Two known records: the exact line source (Carslaw & Jaeger 1959, §10.4: ΔT = q/(4πk)·E1(r²/4αt), the heating
and recovery superposed), built with scipy.special.exp1; and a run recorded from the simulated rig
(daemon/sim/records.py). Each is written as a run CSV and reduced with `linerig reduce --json`; each export is
turned back with `linerig import` and reduced the same way; k must agree within 0.2 %.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from logger_exports import DIALECTS, LEAD_S, Dialect, write_export, write_map
from scipy.special import exp1

from linerig.daemon.reduction.data import RunData
from linerig.daemon.runcsv import read_run_csv, write_run_csv
from linerig.daemon.sim.materials import get_material
from linerig.daemon.sim.records import recorded_run
from linerig.daemon.sim.rig_model import ProbeSpec, SimulatedRig
from linerig.tui.cli import main

ROOT = Path(__file__).resolve().parent.parent
K_SILT, RHO_C_SILT = 1.6, 2.9e6  # an invented saturated silt, W/(m·K) and J/(m³·K)
RADIUS_M, Q_W_PER_M, HEAT_S = 0.635e-3, 12.0, 600.0


def exact_record() -> RunData:
    """The ideal line source at the needle's radius: 120 s baseline, 600 s heating, 300 s recovery, 1 Hz."""
    alpha = K_SILT / RHO_C_SILT
    t = np.arange(-120.0, HEAT_S + 300.0 + 0.5, 1.0)
    e = np.where(t > 0, exp1(RADIUS_M**2 / (4 * alpha * np.clip(t, 1e-9, None))), 0.0)
    late = t > HEAT_S
    e[late] -= exp1(RADIUS_M**2 / (4 * alpha * (t[late] - HEAT_S)))
    q = np.where((t >= 0) & (t < HEAT_S), Q_W_PER_M, 0.0)
    return RunData(t, q, {"probe": 11.3 + Q_W_PER_M / (4 * math.pi * K_SILT) * e})


def simulated_record() -> RunData:
    """The default needle in the simulator's moist sand, 10 W/m for 300 s, 200 s of recovery."""
    rig = SimulatedRig(get_material("moist-sand"), ProbeSpec.default_needle(), seed=11)
    return recorded_run(rig, baseline_s=120.0, heat_s=300.0, recover_s=200.0, q_W_per_m=10.0)


RECORDS = {"exact": (exact_record, 60.0), "simulated": (simulated_record, 100.0)}  # record, heater length in mm
_ORIGINAL_K: dict[str, dict[str, float]] = {}


def cli(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    """`linerig ARGV...` through the command line's own entry point, in this process."""
    capsys.readouterr()
    rc = main(list(argv))
    out, err = capsys.readouterr()
    return rc, out, err


def reduced_k(capsys: pytest.CaptureFixture[str], *argv: str) -> dict[str, float]:
    rc, out, err = cli(capsys, "reduce", *argv, "--json")
    assert rc == 0, err
    return {s: r["k_W_per_mK"] for s, r in json.loads(out)["sensors"].items()}


def original_k(capsys: pytest.CaptureFixture[str], record: str, tmp_path: Path) -> dict[str, float]:
    if record not in _ORIGINAL_K:
        path = tmp_path / f"{record}-original.csv"
        write_run_csv(RECORDS[record][0](), path, ["the record the exports are written from"])
        _ORIGINAL_K[record] = reduced_k(capsys, str(path))
    return _ORIGINAL_K[record]


def test_the_exact_record_reduces_to_its_own_k(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    # the line through the late part of E1 has slope q/(4πk) (Carslaw & Jaeger 1959, §10.4)
    assert original_k(capsys, "exact", tmp_path)["probe"] == pytest.approx(K_SILT, rel=0.005)


@pytest.mark.parametrize("record", list(RECORDS))
@pytest.mark.parametrize("dialect", DIALECTS, ids=[d.name.split(",")[0] + f"-{i}" for i, d in enumerate(DIALECTS)])
def test_an_export_imports_to_its_record_and_reduces_to_the_same_k(
        capsys: pytest.CaptureFixture[str], tmp_path: Path, dialect: Dialect, record: str) -> None:
    make, length_mm = RECORDS[record]
    data = make()
    export = write_export(data, dialect, tmp_path / "logger.txt", length_mm)
    mapping = write_map(dialect, tmp_path / "map.toml", length_mm)
    run_csv = tmp_path / "run.csv"
    rc, out, err = cli(capsys, "import", str(export), "-o", str(run_csv),
                       *(["--map", str(mapping)] if mapping else []))
    assert rc == 0, err
    assert "heater on: line" in out and f"wrote {run_csv}" in out
    back = read_run_csv(run_csv)
    # time zero found again from the power column, and the logger's own clock (started LEAD_S earlier) gone
    np.testing.assert_allclose(back.time_s, data.time_s, atol=1e-6)
    np.testing.assert_allclose(back.q_W_per_m, data.q_W_per_m, rtol=1e-5, atol=1e-9)
    assert list(back.temps_C) == list(data.temps_C)
    for name in data.temps_C:
        np.testing.assert_allclose(back.temps_C[name], data.temps_C[name], atol=2e-5)
    k_import = reduced_k(capsys, str(run_csv))
    for sensor, k in original_k(capsys, record, tmp_path).items():
        assert k_import[sensor] == pytest.approx(k, rel=0.002)


def test_reduce_reads_an_export_directly_with_the_length_from_the_probe(
        capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    dialect = DIALECTS[0]  # volts and amps: needs the heater length
    data = exact_record()
    export = write_export(data, dialect, tmp_path / "bench.csv", 60.0)
    mapping = tmp_path / "map.toml"
    mapping.write_text('[columns]\nvoltage = "Heater U"\ncurrent = "Heater I"\n', encoding="utf-8")
    probe = tmp_path / "needle.toml"
    probe.write_text('[probe]\nname = "bench needle"\nheater_length_mm = 60.0\nradius_mm = 0.635\n'
                     '[[sensor]]\nname = "probe"\nradial_mm = 0.0\n', encoding="utf-8")
    rc, out, err = cli(capsys, "reduce", str(export), "--map", str(mapping), "--probe", str(probe), "--json")
    assert rc == 0, err
    assert "heater length: 60 mm (from the probe profile" in err  # the choices on stderr, the JSON clean
    k = json.loads(out)["sensors"]["probe"]["k_W_per_mK"]
    original = tmp_path / "original.csv"
    write_run_csv(data, original)
    assert k == pytest.approx(reduced_k(capsys, str(original), "--probe", str(probe))["probe"], rel=0.002)
    # a map and a profile that disagree on the length are refused, not averaged
    mapping.write_text(mapping.read_text() + "[heater]\nlength_mm = 100\n", encoding="utf-8")
    rc, _, err = cli(capsys, "reduce", str(export), "--map", str(mapping), "--probe", str(probe))
    assert rc == 2 and "map.toml line 5: [heater] length_mm = 100 mm, but the probe profile" in err


def test_the_installed_command_imports_and_echoes_each_choice(tmp_path: Path) -> None:
    export = write_export(exact_record(), DIALECTS[2], tmp_path / "export.csv", 60.0)
    run_csv = tmp_path / "run.csv"
    done = subprocess.run([sys.executable, "-m", "linerig.tui.cli", "import", str(export), "-o", str(run_csv)],
                          capture_output=True, text=True, cwd=ROOT, timeout=120)
    assert done.returncode == 0, done.stderr
    for said in ("separator: comma", "time: column 'time_utc'", "heater power: column 'q (W/m)'",
                 "date order: year-first", "heater on: line 122 (logger time 2024-04-23T10:17:00Z)",
                 "baseline: 120 rows, 120 s before heating"):
        assert said in done.stdout
    text = run_csv.read_text(encoding="utf-8")
    assert text.startswith(f"# imported from {export} by linerig import")
    assert "# - heater on: line 122" in text  # the choices travel with the run
    assert LEAD_S == 37.0 and "10:17:00" in done.stdout  # logger start 10:14:23 + 37 s lead + 120 s baseline
