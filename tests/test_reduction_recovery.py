"""Recovery (cooling) and joint fits: where the recovery's line holds, and when heating and recovery disagree.

Outside references, named beside each check:
- the line source ΔT = q/(4πk)·E1(r²/4αt) and its heating–recovery superposition
  ΔT = q/(4πk)·[E1(r²/4αt) − E1(r²/4α(t − t_h))] → q/(4πk)·ln(t/(t − t_h)) (Carslaw & Jaeger 1959, §10.4),
  evaluated with mpmath.e1 / scipy.special.exp1;
- the finite heater of length L from the continuous point source (Carslaw & Jaeger §10.2) integrated along the
  heater: 4πk·ΔT/q = ∫_{r²/4αt}^∞ (e^−u/u)·erf((L/2r)·√u) du at mid-length, integrated with mpmath.quad;
- the standard uncertainty of a rectangular distribution of half-width a, a/√3 (JCGM 100:2008, GUM §4.3.7);
- moisture driven away from a heated needle lowers k next to it (ASTM D5334-14 §1.2, first error source).
The simulated needle runs use the simulator's finite-volume (r, z) solver, which shares no code with the reduction.
"""

from __future__ import annotations

import math
from pathlib import Path

import mpmath as mp
import numpy as np
import pytest
from scipy.special import exp1

from linerig.daemon.probe import ProbeProfile, load_probe_profile
from linerig.daemon.reduction import window as win
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.cooling import MIN_RECOVERY_SAMPLES, choose_recovery_window, fit_recovery
from linerig.daemon.reduction.data import RunData
from linerig.daemon.reduction.synthetic import Medium, make_run
from linerig.daemon.sim.materials import get_material
from linerig.daemon.sim.physics import RadialModel
from linerig.daemon.sim.records import recorded_run
from linerig.daemon.sim.rig_model import ProbeSpec, SimulatedRig

ROOT = Path(__file__).resolve().parents[1]
NEEDLE = load_probe_profile(ROOT / "daemon" / "profiles" / "default-needle.toml")
LONG = ProbeProfile(name="long needle", radius_mm=0.635, heater_length_mm=1e5, heat_capacity_MJ_per_m3K=3.2)
SAND = get_material("moist-sand")
A = 0.635e-3


def _ideal_recovery(k: float, alpha: float, q: float, r: float, t: np.ndarray, t_h: float) -> np.ndarray:
    """Heating then recovery of the ideal line source (Carslaw & Jaeger §10.4, superposition)."""
    out = np.where(t > 0, exp1(r * r / (4 * alpha * np.clip(t, 1e-9, None))), 0.0)
    late = t > t_h
    out[late] -= exp1(r * r / (4 * alpha * (t[late] - t_h)))
    return q / (4 * math.pi * k) * out


def _needle_in_moist_sand(heat_s: float = 300.0, recover_s: float = 300.0, seed: int = 3) -> RunData:
    """The default needle in the simulator's moist sand, axial loss solved, 10 W/m, 1 Hz, 120 s of baseline."""
    rig = SimulatedRig(SAND, ProbeSpec.default_needle(), seed=seed, axial_loss=True)
    return recorded_run(rig, baseline_s=120.0, heat_s=heat_s, recover_s=recover_s, q_W_per_m=10.0)


# --- the predicted departure from the line ------------------------------------------------------------------

def test_ideal_line_departure_is_the_e1_remainder() -> None:
    alpha, r = 1.4e-7, A
    ages = np.array([1.0, 3.0, 10.0, 30.0, 100.0, 1000.0])
    G, g = win.StepModel(alpha, r).deviation(ages)
    for age, Gi, gi in zip(ages, G, g, strict=True):
        x = r * r / (4 * alpha * age)
        # E1(x) minus its late-time form −γ − ln x (Carslaw & Jaeger §10.4), by mpmath
        assert Gi == pytest.approx(float(mp.e1(x) + mp.log(x) + mp.euler), abs=1e-4)
        # local slope of E1 against ln t is exp(−r²/4αt) (Carslaw & Jaeger §10.4)
        assert gi == pytest.approx(math.exp(-x) - 1.0, abs=1e-4)


