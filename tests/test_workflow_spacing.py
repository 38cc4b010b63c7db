"""Spacing calibration of a dual needle: water's ρc from IAPWS-95, the acceptance rules, the history in a real
SQLite store, and ``linerig calibrate --spacing`` on a pulse recorded with a bent needle."""

from __future__ import annotations

import datetime as dt
import json
import subprocess
import sys
from dataclasses import asdict
from pathlib import Path

import pytest

from linerig.daemon.probe import ProbeProfileError, load_probe_profile, stored_profile
from linerig.daemon.store.spacings import apply_spacings, record_spacing, spacing_history
from linerig.daemon.store.writer import Store
from linerig.daemon.workflows.calibration import CalibrationError
from linerig.daemon.workflows.spacing import (
    SpacingPulse,
    evaluate_spacing,
    heat_capacity_reference,
    spacing_status,
    water_heat_capacity,
)

NOW = dt.datetime(2026, 6, 1, 12, 0, tzinfo=dt.UTC)
DUAL = Path(__file__).resolve().parent.parent / "hardware" / "probes" / "dual-needle.toml"


def test_water_heat_capacity_from_iapws_95() -> None:
    # IAPWS-95 (revised release 2016), computer-program verification at T = 300 K, ρ = 996.556 kg/m³:
    # c_v = 4.13018112 kJ/(kg·K), w = 1501.51914 m/s (release Table 7, from memory; the iapws package documents
    # the same values) — the package must reproduce the release before we lean on it
    from iapws import IAPWS95

    s = IAPWS95(T=300.0, rho=996.556)
    assert s.cv == pytest.approx(4.13018112, abs=1e-7) and s.w == pytest.approx(1501.51914, abs=1e-4)
    # liquid water at 0.1 MPa: ρ·c_p = 4.1766 MJ/(m³·K) at 20 °C, 4.1690 at 25 °C (reference-values.md §3.4)
    assert water_heat_capacity(20.0) == pytest.approx(4.1766e6, rel=1e-4)
    assert water_heat_capacity(25.0) == pytest.approx(4.1690e6, rel=1e-4)
    agar = heat_capacity_reference("agar-water", 20.0)
    assert agar.rho_c_u_J_per_m3K / agar.rho_c_J_per_m3K > heat_capacity_reference("water", 20.0).rho_c_u_J_per_m3K \
        / agar.rho_c_J_per_m3K


@pytest.mark.parametrize(("medium", "bath", "words"), [("glycerol", 20.0, "known"), ("water", None, "bath"),
                                                       ("agar-water", 60.0, "5–40")])
def test_reference_refuses_what_it_cannot_vouch_for(medium: str, bath: float | None, words: str) -> None:
    with pytest.raises(CalibrationError, match=words):
        heat_capacity_reference(medium, bath)


def test_acceptance_rules() -> None:
    ref = heat_capacity_reference("agar-water", 20.0)
    good = evaluate_spacing("PX8", "needle8", 8e-3, ref, [SpacingPulse(8.21e-3, 0.03e-3, 1),
                                                          SpacingPulse(8.23e-3, 0.03e-3, 2),
                                                          SpacingPulse(8.22e-3, 0.03e-3, 3)], now=NOW)
    assert good.accepted and good.spacing_m == pytest.approx(8.22e-3) and not good.warnings
    assert good.spacing_u_m > 0.03e-3  # the per-pulse part plus the spread of the mean
    bent = evaluate_spacing("PX8", "needle8", 8e-3, ref, [SpacingPulse(9.2e-3, 0.03e-3, 4)], now=NOW,
                            previous_m=8.22e-3)
    assert not bent.accepted and "straighten" in bent.reasons[0]
    assert any("single pulse" in w for w in bent.warnings) and any("moved" in w for w in bent.warnings)
    flagged = evaluate_spacing("PX8", "needle8", 8e-3, ref, [SpacingPulse(8.2e-3, 0.03e-3, 5, ("no_peak",))])
    assert not flagged.accepted and "no_peak" in flagged.reasons[0]
    loose = evaluate_spacing("PX8", "needle8", 8e-3, ref, [SpacingPulse(8.2e-3, 0.12e-3, 6)])
    assert not loose.accepted and "uncertainty" in loose.reasons[0]


