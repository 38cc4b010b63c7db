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


def test_the_sensing_needle_lags_the_ground() -> None:
    spec = ProbeSpec.from_profile(load_probe_profile(DUAL))
    lagged = SimulatedRig(get_material("moist-sand"), spec, noise_K_rms=0.0, quantum_K=0.0, channel_offset_sd_K=0.0)
    bare = SimulatedRig(get_material("moist-sand"), ProbeSpec(**{**spec.__dict__, "sensors": (
        spec.sensors[0], spec.sensors[1].__class__("needle8", 8e-3, 0.02))}), noise_K_rms=0.0, quantum_K=0.0,
        channel_offset_sd_K=0.0)
    t, a = _pulse(lagged, 20.0, 30, 120)
    _, b = _pulse(bare, 20.0, 30, 120)
    # the needle's lag is under a second (b²C·ln(r/b)/2k), so it shows only where the rise is steep
    assert float(t[np.argmax(a)]) >= float(t[np.argmax(b)])
    assert 0 < np.max(b - a) < 0.05 * np.max(b)


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