def test_finite_heater_departure_matches_the_point_source_integral() -> None:
    alpha, r, length = 5e-7, A, 0.060
    ages = np.array([20.0, length**2 / (53.1 * alpha), 300.0, 1000.0])
    G, g = win.StepModel(alpha, r, length_m=length).deviation(ages)
    for age, Gi, gi in zip(ages, G, g, strict=True):
        x0, c = r * r / (4 * alpha * age), length / (2 * r)
        # continuous point source (Carslaw & Jaeger §10.2) integrated over the heater, at mid-length
        total = mp.quad(lambda u, c=c: mp.exp(-u) / u * mp.erf(c * mp.sqrt(u)), [x0, 1e-3, 1e-2, 1, 10, mp.inf])
        assert Gi == pytest.approx(float(total - (mp.log(4 * alpha * age / r**2) - mp.euler)), abs=3e-4)
        # its local slope: exp(−r²/4αt)·erf(L/4√(αt))
        assert gi == pytest.approx(math.exp(-x0) * math.erf(length / (4 * math.sqrt(alpha * age))) - 1, abs=3e-4)
    # 1 % of slope lost to the ends at t = L²/(53.1·α) = 136 s (the axial criterion from the same integral)
    assert (g[1] + 1) / math.exp(-r * r / (4 * alpha * ages[1])) == pytest.approx(0.99, abs=5e-4)


def test_predicted_recovery_errors_match_the_exact_line_source_recovery() -> None:
    alpha, r, t_h = 1.4e-7, A, 100.0
    t = np.array([101.0, 105.0, 120.0, 200.0, 400.0])
    level, slope = win.recovery_errors(t, np.array([0.0, t_h]), np.array([5.0, -5.0]), win.StepModel(alpha, r))

    def exact(tt: float) -> mp.mpf:  # 4πk·ΔT/q after the heater went off (Carslaw & Jaeger §10.4, superposition)
        return mp.e1(r * r / (4 * alpha * tt)) - mp.e1(r * r / (4 * alpha * (tt - t_h)))

    for ti, li, si in zip(t, level, slope, strict=True):
        x = math.log(ti / (ti - t_h))
        assert li == pytest.approx(float(exact(ti)) / x - 1, abs=2e-4)
        h = 1e-3 * (ti - t_h)
        dx = math.log((ti + h) / (ti + h - t_h)) - math.log((ti - h) / (ti - h - t_h))
        assert si == pytest.approx(float((exact(ti + h) - exact(ti - h)) / dx) - 1, abs=2e-4)


# --- the window rule -----------------------------------------------------------------------------------------

def test_window_is_the_longest_run_within_the_smallest_tolerance_that_leaves_enough() -> None:
    t = 300.0 + np.arange(1.0, 101.0)
    err = np.full(100, 0.04)
    err[10:25] = 0.005          # 15 samples within 1 %: too few
    err[40:80] = 0.015          # 40 samples within 2 %
    w = choose_recovery_window(t, err, 300.0, 50.0)
    assert (w.tol, w.t_start, w.t_end) == (0.02, t[40], t[79])
    # the largest predicted error as a rectangular half-width: u = a/√3 (JCGM 100:2008 §4.3.7)
    assert w.window_u_rel == pytest.approx(0.015 / math.sqrt(3))
    assert MIN_RECOVERY_SAMPLES == 20


def test_no_window_past_five_percent_says_what_to_do() -> None:
    t = 300.0 + np.arange(1.0, 101.0)
    with pytest.raises(ValueError, match=r"L²/\(53α\)"):
        choose_recovery_window(t, np.full(100, 0.08), 300.0, 50.0)


def test_fit_through_the_origin_and_the_baseline_level_it_relies_on() -> None:
    k = 1.3
    t = np.arange(301.0, 400.0)
    X = 10.0 * np.log(t / (t - 300.0))
    Q = np.zeros_like(t)
    dT = X / (4 * math.pi * k)  # ΔT = q/(4πk)·ln(t/(t − t_h)) (Carslaw & Jaeger §10.4)
    assert fit_recovery(t, dT, X, Q, 301.0, 399.0).k_W_per_mK == pytest.approx(k, rel=1e-12)
    off = fit_recovery(t, dT + 0.005, X, Q, 301.0, 399.0, level_u_K=0.005)
    free = fit_recovery(t, dT + 0.005, X, Q, 301.0, 399.0, free_offset=True)
    assert free.k_W_per_mK == pytest.approx(k, rel=1e-9)      # a free offset takes a level error
    assert off.k_W_per_mK < k                                  # through the origin it lowers k ...
    assert abs(off.k_W_per_mK - k) == pytest.approx(off.k_u_stat_W_per_mK, rel=0.05)  # ... by what u says


