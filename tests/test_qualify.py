"""Probe qualification: the procedure against the in-process simulator, each criterion, store, report and CLI.

A good design passes everything; each bad design (a probe too short for its diameter, a noisy channel, a drifting
heater resistance, a wrong heat capacity in the profile, a poor contact) fails its own criterion and no other.
The physics checks compare with sources outside the project: mpmath's numerical Laplace inversion of the published
probe and cylinder solutions (Blackwell 1954; Carslaw & Jaeger 1959), scipy's erf for the finite line source, and
the iapws package for the water reference.
"""

from __future__ import annotations

import json
import math
import re
from functools import cache
from pathlib import Path

import mpmath as mp
import numpy as np
import pytest
from scipy.special import erf, erfinv

from linerig.daemon.probe import ProbeProfile, profile_from_dict
from linerig.daemon.qualify import analysis as an
from linerig.daemon.qualify.config import (
    CRITERION_IDS,
    QualificationConfigError,
    config_from_toml,
    load_config,
)
from linerig.daemon.qualify.criteria import evaluate
from linerig.daemon.qualify.procedure import Measurements, ScriptedOperator, run_sync
from linerig.daemon.qualify.report import write_report
from linerig.daemon.qualify.result import Qualification, judge
from linerig.daemon.qualify.simrig import SimSetup, SimulatedQualificationRig
from linerig.daemon.qualify.store import list_qualifications, load_qualification, open_store, save_qualification
from linerig.tui.cli import main as cli_main

GOOD_INSULATION = {"insulation_MOhm": 2000.0}
FAST = 1.6  # simulation sample spacing (s): one physics step per sample


def needle(length_mm: float = 100.0, radius_mm: float = 0.635, sensors: list[dict] | None = None,
           serial: str = "QN-0001") -> ProbeProfile:
    """An invented lab needle: stainless tube with epoxy fill, 40 Ω constantan heater, type T junction."""
    return profile_from_dict({
        "probe": {"name": "bench needle", "serial": serial, "heater_length_mm": length_mm, "radius_mm": radius_mm,
                  "heat_capacity_MJ_per_m3K": 3.2, "heater_resistance_ohm": 40.0, "heater_tcr_per_K": 5e-5,
                  "thermocouple": "T"},
        "sensor": sensors or [{"name": "heater", "radial_mm": 0.0, "axial_mm": length_mm / 2}]})


DESIGNS: dict[str, tuple[dict, SimSetup]] = {
    "good": ({}, SimSetup(interval_s=FAST)),
    # 60 mm × 1.27 mm: L/d = 47, under the rule of thumb; still fine for 60 s in a 51 mm specimen
    "too_short": ({"length_mm": 60.0}, SimSetup(interval_s=FAST)),
    "noisy_channel": ({}, SimSetup(interval_s=FAST, faults=("noisy_tc:heater",))),
    "drifting_heater": ({}, SimSetup(interval_s=FAST, faults=("heater_drift",))),
    # the profile says 3.2 MJ/(m³·K) but the unit was built heavier
    "wrong_heat_capacity": ({}, SimSetup(interval_s=FAST, probe_rho_c_MJ_per_m3K=4.5)),
    "poor_contact": ({}, SimSetup(interval_s=FAST, contact_conductance_W_per_m2K=500.0)),
}
EXPECTED_FAILURE = {"too_short": "length_to_diameter", "noisy_channel": "tc_noise",
                    "drifting_heater": "heater_drift", "wrong_heat_capacity": "probe_heat_capacity",
                    "poor_contact": "contact_resistance"}


@cache
def qualified(design: str) -> Qualification:
    kw, setup = DESIGNS[design]
    profile = needle(**kw)
    config = load_config()
    m = run_sync(profile, config, SimulatedQualificationRig(profile, setup), ScriptedOperator(GOOD_INSULATION))
    return judge(profile, config, m, simulated=True)


def not_passed(q: Qualification) -> set[str]:
    return {r.id for r in q.results if r.status not in ("pass", "not_applicable")}


# ---- the designs ----------------------------------------------------------------------------------------------

