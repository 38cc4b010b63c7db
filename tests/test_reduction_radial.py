"""Sensors at a known distance: finite-pulse relations and the E1 fit for k, α and ρc."""

import numpy as np
import pytest

from linerig.daemon.probe import ProbeProfile, SensorPosition
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.data import RunData
from linerig.daemon.reduction.radial import peak, pulse_check, pulse_forward, pulse_inverse
from linerig.daemon.reduction.synthetic import line_source_run

# Finite-pulse dual-probe values, r = 6 mm, q = 60 W/m, t0 = 8 s (Kluitenberg, Ham & Bristow 1993 model;
# Bristow et al. 1994), as computed in the project's check-value notes.
PULSE_TABLE = [(1.0, 2.5e6, 26.9673, 0.62130), (0.6065, 4.169e6, 66.0369, 0.37425), (0.30, 1.3e6, 43.2722, 1.19893)]


@pytest.mark.parametrize(("k", "rho_c", "t_m", "dT_m"), PULSE_TABLE)
def test_pulse_peak_matches_published_model(k: float, rho_c: float, t_m: float, dT_m: float) -> None:
    t = np.arange(0.0, 400.0, 0.01)
    dT = pulse_forward(6e-3, 60.0, 8.0, k, rho_c, t)
    tp, hp = peak(t, dT)
    assert tp == pytest.approx(t_m, abs=2e-3)
    assert hp == pytest.approx(dT_m, abs=2e-5)
    kappa, rc, kk = pulse_inverse(6e-3, 60.0, 8.0, t_m, dT_m)
    assert rc == pytest.approx(rho_c, rel=2e-4)
    assert kk == pytest.approx(k, rel=2e-4)
    assert kappa == pytest.approx(k / rho_c, rel=2e-4)


def test_short_pulse_peak_tends_to_the_instantaneous_source() -> None:
    # Campbell et al. (1991): an instantaneous line source peaks at t_m = r²/(4κ); with κ = 4e-7 m²/s and r = 6 mm,
    # 22.5 s. The project's finite-pulse forward model and peak finder, with a 0.05 s pulse, find it within
    # half the pulse length, and the inverse gives κ back.
    t = np.arange(0.0, 80.0, 0.001)
    dT = pulse_forward(6e-3, 9600.0, 0.05, 1.0, 2.5e6, t)  # 480 J/m in 0.05 s
    tp, hp = peak(t, dT)
    assert tp == pytest.approx((6e-3) ** 2 / (4 * 4e-7) + 0.025, abs=0.01)
    kappa, _, _ = pulse_inverse(6e-3, 9600.0, 0.05, tp, hp)
    assert kappa == pytest.approx(4e-7, rel=1e-3)


def _dual_probe_record(k: float, rho_c: float, heat_s: float, q: float = 20.0, noise: float = 0.0):
    t = np.arange(-60.0, 600.0, 0.5)
    qq = np.where((t >= 0) & (t < heat_s), q, 0.0)
    near = line_source_run(k, rho_c, q, 0.4e-3, t, t_heat=heat_s)
    far = line_source_run(k, rho_c, q, 6e-3, t, t_heat=heat_s)
    rng = np.random.default_rng(1)
    return RunData(t, qq, {"heater": 18 + near + noise * rng.standard_normal(t.size),
                           "far": 18 + far + noise * rng.standard_normal(t.size)})


def test_long_heating_radial_fit_gives_k_alpha_rho_c() -> None:
    # exact line source at r = 6 mm (Carslaw & Jaeger §10.4); thin massless heater
    probe = ProbeProfile(name="dual", radius_mm=0.4, heater_length_mm=1e5,
                         sensors=(SensorPosition("heater", 0.0), SensorPosition("far", 6.0)))
    res = reduce_run(_dual_probe_record(1.0, 2.5e6, 300.0, noise=0.002), probe).sensors["far"]
    assert res.method == "radial"
    assert res.k_W_per_mK == pytest.approx(1.0, rel=0.01)
    assert res.alpha_m2_per_s == pytest.approx(4e-7, rel=0.02)
    assert res.rho_c_J_per_m3K == pytest.approx(2.5e6, rel=0.03)


def test_short_pulse_cross_check() -> None:
    t = np.arange(0.0, 300.0, 0.25)
    dT = pulse_forward(6e-3, 60.0, 8.0, 1.0, 2.5e6, t)
    pc = pulse_check(t, dT, 6e-3, 60.0, 8.0)
    assert pc is not None
    assert pc.rho_c_J_per_m3K == pytest.approx(2.5e6, rel=0.005)
    assert pc.k_W_per_mK == pytest.approx(1.0, rel=0.005)
