"""The simulated rig: heater circuit, battery, thermocouple read-out, layers and faults."""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest
from scipy.special import exp1

from linerig.daemon.sim.materials import MATERIALS, get_material
from linerig.daemon.sim.physics import ModelConfigError, RadialModel
from linerig.daemon.sim.rig_model import (
    FAULT_CJ,
    FAULT_NAMES,
    FAULT_OPEN,
    FAULT_RANGE,
    FAULT_STALE,
    BatterySpec,
    ProbeSpec,
    SensorSpec,
    SimulatedRig,
    UnknownFaultError,
)

SAND = get_material("moist-sand")


def needle(**kw: object) -> ProbeSpec:
    base = ProbeSpec.default_needle()
    fields = {f: getattr(base, f) for f in base.__dataclass_fields__}
    fields.update(kw)
    return ProbeSpec(**fields)  # type: ignore[arg-type]


def run(rig: SimulatedRig, seconds: float, dt: float = 1.0) -> list:
    out = []
    for _ in range(round(seconds / dt)):
        rig.advance(dt)
        out.append(rig.sample())
    return out


def test_default_needle_shape() -> None:
    p = ProbeSpec.default_needle()
    assert p.heater_length_m == pytest.approx(0.100)
    assert 2 * p.radius_m == pytest.approx(1.27e-3)
    assert p.heater_resistance_ohm == pytest.approx(40.0)
    assert p.thermocouple == "T"
    assert [s.name for s in p.sensors] == ["probe"]


def test_heated_needle_reads_the_probe_model_and_the_meter_reads_the_power() -> None:
    rig = SimulatedRig(SAND, needle(heater_tcr_per_K=0.0), seed=3, noise_K_rms=0.0, quantum_K=0.0,
                       channel_offset_sd_K=0.0)
    run(rig, 30)
    base = rig.sample().channels[0].temp_C
    assert base == pytest.approx(12.0, abs=1e-9)
    rig.set_heater(True, 10.0)
    samples = run(rig, 300)
    s = samples[-1]
    p = ProbeSpec.default_needle()
    ref = RadialModel(SAND.k_W_per_mK, SAND.rho_c_J_per_m3K, p.radius_m, p.probe_rho_c, p.contact_conductance)
    for _ in range(300):
        ref.step(10.0, 1.0)
    # the rig splits 1 s into 0.8 + 0.2 s steps, hence not bit-identical
    assert s.channels[0].temp_C - base == pytest.approx(ref.probe_rise_K(), rel=1e-5)
    assert s.delivered_W_per_m == pytest.approx(10.0)
    # the monitor's V·I is the heater power and V/I its resistance (Ohm's and Joule's laws), within 0.2 %
    assert s.heater_V * s.heater_A / p.heater_length_m == pytest.approx(10.0, rel=2e-3)
    assert s.heater_V / s.heater_A == pytest.approx(40.0, rel=2e-3)
    assert s.heater_on


def test_heater_resistance_follows_its_temperature_coefficient() -> None:
    rig = SimulatedRig(SAND, needle(heater_tcr_per_K=4e-3), seed=0, initial_ground_C=20.0)
    assert rig.heater_resistance_ohm() == pytest.approx(40.0)  # nominal at 20 C
    rig.set_heater(True, 20.0)
    run(rig, 200)
    rise = rig.true_temp_C("probe") - 20.0
    assert rise > 5.0
    assert rig.heater_resistance_ohm() == pytest.approx(40.0 * (1 + 4e-3 * rise), rel=1e-3)


def test_power_sags_when_the_battery_cannot_keep_up() -> None:
    # a 1 m rod with a 100 ohm heater asking 20 W/m from a 12.8 V battery: at full duty the heater gets
    # V²R/(R + R_int)² (Ohm's law for a source with internal resistance), far below 20 W
    rod = ProbeSpec(1.0, 3e-3, 3.2e6, 100.0, (SensorSpec("mid", 0.0, 0.5),), heater_tcr_per_K=0.0)
    batt = BatterySpec(internal_resistance_ohm=0.5)
    rig = SimulatedRig(SAND, rod, seed=0, battery=batt)
    rig.set_heater(True, 20.0)
    rig.advance(1.0)
    s = rig.sample()
    voc = rig.open_circuit_V()
    assert s.delivered_W_per_m == pytest.approx(voc**2 * 100.0 / 100.5**2, rel=1e-6)
    assert s.delivered_W_per_m < 20.0
    # as energy is drawn the battery's voltage, and with it the power, keeps falling
    first = s.delivered_W_per_m
    run(rig, 3600, dt=10.0)
    assert rig.sample().delivered_W_per_m < first