def test_good_design_passes_every_criterion() -> None:
    q = qualified("good")
    assert not_passed(q) == set(), [r for r in q.results if r.status not in ("pass", "not_applicable")]
    assert q.passed
    assert {r.id for r in q.results} == set(CRITERION_IDS)
    m = q.measurements
    # the simulated unit's own properties come back: heater 40 Ω, TCR 5e-5 /K, 3.2 MJ/(m³·K), H = 3000 W/(m²·K)
    assert m.heater is not None
    assert m.heater.R20_ohm == pytest.approx(40.0, rel=1e-3)
    assert m.heater.tcr_per_K == pytest.approx(5e-5, abs=3e-5)
    fits = [r.probe for r in m.runs if r.probe is not None]
    assert len(fits) == 6
    assert np.mean([f.probe_rho_c_J_per_m3K for f in fits]) == pytest.approx(3.2e6, rel=0.05)
    assert np.mean([f.contact_m2K_per_W for f in fits]) == pytest.approx(1 / 3000, rel=0.10)
    assert m.calibration is not None
    assert m.calibration.factor == pytest.approx(1.0, abs=0.02)


def test_water_reference_comes_from_the_iapws_formulation() -> None:
    # IAPWS 2011 conductivity (Huber et al. 2012) through the iapws package, at the medium's measured temperature
    iapws = pytest.importorskip("iapws")
    ref = next(r for r in qualified("good").measurements.references if r.name == "agar-gel")
    assert ref.temperature_C == pytest.approx(20.0, abs=0.1)
    water = iapws.IAPWS95(T=ref.temperature_C + 273.15, P=0.101325)
    assert ref.k_W_per_mK == pytest.approx(float(water.k), rel=1e-6)


@pytest.mark.parametrize("design", sorted(EXPECTED_FAILURE))
def test_each_bad_design_fails_its_own_criterion_and_no_other(design: str) -> None:
    q = qualified(design)
    assert not_passed(q) == {EXPECTED_FAILURE[design]}, [
        (r.id, r.item, r.detail) for r in q.results if r.status not in ("pass", "not_applicable")]
    assert not q.passed
    assert q.failed_ids == [EXPECTED_FAILURE[design]]


def test_noisy_channel_is_seen_at_its_real_level() -> None:
    # the simulator's noisy_tc fault is ten times the normal 10 mK RMS
    noise = qualified("noisy_channel").measurements.channels["heater"].noise_mK
    assert 70.0 < noise < 130.0
    assert qualified("good").measurements.channels["heater"].noise_mK < 15.0


def test_drift_is_measured_at_the_simulated_rate() -> None:
    # the simulator's heater_drift fault creeps by 2 %/h of device time
    d = qualified("drifting_heater").measurements.drift
    assert d is not None
    assert 100 * d.rate_rel_per_h == pytest.approx(2.0, abs=0.15)


def test_insulation_not_entered_is_not_measured_and_low_insulation_fails() -> None:
    profile = needle()
    config = load_config(overrides={"procedure": {"repeats": 2, "heat_s": 600.0, "baseline_s": 120.0}})
    setup = SimSetup(interval_s=FAST, axial_loss=False)
    m = run_sync(profile, config, SimulatedQualificationRig(profile, setup), ScriptedOperator({}))
    res = {r.id: r for r in evaluate(m, config, profile)}
    assert res["insulation"].status == "not_measured"
    m.insulation_MOhm, m.insulation_V = 40.0, 500.0
    res = {r.id: r for r in evaluate(m, config, profile)}
    assert res["insulation"].status == "fail"
    m.insulation_MOhm = 150.0
    assert {r.id: r for r in evaluate(m, config, profile)}["insulation"].status == "pass"


# ---- the physics behind the criteria, against outside references ---------------------------------------------

def _mp_probe(p: mp.mpf, alpha_J: float, h: float) -> mp.mpf:
    """L{4πk·ΔT/q} of a perfectly conducting probe with heat capacity and contact resistance (Blackwell 1954;
    Carslaw & Jaeger 1959 §13.7), written out here independently of the project's code."""
    z = mp.sqrt(p)
    n = mp.besselk(0, z) + h * z * mp.besselk(1, z)
    return (2 / p) * n / ((p / alpha_J) * n + z * mp.besselk(1, z))


def _mp_slope(F, tau: float, d: float = 0.01) -> float:
    f = lambda x: mp.invertlaplace(F, x, method="talbot")  # noqa: E731
    return float((f(tau * math.exp(d)) - f(tau * math.exp(-d))) / (2 * d))


