"""Every kind of report rendered to PDF and read back page by page (pypdf): each page carries the report number
and "page x of y", no text is cut to "…", plots are vector drawings (no raster image on any page), the content a
signed test report needs is there, the cautions fit the kind of test, and the numbers are those of
`linerig reduce --json` on the same record.

The data are the invented Examplemoor site (examples/examplemoor.py) and its CSVs.
"""

from __future__ import annotations

import importlib.util
import json
import re
import sqlite3
from pathlib import Path
from typing import Any

import pytest
from pypdf import PdfReader

from linerig.tui.cli import main

ROOT = Path(__file__).resolve().parent.parent
EX = ROOT / "examples" / "examplemoor"
SITE = "Examplemoor substation"
SIGNED = ("Report number", "Software", "linerig", "Method statement", "Practice followed", "Cautions", "Sign-off",
          "Tested by", "Approved by", "U = 2u", "k = 2")


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict[str, Any]]:
    spec = importlib.util.spec_from_file_location("examplemoor", ROOT / "examples" / "examplemoor.py")
    assert spec and spec.loader
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    path = tmp_path_factory.mktemp("pdf") / "examplemoor.db"
    return path, mod.build_demo_db(path)


def pages(pdf: Path) -> list[str]:
    reader = PdfReader(pdf)
    out = []
    for page in reader.pages:
        res = page.get("/Resources") or {}
        xobjects = res.get("/XObject") or {}
        for name in xobjects:
            assert xobjects[name].get_object().get("/Subtype") != "/Image", f"{pdf.name}: a raster image on a page"
        out.append(page.extract_text())
    return out


def check_pages(pdf: Path) -> str:
    """The furniture on every page, no '…' anywhere; returns the whole text with line breaks folded."""
    texts = pages(pdf)
    n = len(texts)
    number = re.search(r"Report (LR-[A-Za-z0-9-]+)", texts[0])
    assert number, f"{pdf.name}: no report number at the head of page 1"
    for i, t in enumerate(texts, start=1):
        assert f"page {i} of {n}" in t, f"{pdf.name}: page {i} has no 'page {i} of {n}'"
        assert number.group(1) in t.replace("\n", ""), f"{pdf.name}: page {i} lacks the report number"
        assert "…" not in t, f"{pdf.name}: page {i} has a cut value"
    return re.sub(r"\s+", " ", " ".join(texts))


def _cli(capsys: pytest.CaptureFixture[str], *argv: str) -> str:
    rc = main(list(argv))
    out = capsys.readouterr()
    assert rc == 0, out.err
    return out.out


def test_run_report_pdf_has_the_numbers_of_reduce_json(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    csv_path, probe = EX / "run_BH1_1.5m.csv", EX / "FN-0412.toml"
    red = json.loads(_cli(capsys, "reduce", str(csv_path), "--probe", str(probe), "--json"))["sensors"]["heater"]
    out = tmp_path / "run.pdf"
    _cli(capsys, "report", "--csv", str(csv_path), "--probe", str(probe), "-o", str(out))
    text = check_pages(out)
    for needle in SIGNED:
        assert needle in text, needle
    k, U = red["k_W_per_mK"], red["k_U_W_per_mK"]
    w0, w1 = red["window_s"]
    assert f"{k:.4g}" in text and f"{U:.2g}" in text
    assert f"{w0:.0f}–{w1:.0f}" in text and red["method"] in text
    # the plot's caption names the same method, window and k as the table
    assert f"({red['method']}, window {w0:.0f}–{w1:.0f} s, k = {k:.4g} W/(m·K))" in text


def test_field_run_report_carries_equipment_calibration_and_field_cautions(
        demo: tuple[Path, dict[str, Any]], tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    db, ids = demo
    con = sqlite3.connect(db)
    with con:
        con.execute("UPDATE runs SET frontend_model = 'bench front end', frontend_serial = 'FE-7731', "
                    "frontend_firmware = '2.4.1', operator = 'J. Example' WHERE id = ?", [ids["bh1"][2]])
    out = tmp_path / "run.pdf"
    _cli(capsys, "report", str(ids["bh1"][2]), "--db", str(db), "-o", str(out))
    text = check_pages(out)
    for needle in (*SIGNED, "FE-7731", "firmware 2.4.1", "J. Example", "serial FN-0412", "agar-water",
                   "Factor F ± U (k = 2)", "Valid until", "ASTM D5334", "IEEE Std 442", "buried services",
                   "sensor depth m", "1.50"):
        assert needle in text, needle


def test_aborted_run_says_so(demo: tuple[Path, dict[str, Any]], tmp_path: Path,
                             capsys: pytest.CaptureFixture[str]) -> None:
    db, ids = demo
    con = sqlite3.connect(db)
    with con:
        con.execute("UPDATE runs SET state = 'aborted', end_reason = 'operator abort' WHERE id = ?", [ids["bh1"][3]])
    out = tmp_path / "aborted.pdf"
    _cli(capsys, "report", str(ids["bh1"][3]), "--db", str(db), "-o", str(out))
    text = check_pages(out)
    assert "aborted" in text and "shortened record" in text and "not final" in text


@pytest.mark.parametrize("kind", ["site", "cycles", "calibration", "dryout", "cylinder", "qualification"])
def test_every_kind_of_report(kind: str, demo: tuple[Path, dict[str, Any]], tmp_path: Path,
                              capsys: pytest.CaptureFixture[str]) -> None:
    db, ids = demo
    out = tmp_path / f"{kind}.pdf"
    if kind == "site":
        _cli(capsys, "report", "--site", SITE, "--db", str(db), "--run-plots", "-o", str(out))
    elif kind == "cycles":
        _cli(capsys, "cycles", str(ids["cycles_run"]), "--db", str(db), "--report", str(out))
    elif kind == "calibration":
        args = [x for r in ids["calibration_runs"] for x in ("--run", str(r))]
        _cli(capsys, "calibrate", "--probe", "FN-0412", "--reference", "agar-water", *args, "--db", str(db),
             "--dry-run", "--report", str(out))
    elif kind == "dryout":
        _cli(capsys, "dryout", "--csv", str(EX / "dryout_moor_sand.csv"), "--quartz", "0.55", "--report", str(out))
    elif kind == "cylinder":
        _cli(capsys, "cylinder", str(EX / "cylinder_mould_FB3.csv"), "--radius-mm", "35", "--height-mm", "90",
             "--k", "1.1", "--report", str(out))
    else:
        from linerig.daemon.qualify.report import write_report
        from tests.test_qualify import qualified

        write_report(qualified("good").to_json(), None, out)
    text = check_pages(out)
    for needle in SIGNED:
        assert needle in text, f"{kind}: {needle}"
    field = kind == "site"
    assert ("buried services" in text) == field, f"{kind}: the buried-services caution belongs to field tests only"
    if kind == "cylinder":   # a moulded specimen in a bath: no needle-probe method text, the bath cautions instead
        assert "A heated needle" not in text and "No probe is heated" in text and "hot bath" in text
    if kind == "qualification":
        assert "SIMULATED RIG" in text