# --- whole runs ----------------------------------------------------------------------------------------------

def test_exact_line_source_recovery_through_the_origin() -> None:
    k, rho_c, q, r = 0.6065, 4.169e6, 5.0, A  # water at 20 °C: IAPWS 2011 k, IAPWS-95 ρc
    t = np.arange(-120.0, 600.5, 1.0)
    temp = 15.0 + _ideal_recovery(k, k / rho_c, q, r, t, 300.0)
    data = RunData(t, np.where((t >= 0) & (t < 300), q, 0.0), {"heater": temp})
    s = reduce_run(data, ProbeProfile(name="ideal line", radius_mm=r * 1e3), method="line",
                   stable_rule=False).sensors["heater"]
    assert s.recovery is not None and not s.recovery.free_offset
    # within the largest predicted error in the window (the 1 % rule), which u = a/√3 carries (GUM §4.3.7)
    bound = math.sqrt(3) * s.recovery.window_u_rel + 1e-3
    assert 0 < bound <= 0.011
    assert abs(s.recovery.k_W_per_mK / k - 1) <= bound
    assert s.joint is not None and abs(s.joint.k_W_per_mK / k - 1) <= bound
    t0 = s.recovery.window_s[0]
    lead = float(_ideal_recovery(k, k / rho_c, q, r, np.array([t0]), 300.0)[0])
    # the window starts where the exact recovery is within 1 % of q/(4πk)·ln(t/(t − t_h)) (a little more: the
    # rule uses the α fitted from the heating, not the true one)
    assert abs(lead / (q / (4 * math.pi * k) * math.log(t0 / (t0 - 300.0))) - 1) <= 0.0125
    assert "heat_cool_disagree" not in s.flags


def test_without_a_baseline_the_recovery_keeps_a_free_offset() -> None:
    k, rho_c, q, r = 1.5, 2.5e6, 10.0, 1.0e-3  # moist soil after de Vries (1963)
    t = np.arange(1.0, 1200.5, 1.0)
    temp = 15.0 + _ideal_recovery(k, k / rho_c, q, r, t, 600.0)
    data = RunData(t, np.where(t < 600, q, 0.0), {"heater": temp})
    s = reduce_run(data, ProbeProfile(name="ideal line", radius_mm=r * 1e3), method="line",
                   stable_rule=False).sensors["heater"]
    assert "no_baseline" in s.flags
    assert s.recovery is not None and s.recovery.free_offset
    # recovery slope q/(4πk) against ln(t/(t − t_h)) (Carslaw & Jaeger §10.4)
    assert s.recovery.k_W_per_mK == pytest.approx(k, rel=0.01)
    assert "heat_cool_disagree" not in s.flags


def test_default_needle_in_moist_sand_heating_recovery_and_joint_agree() -> None:
    # The case that used to flag: 300 s at 10 W/m, longer than the 1 % axial-loss time L²/(53α) ≈ 205 s.
    data = _needle_in_moist_sand()
    s = reduce_run(data, NEEDLE, stable_rule=False).sensors["heater"]
    k = SAND.k_W_per_mK
    assert s.recovery is not None and s.joint is not None
    # the late-time slope q/(4πk) in heating and in ln(t/(t − t_h)) in recovery (Carslaw & Jaeger §10.4)
    for got in (s.k_raw_W_per_mK, s.recovery.k_W_per_mK):
        assert got == pytest.approx(k, rel=0.015)
    # the joint fit frees the drift (pinned by baseline and recovery): its expanded uncertainty holds the truth
    assert abs(s.joint.k_W_per_mK - k) <= 2 * s.joint.k_u_W_per_mK
    assert abs(s.recovery.k_W_per_mK - s.k_raw_W_per_mK) < 2 * math.hypot(s.recovery.k_u_W_per_mK,
                                                                          s.k_raw_u_W_per_mK)
    assert "heat_cool_disagree" not in s.flags
    # the window lies where the probe model with the medium's own values (Blackwell 1954 cylinder, H = 3000) and
    # the finite heater predict the recovery within 2 % of the line: after the probe, before axial loss
    true = win.StepModel(SAND.diffusivity_m2_per_s, A, 2 * SAND.rho_c_J_per_m3K / 3.2e6, k / (A * 3000.0),
                         0.100, 0.050)
    tw = data.time_s[(data.time_s >= s.recovery.window_s[0]) & (data.time_s <= s.recovery.window_s[1])]
    level, _ = win.recovery_errors(tw, np.array([0.0, 300.0]), np.array([10.0, -10.0]), true)
    assert np.max(np.abs(level)) < 0.02
    assert s.recovery.window_s[1] - 300.0 < 205.0