@pytest.mark.parametrize(("alpha_J", "h"), [(2.61, 0.31), (1.25, 0.79)])
def test_response_time_is_where_the_exact_probe_slope_settles(alpha_J: float, h: float) -> None:
    mp.mp.dps = 15
    a, alpha, tol = 0.635e-3, 1.43e-7, 0.01
    t = an.response_time_s(a, alpha, alpha_J, h, tol)
    tau = alpha * t / a**2
    F = lambda p: _mp_probe(p, alpha_J, h)  # noqa: E731
    assert abs(_mp_slope(F, tau * 0.85) - 1) > tol          # not yet settled a little earlier
    assert abs(_mp_slope(F, tau * 1.05) - 1) <= tol         # settled just after
    assert abs(_mp_slope(F, tau * 3.0) - 1) < tol / 2       # and stays so


def test_boundary_time_is_where_a_bath_held_boundary_bends_the_slope() -> None:
    # Line source of radius a inside a cylinder held at the initial temperature at R (Carslaw & Jaeger 1959):
    # L{4πk·ΔT/q} = (2/p)·[K0(z)I0(ρz) − I0(z)K0(ρz)] / (z[K1(z)I0(ρz) + I1(z)K0(ρz)]), z = √p, ρ = R/a
    mp.mp.dps = 15
    a, R, alpha, tol = 0.635e-3, 0.0127, 5e-7, 0.01
    rho = R / a
    t = an.boundary_time_s(R, a, alpha, tol)

    def bounded(p: mp.mpf) -> mp.mpf:
        z = mp.sqrt(p)
        num = mp.besselk(0, z) * mp.besseli(0, rho * z) - mp.besseli(0, z) * mp.besselk(0, rho * z)
        den = z * (mp.besselk(1, z) * mp.besseli(0, rho * z) + mp.besseli(1, z) * mp.besselk(0, rho * z))
        return (2 / p) * num / den

    def free(p: mp.mpf) -> mp.mpf:
        z = mp.sqrt(p)
        return (2 / p) * mp.besselk(0, z) / (z * mp.besselk(1, z))

    def deviation(t_s: float) -> float:
        tau = alpha * t_s / a**2
        return abs(_mp_slope(bounded, tau) / _mp_slope(free, tau) - 1)

    assert deviation(0.9 * t) < tol < deviation(1.15 * t)
    # the penetration radius √(4κt·ln 100) is conservative: the boundary bites only after it has been passed
    g = an.geometry_checks(needle(), load_config().intended_use)
    assert g.boundary_time_s is not None and g.penetration_radius_mm < g.sample_radius_mm  # type: ignore[operator]


def test_axial_limit_is_the_finite_line_source_1_percent_time() -> None:
    # Finite heater, sensor at mid-length: slope ratio erf(L/(4√(κt))) (Blackwell 1956 finite line source);
    # water κ = 1.455e-7 m²/s and L = 100 mm give about 1295 s
    cfg = load_config(overrides={"intended_use": {"k_W_per_mK": 0.6065, "rho_c_MJ_per_m3K": 0.6065 / 0.1455}})
    g = an.geometry_checks(needle(), cfg.intended_use)
    t = g.sensors[0].axial_limit_s
    assert erf(0.100 / (4 * math.sqrt(1.455e-7 * t))) == pytest.approx(0.99, abs=1e-6)
    assert t == pytest.approx(1295, rel=0.005)


def test_sensor_spacing_bounds() -> None:
    # upper bound: erf(L/(2r)) ≥ 0.99 (finite line source at the signal time); lower bound a/r ≤ 0.11 (Knight,
    # Kluitenberg, Kamai & Hopmans 2012)
    cfg = load_config()
    assert cfg.criteria["sensor_spacing"].limit("max_spacing_to_length") == pytest.approx(
        1 / (2 * float(erfinv(0.99))), rel=2e-3)
    sensors = [{"name": "heater", "radial_mm": 0.0, "axial_mm": 50.0},
               {"name": "side", "radial_mm": 6.0, "axial_mm": 50.0},
               {"name": "far", "radial_mm": 40.0, "axial_mm": 50.0},
               {"name": "near", "radial_mm": 3.0, "axial_mm": 50.0}]
    profile = needle(sensors=sensors)
    m = Measurements(sensor="heater", geometry=an.geometry_checks(profile, cfg.intended_use))
    spacing = {r.item: r.status for r in evaluate(m, cfg, profile) if r.id == "sensor_spacing"}
    assert spacing == {"side": "pass", "far": "fail", "near": "fail"}