def test_reachable_power_is_held_until_the_battery_runs_low() -> None:
    rig = SimulatedRig(SAND, needle(heater_tcr_per_K=0.0), seed=0)
    rig.set_heater(True, 35.0)  # 3.5 W into 40 ohm: needs 11.8 V at the heater
    run(rig, 10)
    assert rig.sample().delivered_W_per_m == pytest.approx(35.0)
    rig.inject("battery_low")
    run(rig, 10)
    low = rig.sample()
    # at full duty: V_oc²R/(R + R_int)² with V_oc at the cut-off (Ohm's law)
    r_int = BatterySpec().internal_resistance_ohm
    assert low.delivered_W_per_m == pytest.approx(10 * 11.6**2 * 40.0 / (40.0 + r_int) ** 2, rel=1e-6)
    assert low.delivered_W_per_m < 35.0
    assert low.supply_V < 11.6
    rig.inject("battery_low", on=False)
    run(rig, 1)
    assert rig.sample().delivered_W_per_m == pytest.approx(35.0)


def test_open_thermocouple_sets_the_fault_bit() -> None:
    rig = SimulatedRig(SAND, ProbeSpec.default_needle(), seed=0)
    rig.inject("open_tc:probe")
    s = run(rig, 2)[-1]
    assert s.channels[0].fault_bits & FAULT_OPEN
    assert math.isnan(s.channels[0].temp_C)
    assert "open_tc:probe" in rig.active_faults
    rig.inject("open_tc:0", on=False)
    s = run(rig, 1)[-1]
    assert s.channels[0].fault_bits == 0 and not math.isnan(s.channels[0].temp_C)


def test_heater_open_passes_no_current_and_no_heat() -> None:
    rig = SimulatedRig(SAND, ProbeSpec.default_needle(), seed=0, noise_K_rms=0.0, channel_offset_sd_K=0.0)
    rig.inject("heater_open")
    rig.set_heater(True, 10.0)
    s = run(rig, 60)[-1]
    assert s.heater_A == 0.0 and s.delivered_W_per_m == 0.0
    assert s.heater_V > 12.0  # the open terminals see the whole battery
    assert rig.true_temp_C("probe") == pytest.approx(12.0, abs=1e-12)


def test_heater_short_draws_limited_current_and_heats_nothing() -> None:
    batt = BatterySpec()
    rig = SimulatedRig(SAND, ProbeSpec.default_needle(), seed=0, battery=batt)
    rig.inject("heater_short")
    rig.set_heater(True, 50.0)
    s = run(rig, 30)[-1]
    assert 0.0 < s.heater_A <= batt.current_limit_A * 1.002
    assert s.heater_V / s.heater_A == pytest.approx(0.2, rel=5e-3)
    assert s.delivered_W_per_m == 0.0
    assert rig.true_temp_C("probe") == pytest.approx(12.0, abs=1e-12)


def test_same_seed_same_data_other_seed_other_noise() -> None:
    def record(seed: int) -> list:
        rig = SimulatedRig(SAND, ProbeSpec.default_needle(), seed=seed, drift_K_per_h=0.2)
        rig.set_heater(True, 8.0)
        return [(s.cj_C, s.channels[0].temp_C, s.heater_V, s.supply_V) for s in run(rig, 120, dt=0.5)]

    assert record(7) == record(7)
    assert record(7) != record(8)


