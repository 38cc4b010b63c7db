"""Calibration travels with the data, through a real daemon: a probe factor on record when a run starts is applied
live and in the stored result, the run's exported CSV carries it, and `linerig reduce` of that file alone gives the
stored result to the last printed digit.

linerigd --simulate is a real process on a real SQLite file; the calibration row is written as `linerig calibrate`
writes it (the calibrations table), and export and reduce are the README's commands.
"""

from __future__ import annotations

import datetime as dt
import json
import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest
from simulated_daemon import simulated_daemon

from linerig.daemon.service import load_default_probe
from linerig.tui.cli import main

pytestmark = pytest.mark.timeout(120)
FACTOR, FACTOR_U = 0.9638, 0.0041  # an invented calibration of the simulator's default needle


def _calibrate(db: Path, serial: str) -> None:
    now = dt.datetime.now(dt.UTC)
    con = sqlite3.connect(db)
    with con:
        con.execute("INSERT INTO calibrations (probe_serial, created_utc, reference, reference_k_W_per_mK, "
                    "measured_k_W_per_mK, factor, factor_u, accepted, notes, expires_utc) "
                    "VALUES (?, ?, 'agar-water at 20.00 °C', 0.598, 0.6205, ?, ?, 1, '{}', ?)",
                    [serial, (now - dt.timedelta(days=1)).isoformat(timespec="seconds"), FACTOR, FACTOR_U,
                     (now + dt.timedelta(days=300)).isoformat(timespec="seconds")])
    con.close()


def test_daemon_applies_the_calibration_and_its_export_reduces_to_the_stored_result(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    serial = load_default_probe().serial
    assert serial
    with simulated_daemon(tmp_path, 50) as d:
        _calibrate(d["db"], serial)
        cmd = [sys.executable, "-m", "linerig.tui.cli", "--socket", str(d["socket"]), "start", "--heat-s", "150",
               "--recover-s", "150", "--baseline-s", "120", "--wait", "--json"]
        done = subprocess.run(cmd, capture_output=True, text=True, timeout=100)
        assert done.returncode == 0, done.stderr
        out = json.loads(done.stdout)
    stored = out["results"]["heater"]
    assert stored["calibration_factor"] == FACTOR and stored["calibration_factor_u"] == FACTOR_U
    assert stored["u_budget_rel"]["calibration"] == pytest.approx(FACTOR_U / FACTOR)
    con = sqlite3.connect(d["db"])
    ev = con.execute("SELECT state, data FROM events WHERE run_id = ? AND kind = 'calibration'",
                     [out["run_id"]]).fetchone()
    assert ev[0] == "valid" and json.loads(ev[1])["factor"] == FACTOR
    csv_path = tmp_path / "run.csv"
    assert main(["export", str(out["run_id"]), "--what", "samples", "--db", str(d["db"]), "-o", str(csv_path)]) == 0
    capsys.readouterr()
    assert main(["reduce", str(csv_path), "--json"]) == 0
    got = capsys.readouterr()
    again = json.loads(got.out)["sensors"]["heater"]
    assert "applying the probe factor 0.9638" in got.err
    # to the last digit `linerig reduce` prints (k 4 significant digits, U 2, α and ρc 3), and closer still
    for key, digits in (("k_W_per_mK", 4), ("k_U_W_per_mK", 2), ("alpha_mm2_per_s", 3), ("rho_c_MJ_per_m3K", 3)):
        if stored[key] is None:
            assert again[key] is None, key
            continue
        assert f"{again[key]:.{digits}g}" == f"{stored[key]:.{digits}g}", key
        assert again[key] == pytest.approx(stored[key], rel=1e-9), key
    assert again["method"] == stored["method"] and again["window_s"] == stored["window_s"]
