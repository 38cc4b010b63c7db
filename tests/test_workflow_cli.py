"""The CSV-driven workflow commands: dry-out series and surface-step cylinder records (invented data)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from linerig.daemon.workflows.cylinder import SurfaceSteps, model_centre_C
from linerig.daemon.workflows.dryout import Material, conductivity
from linerig.tui.cli import main

EXAMPLES = Path(__file__).resolve().parent.parent / "examples" / "examplemoor"


def test_dryout_csv_with_critical_moisture_and_report(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    rc = main(["dryout", "--csv", str(EXAMPLES / "dryout_moor_sand.csv"), "--quartz", "0.55", "--json",
               "--report", str(tmp_path / "d.html"), "--plot", str(tmp_path / "d.png")])
    out = capsys.readouterr()
    assert rc == 0, out.err
    doc = json.loads(out.out)
    assert set(doc["fits"]) == {"johansen", "cote-konrad", "lu"}
    # the example was made from Côté–Konrad with λ_s 4.6, κ 3.2 and 1 % noise
    ck = doc["fits"]["cote-konrad"]
    assert ck["lambda_s_W_per_mK"] == pytest.approx(4.6, rel=0.03)
    assert ck["shape"] == pytest.approx(3.2, rel=0.15)
    assert 0.5 < doc["critical_moisture"]["moisture_pct"] < 5
    html = (tmp_path / "d.html").read_text(encoding="utf-8")
    assert "licensed engineer" in html and "Annex F" in html and "Côté" in html


def test_dryout_csv_in_resistivity_units(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    mat = Material(quartz=0.8)
    w = [1, 2, 4, 8, 12, 16]
    rho = [100 / float(conductivity("johansen", x / 100, 1590.0, mat)) for x in w]
    p = tmp_path / "r.csv"
    p.write_text("moisture_pct,dry_density_kg_per_m3,resistivity_Ccm_per_W\n"
                 + "".join(f"{a},1590,{b}\n" for a, b in zip(w, rho, strict=True)), encoding="utf-8")
    rc = main(["dryout", "--csv", str(p), "--model", "johansen", "--quartz", "0.8", "--critical-moisture", "5.03",
               "--json"])
    doc = json.loads(capsys.readouterr().out)
    assert rc == 0
    # Johansen (1975) worked example at Sr = 0.2 (w = 5.03 %): ρ_th = 75.8 °C·cm/W
    assert 100 * doc["design_value"]["resistivity_mK_per_W"] == pytest.approx(75.8, abs=0.3)


def test_dryout_bad_csv(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    p = tmp_path / "bad.csv"
    p.write_text("moisture,k_W_per_mK\n1,2\n", encoding="utf-8")
    assert main(["dryout", "--csv", str(p)]) == 2
    assert "moisture_pct" in capsys.readouterr().err


def test_cylinder_example_record(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    rc = main(["cylinder", str(EXAMPLES / "cylinder_mould_FB3.csv"), "--radius-mm", "35", "--height-mm", "90",
               "--json", "--report", str(tmp_path / "c.pdf")])
    out = capsys.readouterr()
    assert rc == 0, out.err
    doc = json.loads(out.out)
    assert doc["alpha_mm2_per_s"] == pytest.approx(0.41, rel=0.01)    # invented truth 4.1e-7 m²/s
    assert doc["steps"]["levels_C"] == pytest.approx([45.0, 15.0], abs=0.01)
    assert (tmp_path / "c.pdf").read_bytes()[:4] == b"%PDF"


def test_cylinder_with_given_bath(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    t = np.arange(0.0, 2500.0, 10.0)
    # water in a 60 mm bore (κ = 1.455e-7): t₅₀ = 0.200524·R²/κ = 1240.3 s for an infinite cylinder (Fo₅₀ 0.200524,
    # Carslaw & Jaeger §7.4 series)
    y = model_centre_C(t, 1.455e-7, 0.030, None, SurfaceSteps.single(40.0, 0.0), 20.0)
    p = tmp_path / "w.csv"
    p.write_text("time_s,T_centre_C\n" + "".join(f"{a},{b}\n" for a, b in zip(t, y, strict=True)), encoding="utf-8")
    rc = main(["cylinder", str(p), "--radius-mm", "30", "--bath-C", "40", "--initial-C", "20", "--no-lag", "--json"])
    doc = json.loads(capsys.readouterr().out)
    assert rc == 0
    assert doc["alpha_mm2_per_s"] == pytest.approx(0.1455, rel=1e-4)
    assert doc["t50_s"] == pytest.approx(1240.3, abs=2)


def test_cylinder_needs_a_bath(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    p = tmp_path / "n.csv"
    p.write_text("time_s,T_centre_C\n0,20\n1,20\n", encoding="utf-8")
    assert main(["cylinder", str(p), "--radius-mm", "25"]) == 2
    assert "--bath-C" in capsys.readouterr().err