def test_noise_rms_is_as_configured() -> None:
    # Gaussian noise plus uniform quantisation error (variance quantum²/12, Widrow's quantisation model)
    noise, quantum = 0.012, 1 / 128
    rig = SimulatedRig(SAND, ProbeSpec.default_needle(), seed=11, noise_K_rms=noise, quantum_K=quantum)
    temps = np.array([s.channels[0].temp_C for s in run(rig, 3000)])
    assert np.std(temps) == pytest.approx(math.sqrt(noise**2 + quantum**2 / 12), rel=0.06)
    steps = temps / quantum
    assert np.allclose(steps, np.round(steps))  # every reading is a whole number of converter steps


def test_ground_drift_is_as_configured() -> None:
    rig = SimulatedRig(SAND, ProbeSpec.default_needle(), seed=2, drift_K_per_h=0.36, noise_K_rms=0.0,
                       quantum_K=0.0, channel_offset_sd_K=0.0)
    run(rig, 3600, dt=10.0)
    assert rig.sample().channels[0].temp_C == pytest.approx(12.36, abs=1e-9)


def test_cold_junction_wanders_near_ambient() -> None:
    rig = SimulatedRig(SAND, ProbeSpec.default_needle(), seed=4, ambient_C=21.0)
    cj = np.array([s.cj_C for s in run(rig, 7200, dt=5.0)])
    assert abs(cj.mean() - 21.0) < 0.5
    assert 0.02 < cj.std() < 0.5


def test_sensor_beside_the_heater_sees_the_line_source() -> None:
    # dual needle: sensor 6 mm away; far from a thin heater the rise tends to q/(4πk)·E1(r²/4κt)
    # (Carslaw & Jaeger §10.4); the heater's own capacity delays it slightly, so compare late
    probe = ProbeSpec(0.1, 0.4e-3, 3.2e6, 40.0, (("heater", 0.0, 0.05), ("side", 6e-3, 0.05)))
    rig = SimulatedRig(SAND, probe, seed=0, noise_K_rms=0.0, quantum_K=0.0, channel_offset_sd_K=0.0)
    rig.set_heater(True, 10.0)
    run(rig, 900)
    kappa = SAND.diffusivity_m2_per_s
    expected = 10.0 / (4 * math.pi * SAND.k_W_per_mK) * exp1(6e-3**2 / (4 * kappa * 900))
    assert rig.true_temp_C("side") - 12.0 == pytest.approx(expected, rel=0.01)
    assert rig.true_temp_C("heater") > rig.true_temp_C("side")


def test_rod_in_layered_ground_gives_each_layer_its_own_slope() -> None:
    # junctions named by their distance from the tip; the rod's top end is at the surface, its tip 1.5 m down, so
    # they sit 0.3, 0.6, 0.9 and 1.2 m deep, each at least 0.15 m from a layer boundary
    junctions = (("tip1200", 0.0, 1.2), ("tip900", 0.0, 0.9), ("tip600", 0.0, 0.6), ("tip300", 0.0, 0.3))
    rod = ProbeSpec(1.5, 1.5e-3, 3.2e6, 4.0, junctions, contact_conductance=None, heater_tcr_per_K=0.0)
    layers = [(0.45, MATERIALS["moist-clay"]), (1.05, MATERIALS["saturated-sand"])]
    rig = SimulatedRig(MATERIALS["dry-sand"], rod, seed=0, layers=layers, noise_K_rms=0.0, quantum_K=0.0,
                       channel_offset_sd_K=0.0)
    rig.set_heater(True, 5.0)
    temps = {n: [] for n in rig.channel_names}
    times = []
    for s in run(rig, 8000, dt=10.0):
        times.append(s.t_s)
        for c in s.channels:
            temps[c.name].append(c.temp_C)
    t = np.log(times)
    late = t > math.log(3000)  # kappa t / a^2 > 300 in the dry sand: probe capacity effect < 1 % (Blackwell 1954)
    for name, key in (("tip1200", "dry-sand"), ("tip900", "moist-clay"), ("tip600", "moist-clay"),
                      ("tip300", "saturated-sand")):
        slope = np.polyfit(t[late], np.array(temps[name])[late], 1)[0]
        # late-time slope q/(4πk) of the line source (Carslaw & Jaeger §10.4)
        assert slope == pytest.approx(5.0 / (4 * math.pi * MATERIALS[key].k_W_per_mK), rel=0.02), name