def test_sample_height_needs_the_needle_plus_the_radius() -> None:
    # ASTM D5334-22a ε1: at least the needle's length, plus the specimen's minimum radius recommended
    cfg = load_config(overrides={"intended_use": {"sample_diameter_mm": 51.0, "sample_height_mm": 120.0}})
    profile = needle()
    m = Measurements(sensor="heater", geometry=an.geometry_checks(profile, cfg.intended_use))
    res = {r.id: r for r in evaluate(m, cfg, profile)}
    assert res["sample_height"].status == "fail"   # 120 < 100 + 25.5
    cfg = load_config(overrides={"intended_use": {"sample_diameter_mm": 0.0}})
    m = Measurements(sensor="heater", geometry=an.geometry_checks(profile, cfg.intended_use))
    res = {r.id: r for r in evaluate(m, cfg, profile)}
    assert res["sample_height"].status == res["sample_radius"].status == "not_applicable"


# ---- pure steps ------------------------------------------------------------------------------------------------

def test_bracketed_baths_separate_a_drift_from_the_temperature_coefficient() -> None:
    # R = 40 Ω·(1 + 1e-4·(T − 20)) plus a creep of 1 %/h; baths 10, 40, 10 °C twenty minutes apart
    pts = []
    for i, T in enumerate((10.0, 40.0, 10.0)):
        t = 1200.0 * i
        R = 40.0 * (1 + 1e-4 * (T - 20.0)) + 40.0 * 0.01 * t / 3600.0
        pts.append(an.ResistancePoint(T, T, R, 1e-4, 20, t))
    fit = an.fit_heater_resistance(pts)
    assert fit.tcr_per_K == pytest.approx(1e-4, rel=0.02)
    assert fit.drift_rel_per_h == pytest.approx(0.01, rel=0.05)
    # the same points without the bracketing bath would have called the creep a coefficient
    naive = an.fit_heater_resistance(pts[:2])
    assert naive.tcr_per_K > 1.5e-4


def test_bath_statistics() -> None:
    rng = np.random.default_rng(7)
    t = np.arange(200.0)
    T = 20.05 + 1e-4 * t + rng.normal(0.0, 0.030, t.size)   # slow bath drift, 30 mK noise, +50 mK offset
    s = an.bath_channel_stats("x", t, T, 20.0)
    assert s.noise_mK == pytest.approx(30.0, rel=0.15)
    assert s.offset_K == pytest.approx(0.05 + 1e-4 * 99.5, abs=0.01)
    bad = an.bath_channel_stats("x", t, np.full(t.size, np.nan), 20.0, faults=1)
    summary = an.summarise_channel([bad])
    assert summary.faulted


# ---- settings, store, report, command line ---------------------------------------------------------------------

def test_every_default_criterion_names_its_source() -> None:
    cfg = load_config()
    for c in cfg.criteria.values():
        assert len(c.source) > 40, c.id
    assert config_from_toml(cfg.text) == cfg


def test_settings_errors_name_the_key(tmp_path: Path) -> None:
    bad = tmp_path / "c.toml"
    bad.write_text("[criteria.tc_nosie]\nmax_rms_mK = 5\n")
    with pytest.raises(QualificationConfigError, match=r"criteria\.tc_nosie"):
        load_config(bad)
    bad.write_text("[procedure]\nrepeats = 1\n")
    with pytest.raises(QualificationConfigError, match=r"procedure\.repeats"):
        load_config(bad)
    ok = tmp_path / "ok.toml"
    ok.write_text("[criteria.tc_noise]\nmax_rms_mK = 5.0\nrequired = false\n")
    cfg = load_config(ok)
    assert cfg.criteria["tc_noise"].limit("max_rms_mK") == 5.0 and not cfg.criteria["tc_noise"].required
    # an advisory criterion warns and does not decide the verdict
    q = qualified("good")
    res = {(r.id, r.item): r for r in evaluate(q.measurements, cfg, q.profile)}
    assert res[("tc_noise", "heater")].status == "warn"


