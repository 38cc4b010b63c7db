"""The offline subcommands on a real database written by the daemon's own store (invented demo data): report,
export, profile, cycles, calibrate and dryout from runs."""

from __future__ import annotations

import csv
import io
import json
import shutil
import sqlite3
from pathlib import Path
from typing import Any

import pytest

from linerig.daemon.runcsv import read_run_csv
from linerig.tui.cli import main

SITE = "Examplemoor substation"


@pytest.fixture(scope="module")
def demo(example_site: tuple[Path, dict[str, Any]], tmp_path_factory: pytest.TempPathFactory
         ) -> tuple[Path, dict[str, Any]]:
    """A copy of the session's example store (conftest.py): these tests write calibrations into it."""
    path = tmp_path_factory.mktemp("db") / "demo.db"
    shutil.copyfile(example_site[0], path)
    return path, example_site[1]


def _cli(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    rc = main(list(argv))
    out = capsys.readouterr()
    return rc, out.out, out.err


def test_run_report_html_is_self_contained(demo: tuple[Path, dict[str, Any]], tmp_path: Path,
                                           capsys: pytest.CaptureFixture[str]) -> None:
    db, ids = demo
    out = tmp_path / "run.html"
    rc, _, err = _cli(capsys, "report", str(ids["bh1"][2]), "--db", str(db), "-o", str(out))
    assert rc == 0, err
    html = out.read_text(encoding="utf-8")
    assert html.count("data:image/svg+xml;base64,") >= 3          # fit, estimate history, cooling: vector
    assert "http://" not in html and "https://" not in html and "<script" not in html
    for needle in ("Calibration", "agar-water", "IAPWS", "Cautions", "buried services", "licensed",
                   "Blackwell", "U (k = 2)", "Report number", "Method statement", "ASTM D5334", "Sign-off", SITE):
        assert needle in html, needle


def test_run_report_pdf(demo: tuple[Path, dict[str, Any]], tmp_path: Path,
                        capsys: pytest.CaptureFixture[str]) -> None:
    db, ids = demo
    out = tmp_path / "run.pdf"
    rc, _, err = _cli(capsys, "report", str(ids["bh1"][0]), "--db", str(db), "-o", str(out))
    assert rc == 0, err
    data = out.read_bytes()
    assert data.startswith(b"%PDF") and data.count(b"/Type /Page") >= 3


def test_site_report_and_profile(demo: tuple[Path, dict[str, Any]], tmp_path: Path,
                                 capsys: pytest.CaptureFixture[str]) -> None:
    db, _ = demo
    out = tmp_path / "site.html"
    rc, _, err = _cli(capsys, "report", "--site", SITE, "--db", str(db), "-o", str(out))
    assert rc == 0, err
    html = out.read_text(encoding="utf-8")
    assert "Depth profiles" in html and "Borehole BH1" in html and "Borehole BH2" in html
    rc, text, err = _cli(capsys, "profile", "--site", SITE, "--db", str(db), "--json", "--plot",
                         str(tmp_path / "p.png"))
    assert rc == 0, err
    doc = json.loads(text)
    bh1 = doc["boreholes"]["BH1"]
    assert [round(p["depth_m"], 3) for p in bh1] == [0.5, 1.0, 1.5, 2.0, 2.5]   # tip depth − 75 mm mid-heater
    # the invented ground gets more conductive with depth (peat over sand)
    assert bh1[0]["resistivity_Ccm_per_W"] > bh1[-1]["resistivity_Ccm_per_W"]
    rod = {p["sensor"]: p["depth_m"] for p in doc["boreholes"]["BH2"]}
    assert rod == pytest.approx({"tip300": 1.3, "tip600": 1.0, "tip900": 0.7, "tip1200": 0.4})
    assert (tmp_path / "p.png").read_bytes().startswith(b"\x89PNG")


def test_export_results_csv_and_samples_roundtrip(demo: tuple[Path, dict[str, Any]], tmp_path: Path,
                                                  capsys: pytest.CaptureFixture[str]) -> None:
    db, ids = demo
    rc, text, err = _cli(capsys, "export", "--site", SITE, "--db", str(db))
    assert rc == 0, err
    rows = list(csv.DictReader(io.StringIO(text)))
    assert len(rows) == 5 + 4   # five needle runs in BH1, four rod junctions in BH2
    assert all(float(r["resistivity_Ccm_per_W"]) == pytest.approx(100 / float(r["k_W_per_mK"])) for r in rows)
    out = tmp_path / "s.csv"
    rc, _, err = _cli(capsys, "export", str(ids["bh1"][1]), "--what", "samples", "--db", str(db), "-o", str(out))
    assert rc == 0, err
    data = read_run_csv(out)        # the run CSV reader takes it back
    con = sqlite3.connect(db)
    n = con.execute("SELECT count(*) FROM samples WHERE run_id = ?", [ids["bh1"][1]]).fetchone()[0]
    assert data.time_s.size == n
    rc, text, _ = _cli(capsys, "export", str(ids["bh1"][1]), "--what", "samples", "--format", "json", "--db", str(db))
    doc = json.loads(text)
    assert len(doc["samples"]["time_s"]) == n and doc["results"]["heater"]["k_W_per_mK"] > 0
    rc, text, _ = _cli(capsys, "export", str(ids["bh1"][1]), "--what", "samples", "--raw", "--db", str(db))
    assert text.splitlines()[0].startswith("n,seq,device_ms,device_s,time_s,phase")


def test_cycles_of_a_three_cycle_run(demo: tuple[Path, dict[str, Any]], tmp_path: Path,
                                     capsys: pytest.CaptureFixture[str]) -> None:
    db, ids = demo
    rc, text, err = _cli(capsys, "cycles", str(ids["cycles_run"]), "--db", str(db), "--json",
                         "--report", str(tmp_path / "c.html"))
    assert rc == 0, err
    s = json.loads(text)
    assert s["n"] == 3
    # invented truth 1.9/0.96 W/(m·K) read through the calibration factor: about 1.9 after calibration
    assert s["mean"] == pytest.approx(1.9, rel=0.05)
    assert s["repeatability_limit"] == pytest.approx(2.8 * s["sd"])
    assert "r = 2.8·s_r" in (tmp_path / "c.html").read_text(encoding="utf-8")


def test_cycles_refuses_a_single_cycle_run(demo: tuple[Path, dict[str, Any]],
                                           capsys: pytest.CaptureFixture[str]) -> None:
    db, ids = demo
    rc, _, err = _cli(capsys, "cycles", str(ids["bh1"][0]), "--db", str(db))
    assert rc == 2 and "nothing to compare" in err


def test_calibrate_from_runs_stores_history(demo: tuple[Path, dict[str, Any]], tmp_path: Path,
                                            capsys: pytest.CaptureFixture[str]) -> None:
    db, ids = demo
    copy = tmp_path / "cal.db"
    copy.write_bytes(db.read_bytes())
    args = ["calibrate", "--probe", "FN-0412", "--reference", "agar-water", "--db", str(copy), "--json"]
    for rid in ids["calibration_runs"]:
        args += ["--run", str(rid)]
    rc, text, err = _cli(capsys, *args)
    assert rc == 0, err
    out = json.loads(text)
    assert out["accepted"] and out["n_runs"] == 3
    assert out["reference"]["temperature_C"] == pytest.approx(20.0, abs=0.01)   # bath from the baselines
    # the invented probe reads 4 % high: factor ≈ 0.96
    assert out["factor"] == pytest.approx(0.96, abs=0.03)
    rc, text, _ = _cli(capsys, "calibrate", "--probe", "FN-0412", "--history", "--db", str(copy), "--json")
    hist = json.loads(text)
    assert len(hist) == 2 and hist[-1]["id"] == out["id"]
    rc, _, err = _cli(capsys, "calibrate", "--probe", "NOPE", "--reference", "water", "--db", str(copy),
                      "--run", str(ids["calibration_runs"][0]))
    assert rc == 2 and "FN-0412" in err


def test_dryout_from_database_runs(demo: tuple[Path, dict[str, Any]], capsys: pytest.CaptureFixture[str]) -> None:
    db, _ = demo
    rc, text, err = _cli(capsys, "dryout", "--material", "Moor sand backfill", "--db", str(db), "--model",
                         "cote-konrad", "--quartz", "0.55", "--json")
    assert rc == 0, err
    doc = json.loads(text)
    assert len(doc["points"]) == 12
    # invented truth λ_s = 4.6, κ = 3.2, dry scale 1.1 (examples/examplemoor.py)
    fit = doc["fits"]["cote-konrad"]
    assert fit["lambda_s_W_per_mK"] == pytest.approx(4.6, rel=0.1)
    assert fit["rms_rel"] < 0.05


def test_bad_inputs_get_exit_code_2(demo: tuple[Path, dict[str, Any]], tmp_path: Path,
                                    capsys: pytest.CaptureFixture[str]) -> None:
    db, _ = demo
    rc, _, err = _cli(capsys, "report", "999", "--db", str(db), "-o", str(tmp_path / "x.html"))
    assert rc == 2 and "no run 999" in err
    rc, _, err = _cli(capsys, "report", "1", "--db", str(tmp_path / "missing.db"))
    assert rc == 2 and "no database" in err
    rc, _, err = _cli(capsys, "report", "1", "--db", str(db), "-o", str(tmp_path / "x.docx"))
    assert rc == 2 and ".html or .pdf" in err
    rc, _, err = _cli(capsys, "profile", "--site", "Nowhere", "--db", str(db))
    assert rc == 2 and SITE in err
    rc, _, err = _cli(capsys, "export", "--db", str(db))
    assert rc == 2


def test_cycles_of_a_series_of_runs(demo: tuple[Path, dict[str, Any]], tmp_path: Path,
                                    capsys: pytest.CaptureFixture[str]) -> None:
    db, ids = demo
    copy = tmp_path / "series.db"
    copy.write_bytes(db.read_bytes())
    con = sqlite3.connect(copy)
    with con:   # make the three calibration runs one series, one run per cycle
        for c, rid in enumerate(ids["calibration_runs"], start=1):
            con.execute("UPDATE runs SET series_id = 7, cycle = ? WHERE id = ?", [c, rid])
    con.close()
    rc, text, err = _cli(capsys, "cycles", str(ids["calibration_runs"][1]), "--db", str(copy), "--json")
    assert rc == 0, err
    s = json.loads(text)
    assert s["origin"].startswith("series 7") and s["n"] == 3
    assert [v["run_id"] for v in s["values"]] == ids["calibration_runs"]


def test_calibrate_from_a_csv_in_glycerol(demo: tuple[Path, dict[str, Any]], tmp_path: Path,
                                          capsys: pytest.CaptureFixture[str]) -> None:
    import numpy as np

    from linerig.daemon.reduction.synthetic import Medium, make_run
    from linerig.daemon.runcsv import write_run_csv

    db, _ = demo
    # glycerol ≈ 0.285 W/(m·K), ρc ≈ 3.05 MJ/(m³·K) (handbook values, from memory); a probe reading 5 % low
    d = make_run(Medium(0.285 / 1.05, 3.05e6), q_W_per_m=2.0, radius_m=1.2e-3, probe_C=3.0e6, heat_s=600,
                 recover_s=300, baseline_s=60, dt_s=2.0, noise_K=0.001, t0_C=22.0, rng=np.random.default_rng(5))
    p = tmp_path / "gly.csv"
    write_run_csv(d, p)
    rc, text, _err = _cli(capsys, "calibrate", "--probe", "FN-0412", "--reference", "glycerol", "--csv", str(p),
                         "--db", str(db), "--dry-run", "--json")
    out = json.loads(text)
    assert out["id"] is None                                   # --dry-run stores nothing
    assert out["factor"] == pytest.approx(1.05, rel=0.02)
    assert any("single run" in w for w in out["warnings"])
    assert rc in (0, 1) and (rc == 0) == out["accepted"]


def test_report_of_a_multi_cycle_run_shows_the_last_cycle(demo: tuple[Path, dict[str, Any]], tmp_path: Path,
                                                          capsys: pytest.CaptureFixture[str]) -> None:
    db, ids = demo
    out = tmp_path / "cyc.html"
    rc, _, err = _cli(capsys, "report", str(ids["cycles_run"]), "--db", str(db), "-o", str(out))
    assert rc == 0, err
    assert "This run holds 3 heating–recovery cycles" in out.read_text(encoding="utf-8")


# What `linerig reduce` prints of a result: k to 4 significant digits, U to 2 (tui/commands/reduce.py print_table).
def _printed(res: dict[str, Any]) -> tuple[str, ...]:
    def f(v: float | None, d: int) -> str:
        return "—" if v is None else f"{v:.{d}g}"

    return (f(res["k_W_per_mK"], 4), f(res["k_U_W_per_mK"], 2), f(res["alpha_mm2_per_s"], 3),
            f(res["rho_c_MJ_per_m3K"], 3), res["method"], str(res["window_s"]))


def test_exported_run_reduces_to_the_stored_result_with_its_calibration(
        demo: tuple[Path, dict[str, Any]], tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """A calibrated run (factor from the agar-water calibration, stored with its u) exported as a run CSV and
    reduced with no options: the file's header carries probe, factor and u, and the result is the stored one."""
    db, ids = demo
    run_id = ids["bh1"][2]
    out = tmp_path / "bh1.csv"
    rc, _, err = _cli(capsys, "export", str(run_id), "--what", "samples", "--db", str(db), "-o", str(out))
    assert rc == 0, err
    con = sqlite3.connect(db)
    stored = json.loads(con.execute("SELECT data FROM results WHERE run_id = ?", [run_id]).fetchone()[0])
    factor, factor_u = con.execute("SELECT factor, factor_u FROM calibrations WHERE accepted = 1").fetchone()
    assert stored["calibration_factor"] == factor != 1.0 and stored["calibration_factor_u"] == factor_u > 0
    header = out.read_text(encoding="utf-8")
    assert "# probe_serial: FN-0412" in header and f"# calibration_factor: {factor!r}" in header
    assert f"# calibration_factor_u: {factor_u!r}" in header and "# probe_profile: {" in header
    rc, text, err = _cli(capsys, "reduce", str(out), "--json")
    assert rc == 0, err
    assert "applying the probe factor" in err and "FN-0412" in err
    again = json.loads(text)["sensors"]["heater"]
    assert _printed(again) == _printed(stored)
    for key in ("k_W_per_mK", "k_u_W_per_mK", "alpha_mm2_per_s", "rho_c_MJ_per_m3K", "calibration_factor_u"):
        assert again[key] == pytest.approx(stored[key], rel=1e-12), key


def test_reduce_says_why_a_calibration_is_or_is_not_applied(tmp_path: Path,
                                                           capsys: pytest.CaptureFixture[str]) -> None:
    src = (Path(__file__).resolve().parent.parent / "examples" / "examplemoor" / "run_BH1_1.5m.csv")
    body = "\n".join(ln for ln in src.read_text(encoding="utf-8").splitlines() if not ln.startswith("#"))
    named = tmp_path / "named.csv"
    named.write_text("# probe_serial: FN-0412\n" + body, encoding="utf-8")
    rc, text, err = _cli(capsys, "reduce", str(named), "--json")
    assert rc == 0 and "no calibration_factor" in err and "factor 1" in err
    assert json.loads(text)["sensors"]["heater"]["calibration_factor"] == 1.0
    bad = tmp_path / "bad.csv"
    bad.write_text("# probe_serial: FN-0412\n# calibration_factor: 0.9x\n" + body, encoding="utf-8")
    rc, _, err = _cli(capsys, "reduce", str(bad))
    assert rc == 2 and "line 2" in err and "calibration_factor" in err
    given = tmp_path / "given.csv"
    given.write_text("# calibration_factor: 0.96\n# calibration_factor_u: 0.004\n" + body, encoding="utf-8")
    rc, text, err = _cli(capsys, "reduce", str(given), "--json", "--calibration-factor", "1.0")
    assert rc == 0 and "warning" in err and "0.96" in err
    assert json.loads(text)["sensors"]["heater"]["calibration_factor"] == 1.0
    rc, text, err = _cli(capsys, "reduce", str(given), "--json")
    res = json.loads(text)["sensors"]["heater"]
    assert rc == 0 and res["calibration_factor"] == 0.96 and res["calibration_factor_u"] == 0.004
    assert res["u_budget_rel"]["calibration"] == pytest.approx(0.004 / 0.96)