def test_short_probe_with_axial_loss_reads_a_lower_slope() -> None:
    # finite heater: mid-length slope falls as erf(L/(4√(κt))) (finite line source, derived from C&J §10.4)
    short = ProbeSpec(0.03, 0.635e-3, 3.2e6, 20.0, (("probe", 0.0, 0.015),), heater_tcr_per_K=0.0)
    kw = {"seed": 0, "noise_K_rms": 0.0, "quantum_K": 0.0, "channel_offset_sd_K": 0.0}
    flat = SimulatedRig(SAND, short, **kw)
    axial = SimulatedRig(SAND, short, axial_loss=True, **kw)
    for rig in (flat, axial):
        rig.set_heater(True, 10.0)
    a1 = f1 = 0.0
    for i in range(600):
        for rig in (flat, axial):
            rig.advance(1.0)
        if i == 299:
            a1, f1 = axial.true_temp_C("probe"), flat.true_temp_C("probe")
    slope_axial = (axial.true_temp_C("probe") - a1) / math.log(2)
    slope_flat = (flat.true_temp_C("probe") - f1) / math.log(2)
    assert slope_flat == pytest.approx(10.0 / (4 * math.pi * SAND.k_W_per_mK), rel=0.02)
    assert slope_axial < 0.8 * slope_flat


def test_irregular_advance_matches_regular_advance() -> None:
    kw = {"seed": 0, "noise_K_rms": 0.0, "quantum_K": 0.0, "channel_offset_sd_K": 0.0}
    a, b = SimulatedRig(SAND, ProbeSpec.default_needle(), **kw), SimulatedRig(SAND, ProbeSpec.default_needle(), **kw)
    a.set_heater(True, 10.0)
    b.set_heater(True, 10.0)
    rng = np.random.default_rng(0)
    while a.t_s < 200.0:
        a.advance(float(rng.uniform(0.01, 3.0)))
    b.advance(a.t_s)
    assert a.t_s == pytest.approx(b.t_s)
    assert a.true_temp_C("probe") == pytest.approx(b.true_temp_C("probe"), rel=2e-3)


def test_other_channel_faults() -> None:
    probe = ProbeSpec(0.1, 0.635e-3, 3.2e6, 40.0, (("a", 0.0, 0.05), ("b", 0.0, 0.05)))
    rig = SimulatedRig(SAND, probe, seed=5, ambient_C=25.0, noise_K_rms=0.0, cj_quantum_K=0.0)
    rig.set_heater(True, 10.0)
    run(rig, 30)
    rig.inject("stale_tc:b")
    frozen = rig.sample().channels[1]
    assert frozen.fault_bits & FAULT_STALE
    run(rig, 30)
    later = rig.sample().channels
    assert later[1].temp_C == frozen.temp_C and later[0].temp_C > frozen.temp_C
    rig.inject("short_tc:a")
    s = rig.sample()
    assert s.channels[0].temp_C == pytest.approx(s.cj_C, abs=0.1) and s.channels[0].fault_bits == 0
    rig.inject("cj_fault")
    s = rig.sample()
    assert math.isnan(s.cj_C)
    assert all(c.fault_bits & FAULT_CJ for c in s.channels)


def test_noisy_channel_is_ten_times_noisier() -> None:
    probe = ProbeSpec(0.1, 0.635e-3, 3.2e6, 40.0, (("a", 0.0, 0.05), ("b", 0.0, 0.05)))
    rig = SimulatedRig(SAND, probe, seed=5, noise_K_rms=0.01, quantum_K=0.0, faults=["noisy_tc:b"])
    samples = run(rig, 1000)
    sa = np.std([s.channels[0].temp_C for s in samples])
    sb = np.std([s.channels[1].temp_C for s in samples])
    assert sb / sa == pytest.approx(10.0, rel=0.15)