def test_history_in_the_store_and_the_spacing_a_run_gets(tmp_path: Path) -> None:
    store = Store(tmp_path / "runs.db")
    db = store.reader
    store.close()
    import sqlite_utils

    db = sqlite_utils.Database(tmp_path / "runs.db")
    ref = heat_capacity_reference("agar-water", 20.0)
    first = evaluate_spacing("PX8-40-0005", "needle8", 8e-3, ref, [SpacingPulse(8.20e-3, 0.03e-3, 1)],
                             now=NOW - dt.timedelta(days=100))
    rejected = evaluate_spacing("PX8-40-0005", "needle8", 8e-3, ref, [SpacingPulse(9.5e-3, 0.03e-3, 2)],
                                now=NOW - dt.timedelta(days=50))
    later = evaluate_spacing("PX8-40-0005", "needle8", 8e-3, ref, [SpacingPulse(8.26e-3, 0.02e-3, 3)],
                             now=NOW - dt.timedelta(days=10))
    for out in (first, rejected, later):
        record_spacing(db, out, {"bath_C": 20.0})
    hist = spacing_history(db, "PX8-40-0005")
    assert [h["accepted"] for h in hist] == [1, 0, 1] and json.loads(hist[1]["notes"])["reasons"]
    assert spacing_status(hist, "needle8", NOW).spacing_m == pytest.approx(8.26e-3)
    assert spacing_status(hist, "needle9", NOW).state == "none"
    probe = load_probe_profile(DUAL)
    # a run made 60 days ago gets the first calibration; one made now the later one; both keep their uncertainty
    then, used = apply_spacings(probe, hist, (NOW - dt.timedelta(days=60)).isoformat())
    assert then.sensor("needle8").radial_mm == pytest.approx(8.20) and then.sensor("needle8").radial_u_mm == \
        pytest.approx(0.03) and used[0].calibration_id == 1
    now, _ = apply_spacings(probe, hist, NOW.isoformat())
    assert now.sensor("needle8").radial_mm == pytest.approx(8.26) and now.sensor("heater").radial_mm == 0.0
    assert [s.name for s in now.sensors] == [s.name for s in probe.sensors]
    # the applied spacing is marked as calibrated (its pulse model error is then smaller), and the mark survives
    # the profile's JSON as an export's header carries it; a profile's own nominal spacing is not marked
    assert now.sensor("needle8").spacing_calibrated and not probe.sensor("needle8").spacing_calibrated
    again = stored_profile(json.dumps(asdict(now)), "export header")
    assert again.sensor("needle8").spacing_calibrated and again.sensor("needle8").radial_mm == pytest.approx(8.26)
    with pytest.raises(ProbeProfileError, match="spacing_calibrated must be true or false"):
        doc = asdict(now)
        doc["sensors"][1]["spacing_calibrated"] = "yes"
        stored_profile(json.dumps(doc), "export header")


def test_calibrate_spacing_from_a_pulse_in_gel(tmp_path: Path) -> None:
    # a pulse in agar-gelled water on the simulated dual needle whose sensing needle is bent to 8.25 mm; the
    # profile says 8.00. The gel's own plan: its ρc is high and its k low, so gentle and long (pulse_plan).
    from test_reduction_pulse import _simulated_pulse_run

    from linerig.daemon.runcsv import write_run_csv

    data, _ = _simulated_pulse_run("agar-gel", 5, bend_mm=8.25, power_W_per_m=10.0, pulse_s=190, record_s=600)
    csv = tmp_path / "gel.csv"
    write_run_csv(data, csv)  # type: ignore[arg-type]
    Store(tmp_path / "runs.db").close()
    cmd = [sys.executable, "-m", "linerig.tui.cli", "calibrate", "--probe", "PX8-40-0005", "--spacing", "needle8",
           "--reference", "agar-water", "--csv", str(csv), "--probe-profile", str(DUAL), "--db",
           str(tmp_path / "runs.db"), "--json"]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr + done.stdout
    out = json.loads(done.stdout)
    assert out["accepted"] and abs(out["spacing_m"] - 8.25e-3) < 2 * out["spacing_u_m"]
    assert out["spacing_u_m"] / out["spacing_m"] < 0.01
    hist = subprocess.run([*cmd[:6], "--history", "--db", str(tmp_path / "runs.db")], capture_output=True,
                          text=True, timeout=60)
    assert hist.returncode == 0 and "needle8: spacing 8.2" in hist.stdout
