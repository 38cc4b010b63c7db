"""The simulated dual needle: a pulse read millimetres from a 40 mm heater.

The simulator solves the (r, z) conduction problem by finite volumes; the reduction's pulse model is a Laplace-
domain cylinder solution with the finite length as a product factor. Agreement between the two is a check of both
(different numerical methods for the same conduction problem).
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from linerig.daemon.probe import load_probe_profile
from linerig.daemon.pulse_plan import probe_geometry
from linerig.daemon.reduction.pulse_model import sensor_rise
from linerig.daemon.sim.main import bent
from linerig.daemon.sim.materials import get_material
from linerig.daemon.sim.rig_model import ProbeSpec, SimulatedRig

DUAL = Path(__file__).resolve().parent.parent / "hardware" / "probes" / "dual-needle.toml"


def _pulse(rig: SimulatedRig, q: float, pulse_s: int, end_s: int) -> tuple[np.ndarray, np.ndarray]:
    t, rise = [], []
    base = rig.true_temp_C("needle8")
    for i in range(end_s):
        if i == 0:
            rig.set_heater(True, q)
        if i == pulse_s:
            rig.set_heater(False)
        t.append(float(i))
        rise.append(rig.true_temp_C("needle8") - base)
        rig.advance(1.0)
    return np.array(t), np.array(rise)


def test_the_simulated_dual_needle_sees_the_ends_of_its_heater() -> None:
    profile = load_probe_profile(DUAL)
    spec = ProbeSpec.from_profile(profile)
    assert spec.kind == "dual" and spec.sensors[1].needle_radius_m == pytest.approx(0.5e-3)
    mat = get_material("moist-clay")
    # perfect contact and no needle lag: the conduction problem the pulse model solves
    spec = ProbeSpec(spec.heater_length_m, spec.radius_m, spec.probe_rho_c, spec.heater_resistance_ohm,
                     (spec.sensors[0], spec.sensors[1].__class__("needle8", 8e-3, 0.02)), contact_conductance=None,
                     heater_tcr_per_K=0.0, kind="dual")
    rig = SimulatedRig(mat, spec, noise_K_rms=0.0, quantum_K=0.0, channel_offset_sd_K=0.0)
    t, sim = _pulse(rig, 20.0, 50, 300)
    g = probe_geometry(profile, "needle8")
    g = g.__class__(g.spacing_m, g.heater_radius_m, g.heater_C_J_per_m3K, 0.0, None, g.length_m, g.axial_m)
    model = sensor_rise(t, np.array([0.0, 50.0]), np.array([20.0, -20.0]), mat.k_W_per_mK, mat.rho_c_J_per_m3K, g)
    endless = sensor_rise(t, np.array([0.0, 50.0]), np.array([20.0, -20.0]), mat.k_W_per_mK, mat.rho_c_J_per_m3K,
                          g, axial=False)
    peak = float(np.max(model))
    assert np.max(np.abs(sim - model)) < 0.005 * peak      # finite volumes on a 60-ring grid against the model
    assert np.max(np.abs(sim - endless)) > 0.04 * peak     # the ends matter: 4 % of the peak and more


@pytest.mark.parametrize("material", ["moist-sand", "dry-sand"])
def test_the_simulated_sensing_needle_reads_as_the_pulse_model_has_it(material: str) -> None:
    # The sensing needle is a conductor with a heat capacity: the simulator steps a fitted sum of lags of the
    # ground's rise; the pulse model inverts the same transfer function in the Laplace domain (Gaver–Stehfest).
    # Compared: what the needle changes, simulator (with and without it) against model (with and without it),
    # so the finite volumes' own 0.5–1 % of the peak against the model cancels out.
    profile = load_probe_profile(DUAL)
    spec = ProbeSpec.from_profile(profile)
    spec = ProbeSpec(**{**spec.__dict__, "contact_conductance": None, "heater_tcr_per_K": 0.0})
    junction = spec.sensors[1].__class__("needle8", spec.sensors[1].radial_m, spec.sensors[1].axial_m)
    bare_spec = ProbeSpec(**{**spec.__dict__, "sensors": (spec.sensors[0], junction)})
    mat = get_material(material)
    quiet = {"noise_K_rms": 0.0, "quantum_K": 0.0, "channel_offset_sd_K": 0.0}
    rig = SimulatedRig(mat, spec, **quiet)
    needle = rig._channels[1].needle
    assert needle is not None and needle.fit_error < 1e-4
    t, sim = _pulse(rig, 20.0, 8, 150)
    _, sim_bare = _pulse(SimulatedRig(mat, bare_spec, **quiet), 20.0, 8, 150)
    g = probe_geometry(profile, "needle8")
    assert g.sensor_radius_m > 0 and g.sensor_C_J_per_m3K
    steps = (np.array([0.0, 8.0]), np.array([20.0, -20.0]))
    model = sensor_rise(t, *steps, mat.k_W_per_mK, mat.rho_c_J_per_m3K, g)
    bare = sensor_rise(t, *steps, mat.k_W_per_mK, mat.rho_c_J_per_m3K,
                       g.__class__(g.spacing_m, g.heater_radius_m, g.heater_C_J_per_m3K, 0.0, None, g.length_m,
                                   g.axial_m))
    peak = float(np.max(model))
    assert np.max(np.abs(model - bare)) > 0.015 * peak          # the needle matters: 1.5 % of the peak and more
    assert np.max(np.abs((sim - sim_bare) - (model - bare))) < 0.002 * peak
    assert np.max(np.abs(sim - model)) < 0.015 * peak


def test_a_bent_needle_moves_the_sensor() -> None:
    spec = ProbeSpec.from_profile(load_probe_profile(DUAL))
    moved = bent(spec, ["needle8=8.3"])
    assert moved.sensors[1].radial_m == pytest.approx(8.3e-3) and moved.sensors[1].needle_radius_m == 0.5e-3
    with pytest.raises(ValueError, match="needle9"):
        bent(spec, ["needle9=8.3"])
    with pytest.raises(ValueError, match="SENSOR=MM"):
        bent(spec, ["needle8"])


def test_linerigd_refuses_a_bad_simulated_spacing(tmp_path: Path) -> None:
    done = subprocess.run([sys.executable, "-m", "linerig.daemon.main", "--simulate", "--probe", str(DUAL),
                           "--sim-spacing", "needle8=0.2", "--socket", str(tmp_path / "s"), "--db",
                           str(tmp_path / "d.db")], capture_output=True, text=True, timeout=60)
    assert done.returncode == 2 and "--sim-spacing 'needle8=0.2'" in done.stderr and "Traceback" not in done.stderr
