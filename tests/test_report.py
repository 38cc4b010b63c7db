"""Report writers: a run CSV to HTML and PDF, escaping, and the content every report must carry."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from linerig.daemon.reduction.synthetic import Medium, make_run
from linerig.daemon.report.html import render_html
from linerig.daemon.report.model import Bullets, Heading, Para, Report, Table
from linerig.daemon.report.pdf import render_pdf
from linerig.daemon.runcsv import write_run_csv
from linerig.tui.cli import main


@pytest.fixture()
def run_csv(tmp_path: Path) -> Path:
    # water at 25 °C as in the synthetic line-source case of Carslaw & Jaeger §10.4 (k 0.6065, ρc 4.169 MJ/(m³·K))
    d = make_run(Medium(0.6065, 4.169e6), q_W_per_m=5.0, heat_s=300, recover_s=300, baseline_s=60, dt_s=2.0,
                 noise_K=0.002, rng=np.random.default_rng(3))
    p = tmp_path / "water.csv"
    write_run_csv(d, p, ["invented bench run in water"])
    return p


def test_report_from_csv_html_and_pdf(run_csv: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    html_out = tmp_path / "w.html"
    assert main(["report", "--csv", str(run_csv), "-o", str(html_out)]) == 0
    html = html_out.read_text(encoding="utf-8")
    assert "invented bench run in water" in html
    assert "Cautions" in html and "Method" in html and "References" in html
    assert html.count("data:image/svg+xml;base64,") >= 3
    pdf_out = tmp_path / "w.pdf"
    assert main(["report", "--csv", str(run_csv), "-o", str(pdf_out), "--calibration-factor", "1.01"]) == 0
    assert pdf_out.read_bytes()[:4] == b"%PDF"


def test_html_escapes_user_text() -> None:
    rep = Report("t <b>", "s & s").add(Heading("<h>"), Para("a < b"), Bullets(("<i>",)),
                                       Table(("x",), (("<td>",),), "c"))
    html = render_html(rep)
    assert "<title>t &lt;b&gt;</title>" in html and "s &amp; s" in html
    assert "&lt;h&gt;" in html and "a &lt; b" in html and "&lt;i&gt;" in html and "&lt;td&gt;" in html


def test_pdf_flows_over_several_pages(tmp_path: Path) -> None:
    rep = Report("long")
    for i in range(50):
        rep.add(Para(f"paragraph {i} " + "word " * 40))
    out = tmp_path / "long.pdf"
    render_pdf(rep, out)
    assert out.read_bytes().count(b"/Type /Page") >= 3
