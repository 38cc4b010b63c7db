"""The pulse method on the independent reference records: dual needles resolved as core, epoxy and sheath in a
planar cross-section (tests/reference, fv_planar.py), which the pulse model does not assume.

Done when (issue): `linerig reduce` on a dual-needle pulse record gives k, α and ρc within 5 % of the record's
medium, ρc within 3 % after a spacing calibration in gel, with uncertainty that covers (coverage over many noise
seeds and drawn inputs: bench/pulse_bench.py). The planar records are infinitely long, so they are reduced with
the reference profile's heater made 10 m long; the axisymmetric dn-length records keep the 40 mm heater.
"""

from __future__ import annotations

import json
import subprocess
import sys
from dataclasses import replace
from pathlib import Path

import pytest

from linerig.daemon.probe import ProbeProfile, load_probe_profile
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.data import RunData
from linerig.daemon.reduction.live import DEFAULT_POWER_U_REL
from linerig.daemon.reduction.methods.pulse import spacing_fit
from linerig.daemon.reduction.pulse import MODEL_U_REL, MODEL_U_REL_CALIBRATED
from linerig.daemon.reduction.record import HeatingRecord, SensorRecord
from linerig.daemon.workflows.spacing import water_heat_capacity

reference = pytest.importorskip("tests.reference")


def _dual_records() -> list[str]:
    try:
        names = [*reference.records("dual-needle-pulse"), *reference.records("dual-needle-heating")]
    except FileNotFoundError:
        names = []
    return names


DUAL_RECORDS = _dual_records()
pytestmark = pytest.mark.skipif(not DUAL_RECORDS, reason="no dual-needle reference records generated yet "
                                "(python -m tests.reference.generate --only 'dn-*')")


def _endless(rec: object) -> ProbeProfile:
    base = load_probe_profile(rec.profile_path)  # type: ignore[attr-defined]
    return replace(base, heater_length_mm=1e4, sensors=tuple(replace(s, axial_mm=None) for s in base.sensors))


def _truth(rec: object) -> dict[str, float]:
    t = rec.true  # type: ignore[attr-defined]
    return {"k": t["k_W_per_mK"], "alpha": t["alpha_m2_per_s"], "rho_c": t["rho_c_J_per_m3K"]}


@pytest.mark.parametrize("name", DUAL_RECORDS)
def test_pulse_records_read_within_5_percent_and_their_uncertainty(name: str) -> None:
    rec = reference.load(name)
    a = rec.arrays(seed=1)
    res = reduce_run(RunData(a.time_s, a.q_W_per_m, a.temps_C), _endless(rec), sensors=["needle"],
                     stable_rule=False).sensors["needle"]
    true = _truth(rec)
    assert res.method == "pulse"
    for q, v, u in (("k", res.k_W_per_mK, res.k_u_W_per_mK), ("alpha", res.alpha_m2_per_s, res.alpha_u_m2_per_s),
                    ("rho_c", res.rho_c_J_per_m3K, res.rho_c_u_J_per_m3K)):
        assert v is not None and u is not None
        assert abs(v / true[q] - 1) < 0.05, (q, v, true[q])
        assert abs(v - true[q]) < 2 * u, (q, v, u, true[q])


def test_linerig_reduce_on_a_reference_pulse_csv(tmp_path: Path) -> None:
    rec = reference.load("dn-pulse-moist-clay" if "dn-pulse-moist-clay" in DUAL_RECORDS else DUAL_RECORDS[0])
    csv = rec.to_run_csv(tmp_path / "pulse.csv", seed=4)
    profile = tmp_path / "endless.toml"
    profile.write_text(rec.profile_path.read_text(encoding="utf-8").replace("heater_length_mm = 40.0",
                                                                            "heater_length_mm = 10000.0")
                       .replace("axial_mm = 20", "# axial_mm = 20"), encoding="utf-8")
    done = subprocess.run([sys.executable, "-m", "linerig.tui.cli", "reduce", str(csv), "--probe", str(profile),
                           "--json"], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    out = json.loads(done.stdout)["sensors"]
    r = out["needle"]
    true = _truth(rec)
    assert r["method"] == "pulse"
    # the heated needle's own line over the 8 s pulse never reaches the late-time regime: refused, not reported
    # as k (it read k within 2 % here, but with U near 40 % from five samples: no measurement)
    heater = out["heater"]
    assert heater["k_W_per_mK"] is None and heater["method"] == "none"
    # refused by the line's own sample rule (too few samples in the heating's last decade) or, failing that, by the
    # pulse rule that names the radial sensor read instead
    assert "no_result" in heater["flags"]
    assert "'needle'" in heater["method_reason"] or "heating's last decade" in heater["method_reason"]
    assert abs(r["k_W_per_mK"] / true["k"] - 1) < 0.05
    assert abs(r["alpha_mm2_per_s"] / (true["alpha"] * 1e6) - 1) < 0.05
    assert abs(r["rho_c_MJ_per_m3K"] / (true["rho_c"] / 1e6) - 1) < 0.05


@pytest.mark.skipif("dn-pulse-agar-gel" not in DUAL_RECORDS, reason="no reference pulse in gel")
def test_rho_c_within_3_percent_after_a_spacing_calibration_in_gel() -> None:
    gel = reference.load("dn-pulse-agar-gel")
    probe = _endless(gel)
    fits = []
    for seed in range(3):
        a = gel.arrays(seed=seed)
        data = RunData(a.time_s, a.q_W_per_m, a.temps_C)
        rec = SensorRecord.of(data, HeatingRecord.of(data), "needle", probe)
        # the gel's ρc from IAPWS-95 at the record's 20 °C, not the record's own number
        fits.append(spacing_fit(rec, water_heat_capacity(gel.instrument.T0_C), 0.005, DEFAULT_POWER_U_REL))
    spacing = sum(f.spacing_m for f in fits) / len(fits)
    u = max(f.spacing_u_m for f in fits)
    assert abs(spacing - 8e-3) < 2 * u and u / spacing < 0.01
    calibrated = probe.with_sensor("needle", spacing * 1e3, u * 1e3, calibrated=True)
    for name in DUAL_RECORDS:
        if name == "dn-pulse-agar-gel":
            continue
        rec = reference.load(name)
        a = rec.arrays(seed=2)
        res = reduce_run(RunData(a.time_s, a.q_W_per_m, a.temps_C), calibrated, sensors=["needle"],
                         stable_rule=False).sensors["needle"]
        assert res.rho_c_J_per_m3K is not None and res.rho_c_u_J_per_m3K is not None
        rc = _truth(rec)["rho_c"]
        assert abs(res.rho_c_J_per_m3K / rc - 1) < 0.03, (name, res.rho_c_J_per_m3K, rc)
        assert abs(res.rho_c_J_per_m3K - rc) < 2 * res.rho_c_u_J_per_m3K
        # the calibrated spacing took in the gel's model error: the run keeps only its change between media
        assert res.u_budget_rho_c_rel["model"] == MODEL_U_REL_CALIBRATED["rho_c"] < MODEL_U_REL["rho_c"]