def test_out_of_range_reading_is_flagged() -> None:
    rig = SimulatedRig(SAND, ProbeSpec.default_needle(), seed=0, initial_ground_C=450.0)  # type T tops at 400 C
    assert rig.sample().channels[0].fault_bits & FAULT_RANGE


def test_heater_drift_and_poor_contact() -> None:
    rig = SimulatedRig(SAND, needle(heater_tcr_per_K=0.0), seed=0, faults=["heater_drift"])
    run(rig, 3600, dt=10.0)
    assert rig.heater_resistance_ohm() == pytest.approx(40.0 * math.exp(0.02), rel=1e-6)
    kw = {"seed": 0, "noise_K_rms": 0.0}
    good, poor = SimulatedRig(SAND, needle(), **kw), SimulatedRig(SAND, needle(), faults=["poor_contact"], **kw)
    for rig in (good, poor):
        rig.set_heater(True, 10.0)
        run(rig, 300)
    # contact offset q/(2πaH) grows by 9/(2πaH) when H falls to a tenth (Blackwell 1954)
    p = ProbeSpec.default_needle()
    extra = 10.0 / (2 * math.pi * p.radius_m) * (1 / (0.1 * p.contact_conductance) - 1 / p.contact_conductance)
    assert poor.true_temp_C("probe") - good.true_temp_C("probe") == pytest.approx(extra, rel=0.02)


def test_unknown_faults_and_channels_are_refused_with_the_valid_names() -> None:
    rig = SimulatedRig(SAND, ProbeSpec.default_needle(), seed=0)
    with pytest.raises(UnknownFaultError, match="heater_open"):
        rig.inject("meltdown")
    with pytest.raises(UnknownFaultError, match="probe"):
        rig.inject("open_tc:nope")
    assert set(FAULT_NAMES) >= {"open_tc:<channel>", "heater_open", "heater_short"}


def test_emf_function_is_applied_to_the_reading() -> None:
    seen = []

    def emf(tc: str, hot_C: float, ref_C: float) -> float:
        seen.append((tc, hot_C, ref_C))
        return 40.0 * (hot_C - ref_C)  # a linear stand-in is enough to check the plumbing

    rig = SimulatedRig(SAND, ProbeSpec.default_needle(), seed=0, emf_function=emf)
    c = rig.sample().channels[0]
    assert seen and seen[0][0] == "T"
    assert c.emf_uV == pytest.approx(40.0 * (c.temp_C - seen[0][2]), abs=0.06)


def test_from_profile_reads_millimetre_and_si_attributes() -> None:
    prof = SimpleNamespace(
        name="dual-6mm", heater_length_mm=60.0, radius_mm=0.65, heat_capacity_MJ_per_m3K=2.9,
        heater_resistance_ohm=33.0, heater_tcr_per_K=1e-4, thermocouple="type E",
        sensors=[SimpleNamespace(name="heater", radial_mm=0.0, axial_mm=30.0), ("side", 6.0, 30.0)],
    )
    p = ProbeSpec.from_profile(prof)
    assert p.heater_length_m == pytest.approx(0.06) and p.radius_m == pytest.approx(0.65e-3)
    assert p.probe_rho_c == pytest.approx(2.9e6)
    assert p.thermocouple == "E" and p.name == "dual-6mm"
    assert p.sensors == (SensorSpec("heater", 0.0, 0.03), SensorSpec("side", 6e-3, 0.03))
    q = ProbeSpec.from_profile({"length_m": 1.0, "radius_m": 3e-3, "heat_capacity_J_per_m3K": 3e6,
                                "sensors": [{"name": "top", "radial_m": 0.0, "axial_m": 0.1}]})
    assert q.heater_length_m == 1.0 and q.sensors[0] == SensorSpec("top", 0.0, 0.1)
    assert q.heater_resistance_ohm == pytest.approx(3.6)  # 12 V delivers 40 W/m when none is given
    with pytest.raises(ModelConfigError, match="radius"):
        ProbeSpec.from_profile({"length_m": 0.1})