def test_store_round_trip_and_report(tmp_path: Path) -> None:
    q = qualified("drifting_heater")
    store = open_store(tmp_path / "q.db")
    try:
        qid = save_qualification(store.db, q)
        assert list_qualifications(store.db, q.profile.serial) == []   # simulated: never under the real serial
        rows = list_qualifications(store.db, f"simulated:{q.profile.serial}")
        assert rows[0]["id"] == qid and rows[0]["passed"] is False and rows[0]["failed"] == ["heater_drift"]
        row = load_qualification(store.db, qid)
    finally:
        store.close()
    assert row["results"] == json.loads(json.dumps(q.to_json()))
    assert config_from_toml(row["criteria_toml"]) == q.config
    html_path, pdf_path = write_report(row["results"], tmp_path / "q.html", tmp_path / "q.pdf", row["criteria_toml"])
    text = html_path.read_text(encoding="utf-8")
    assert "NOT QUALIFIED" in text and "heater_drift" in text
    for cid in CRITERION_IDS:
        assert cid in text
    assert text.count("data:image/svg+xml;base64,") == 5
    assert pdf_path.read_bytes()[:5] == b"%PDF-"


FAST_SETTINGS = """
[procedure]
repeats = 2
baseline_s = 120.0
heat_s = 700.0
bath_log_s = 40.0
heater_check_s = 20.0
"""


def test_command_line(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    prof = tmp_path / "probe.toml"
    prof.write_text("""
[probe]
name = "bench needle"
serial = "QN-0042"
heater_length_mm = 100.0
radius_mm = 0.635
heat_capacity_MJ_per_m3K = 3.2
heater_resistance_ohm = 40.0
heater_tcr_per_K = 5e-5
thermocouple = "T"

[[sensor]]
name = "heater"
radial_mm = 0.0
axial_mm = 50.0
""")
    crit = tmp_path / "fast.toml"
    crit.write_text(FAST_SETTINGS)
    db = tmp_path / "l.db"
    common = ["qualify", "run", str(prof), "--simulate", "--criteria", str(crit), "--db", str(db),
              "--sim-interval", "1.6", "--sim-radial-only", "--insulation-MOhm", "5000", "--json"]
    assert cli_main(common) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["passed"] and out["failed"] == [] and out["id"] == 1
    assert cli_main([*common, "--sim-fault", "heater_drift"]) == 1
    out = json.loads(capsys.readouterr().out)
    assert out["failed"] == ["heater_drift"]

    assert cli_main(["qualify", "list", "--db", str(db)]) == 0
    listing = capsys.readouterr().out
    assert "QN-0042" in listing and "NOT QUALIFIED: heater_drift" in listing
    assert cli_main(["qualify", "show", "2", "--db", str(db)]) == 0
    assert "FAIL" in capsys.readouterr().out
    html = tmp_path / "r.html"
    assert cli_main(["qualify", "report", "1", "--db", str(db), "--html", str(html)]) == 0
    assert "QUALIFIED" in html.read_text(encoding="utf-8")
    assert cli_main(["qualify", "show", "9", "--db", str(db)]) == 2
    assert "no qualification 9" in capsys.readouterr().err
    assert cli_main(["qualify", "criteria"]) == 0
    assert "[criteria.insulation]" in capsys.readouterr().out


def test_profile_gaps_are_named_with_the_value_to_add() -> None:
    q = qualified("good")
    bare = profile_from_dict({"probe": {"name": "bench needle", "serial": "QN-0001", "heater_length_mm": 100.0,
                                        "radius_mm": 0.635},
                              "sensor": [{"name": "heater", "radial_mm": 0.0, "axial_mm": 50.0}]})
    res = {r.id: r for r in evaluate(q.measurements, q.config, bare)}
    assert res["probe_heat_capacity"].status == "fail"
    assert re.search(r"add heat_capacity_MJ_per_m3K = 3\.[0-3]\d", res["probe_heat_capacity"].detail)
    assert res["heater_resistance"].status == "not_applicable"
    assert re.search(r"add heater_resistance_ohm = (39\.9\d|40\.0\d)", res["heater_resistance"].detail)