def test_needle_heated_three_times_the_axial_time_still_agrees() -> None:
    # the default plan (600 s) with the same needle: synthetic record, probe model and finite-line deficit
    medium = Medium(SAND.k_W_per_mK, SAND.rho_c_J_per_m3K)
    data = make_run(medium, q_W_per_m=10.0, probe_C=3.2e6, h=SAND.k_W_per_mK / (A * 3000.0), heat_s=600.0,
                    recover_s=600.0, baseline_s=120.0, noise_K=0.01, length_m=0.100,
                    rng=np.random.default_rng(4))
    s = reduce_run(data, NEEDLE, stable_rule=False).sensors["heater"]
    assert s.recovery is not None
    assert s.recovery.k_W_per_mK == pytest.approx(SAND.k_W_per_mK, rel=0.02)
    assert "heat_cool_disagree" not in s.flags


def _drying_shell(k_fraction: float, seed: int = 0) -> RunData:
    """Moist sand whose shell within a·(1 + √(t/300 s)) of the probe keeps ``k_fraction`` of k while heating."""
    m = RadialModel(SAND.k_W_per_mK, SAND.rho_c_J_per_m3K, A, 3.2e6, contact_conductance=3000.0)
    rng = np.random.default_rng(seed)
    t = np.arange(-120.0, 600.5, 1.0)
    q = np.where((t >= 0) & (t < 300), 10.0, 0.0)
    temp = np.empty_like(t)
    for i, ti in enumerate(t):
        temp[i] = 12.0 + m.probe_rise_K() + 0.01 * rng.standard_normal()
        if q[i] > 0:
            m.set_conductivity_within(A * (1 + math.sqrt((ti + 1.0) / 300.0)), k_fraction * SAND.k_W_per_mK)
        for _ in range(20):
            m.step(q[i], 0.05)
    return RunData(t, q, {"heater": temp})


def test_flag_fires_when_moisture_driven_off_lowers_k_during_heating() -> None:
    # ASTM D5334-14 §1.2: water redistributed by the needle's heat is the first error source it names
    s = reduce_run(_drying_shell(0.85), LONG, stable_rule=False).sensors["heater"]
    assert s.recovery is not None
    assert s.k_raw_W_per_mK < 0.95 * s.recovery.k_W_per_mK
    assert "heat_cool_disagree" in s.flags
    clean = reduce_run(_drying_shell(1.0), LONG, stable_rule=False).sensors["heater"]
    assert "heat_cool_disagree" not in clean.flags


def test_flag_fires_when_the_power_log_was_wrong_early_in_the_heating() -> None:
    # the log read 20 % high for the first minute (a monitor still settling): the heating's late slope sees a
    # power history that was not there, the recovery's level integrates the whole of it
    medium = Medium(SAND.k_W_per_mK, SAND.rho_c_J_per_m3K)
    data = make_run(medium, q_W_per_m=10.0, probe_C=3.2e6, h=SAND.k_W_per_mK / (A * 3000.0), heat_s=300.0,
                    recover_s=300.0, baseline_s=120.0, noise_K=0.01, rng=np.random.default_rng(8))
    q = data.q_W_per_m.copy()
    q[(data.time_s >= 0) & (data.time_s < 60)] *= 1.2
    for method in ("auto", "line"):
        s = reduce_run(RunData(data.time_s, q, data.temps_C), LONG, method=method,
                       stable_rule=False).sensors["heater"]
        assert s.recovery is not None, s.notes
        assert "heat_cool_disagree" in s.flags, (method, s.k_raw_W_per_mK, s.recovery.k_W_per_mK)
    honest = reduce_run(data, LONG, stable_rule=False).sensors["heater"]
    assert "heat_cool_disagree" not in honest.flags