def test_from_profile_accepts_the_daemons_default_profile() -> None:
    from pathlib import Path

    from linerig.daemon.probe import load_probe_profile

    path = Path(__file__).resolve().parent.parent / "daemon" / "profiles" / "default-needle.toml"
    p = ProbeSpec.from_profile(load_probe_profile(path))
    assert p.heater_length_m == pytest.approx(0.1) and p.radius_m == pytest.approx(0.635e-3)
    assert p.probe_rho_c == pytest.approx(3.2e6) and p.heater_resistance_ohm == pytest.approx(40.0)
    assert [(s.name, s.radial_m, s.axial_m) for s in p.sensors] == [("heater", 0.0, pytest.approx(0.05))]


def test_insulated_lab_sample_keeps_the_heat_it_was_given() -> None:
    # first law: with an adiabatic sample wall every joule delivered stays in probe + sample
    kw = {"seed": 0, "noise_K_rms": 0.0, "quantum_K": 0.0, "channel_offset_sd_K": 0.0}
    p = ProbeSpec.default_needle()
    rig = SimulatedRig(MATERIALS["glycerol"], p, sample_radius_m=0.025, sample_boundary="adiabatic", **kw)
    rig.set_heater(True, 4.0)
    delivered = 0.0
    for _ in range(600):
        rig.advance(1.0)
        delivered += rig.sample().delivered_W_per_m * 1.0
    model = rig._models[0]
    assert model.energy_J_per_m() == pytest.approx(delivered, rel=1e-9)
    with pytest.raises(ModelConfigError, match="axial_loss"):
        SimulatedRig(SAND, p, sample_height_m=0.1)


def test_sample_moved_into_a_bath_reaches_half_way_at_fourier_0_2005() -> None:
    # surface-step cylinder test: an infinite cylinder's centre is half-way to the bath at Fo = κt/R² = 0.200524
    # (series solution, Carslaw & Jaeger §7.4)
    gel = MATERIALS["agar-gel"]
    R = 0.030
    centre = ProbeSpec(0.01, 0.05e-3, gel.rho_c_J_per_m3K, 40.0, (("centre", 0.0, 0.005),), contact_conductance=None)
    rig = SimulatedRig(gel, centre, seed=0, initial_ground_C=20.0, sample_radius_m=R, noise_K_rms=0.0,
                       quantum_K=0.0, channel_offset_sd_K=0.0)
    run(rig, 10)
    rig.step_surroundings(40.0)
    assert rig.true_temp_C("centre") == pytest.approx(20.0)
    t50 = None
    while t50 is None:
        before = rig.true_temp_C("centre")
        rig.advance(1.0)
        if rig.true_temp_C("centre") >= 30.0:
            t50 = rig.t_s - 10.0 - (rig.true_temp_C("centre") - 30.0) / (rig.true_temp_C("centre") - before)
    assert t50 == pytest.approx(0.200524 * R * R / gel.diffusivity_m2_per_s, rel=5e-3)
    run(rig, 9000, dt=5.0)
    assert rig.true_temp_C("centre") == pytest.approx(40.0, abs=0.01)


def test_dry_out_steepens_the_late_curve() -> None:
    # drying next to the probe adds a growing resistance, so the late slope exceeds q/(4πk) of the moist
    # medium (the moisture-migration error of ASTM D5334-14 §1.2); without the fault it does not
    kw = {"seed": 0, "noise_K_rms": 0.0, "quantum_K": 0.0, "channel_offset_sd_K": 0.0}
    ideal = 10.0 / (4 * math.pi * SAND.k_W_per_mK)
    slopes = {}
    for faults in ((), ("dry_out",)):
        rig = SimulatedRig(SAND, ProbeSpec.default_needle(), faults=faults, **kw)
        rig.set_heater(True, 10.0)
        run(rig, 300)
        t1 = rig.true_temp_C("probe")
        run(rig, 300)
        slopes[faults] = (rig.true_temp_C("probe") - t1) / math.log(2)
    assert slopes[()] == pytest.approx(ideal, rel=0.02)
    assert slopes[("dry_out",)] > 1.3 * ideal
    with pytest.raises(ModelConfigError, match="dry_out"):
        SimulatedRig(SAND, ProbeSpec.default_needle(), axial_loss=True).inject("dry_out")
