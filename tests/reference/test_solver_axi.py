"""The axisymmetric solver against analytic solutions, with its grid and time-step convergence.

Coarse grids keep each test to a few seconds; the convergence ratios show the errors shrink as the second-order
scheme says, so the finer grids of the stored records are closer still (their own estimate is in each record).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from .analytic import finite_line, jaeger_probe, line_source
from .fv_axi import AxiGrid, AxiSensor, Medium, ProbeLayer, ResolvedProbe, build_axi
from .materials import Solid
from .stepper import PowerHistory, StepControl, integrate

SOIL = Solid("soil", 1.5, 2.0e6, "test medium")
ALPHA = SOIL.k / SOIL.rho_c
A = 0.635e-3


def _line_run(scale: float, t_ratio: float = 1.0) -> tuple[np.ndarray, np.ndarray]:
    # a homogeneous "probe" (the medium itself) heated in a 20 µm core: an ideal line at r ≫ 20 µm
    probe = ResolvedProbe(layers=(ProbeLayer(2e-5, SOIL, 2), ProbeLayer(A, SOIL, 8)))
    model = build_axi(probe, Medium((SOIL,)), (AxiSensor("a", A, 0.5), AxiSensor("b", 5e-3, 0.5)),
                      AxiGrid(r_out_m=1.0, infinite_length=True, medium_ratio=1.2, scale=scale))
    ctl = StepControl(unit_s=2.0**-12, ratio=0.25 / t_ratio, max_s=0.5 / t_ratio, store_s=0.5)
    sol = integrate(model.system, PowerHistory.heat_then_off(10.0, 100.0), 200.0, ctl)
    return sol.t_s, sol.values


def _e1_heat_cool(r: float, t: np.ndarray) -> np.ndarray:
    # Carslaw & Jaeger 1959 §10.4: E1 during heating, E1 difference after switch-off (superposition)
    after = np.where(t > 100.0, line_source(10.0, SOIL.k, ALPHA, r, np.maximum(t - 100.0, 1e-30)), 0.0)
    return line_source(10.0, SOIL.k, ALPHA, r, t) - after


def test_infinite_line_source_and_its_recovery() -> None:
    errs = []
    for scale in (0.5, 1.0, 2.0):
        t, v = _line_run(scale)
        sel = t >= 1.0
        err = max(np.max(np.abs(v[sel, i] - _e1_heat_cool(r, t[sel]))) for i, r in enumerate((A, 5e-3)))
        errs.append(err)
    peak = float(_e1_heat_cool(A, np.array([100.0]))[0])
    assert errs[1] < 3e-3 * peak  # medium cells growing by 20 % per cell
    assert errs[2] < 1e-3 * peak
    # second order in space: halving ln(r_{i+1}/r_i) divides the error by about 4
    assert 3.0 < errs[0] / errs[1] < 5.5
    assert 3.0 < errs[1] / errs[2] < 5.5


def test_time_step_convergence_is_second_order() -> None:
    runs = [_line_run(1.0, f) for f in (1.0, 2.0, 4.0)]
    common = runs[0][0]
    for t, _ in runs[1:]:
        common = np.intersect1d(common, t)
    v = [vals[np.searchsorted(t, common), 0] for t, vals in runs]
    d12 = np.max(np.abs(v[0] - v[1]))
    d24 = np.max(np.abs(v[1] - v[2]))
    assert 3.0 < d12 / d24 < 5.5  # Richardson-extrapolated backward Euler: error ∝ dt²
    assert d12 < 1e-3  # K, on a 3.2 K signal


@pytest.mark.parametrize(("rho_c_probe", "gap_m"), [(3.0e6, 0.0), (3.0e6, 1e-5), (1.0e6, 4e-5)])
def test_perfectly_conducting_probe_with_contact_layer(rho_c_probe: float, gap_m: float) -> None:
    # Jaeger 1956; Carslaw & Jaeger 1959 §13.7; Blackwell 1954 (real-integral form, analytic.jaeger_probe).
    # The resolved probe is made a near-perfect conductor (k 1e6) and the contact a real thin layer of k 0.026
    # with no heat capacity; the equivalent Jaeger probe has radius b = a + gap and H = k_gap/(b·ln(b/a)).
    core = Solid("conductor", 1e6, rho_c_probe, "test")
    gap = Solid("film", 0.026, 1.0, "test")
    errs = []
    for scale in (1.0, 2.0):
        probe = ResolvedProbe(layers=(ProbeLayer(1e-4, core, 2), ProbeLayer(A, core, 4)),
                              gap=ProbeLayer(A + gap_m, gap, 1) if gap_m else None)
        model = build_axi(probe, Medium((SOIL,)), (AxiSensor("axis", 0.0, 0.5),),
                          AxiGrid(r_out_m=1.0, infinite_length=True, medium_ratio=1.2, scale=scale))
        sol = integrate(model.system, PowerHistory.heat_then_off(10.0, 300.0), 300.0,
                        StepControl(unit_s=2.0**-12, ratio=0.25 / scale, max_s=0.5 / scale, store_s=0.5))
        b = A + gap_m
        H = gap.k / (b * math.log(b / A)) if gap_m else None
        sel = sol.t_s >= 1.0
        ref = jaeger_probe(10.0, SOIL.k, ALPHA, b, probe.heat_capacity_per_m(), H, sol.t_s[sel][::10])
        errs.append(np.max(np.abs(sol.values[sel, 0][::10] - ref) / ref))
    # relative error from t = 1 s (τ ≈ 1.9) on; the largest errors are the first seconds
    assert errs[0] < 2e-3
    assert errs[1] < 6e-4
    assert errs[0] / errs[1] > 2.5


def test_finite_line_source_axial_loss() -> None:
    # Blackwell 1956 / Carslaw & Jaeger 1959 §10.3: a 40 mm heated segment in an infinite medium (the probe is
    # the medium itself, heated in a 20 µm core), read at the probe radius at mid-length and 5 mm from an end,
    # and at 5 mm radius; α = 1e-6 m²/s so the ends matter after about L²/(53α) = 30 s.
    soil = Solid("soil", 2.0, 2.0e6, "test")
    a = soil.k / soil.rho_c
    L = 0.04
    sensors = (AxiSensor("mid", A, L / 2), AxiSensor("end", A, 0.005), AxiSensor("far", 5e-3, L / 2))
    errs = []
    for scale in (0.5, 1.0):
        probe = ResolvedProbe(layers=(ProbeLayer(2e-5, soil, 2), ProbeLayer(A, soil, 6)), heated_z_m=(0.0, L),
                              top_m=L)
        grid = AxiGrid(r_out_m=0.5, z_bottom_m=-0.5, z_top_m=L + 0.5, bc_top="fixed", medium_ratio=1.25,
                       dz_fine_m=4e-4, dz_growth=1.25, dz_max_m=4e-3, scale=scale)
        model = build_axi(probe, Medium((soil,)), sensors, grid)
        sol = integrate(model.system, PowerHistory.heat_then_off(10.0, 200.0), 200.0,
                        StepControl(unit_s=2.0**-12, ratio=0.25, max_s=0.5, store_s=0.5))
        sel = np.nonzero(sol.t_s >= 2.0)[0][::25]
        e = 0.0
        for i, s in enumerate(sensors):
            ref = finite_line(10.0, soil.k, a, s.r_m, s.z_m, L, sol.t_s[sel])
            e = max(e, float(np.max(np.abs(sol.values[sel, i] - ref)) / ref[-1]))
        errs.append(e)
    assert errs[1] < 4e-3  # of the final rise, from t = 2 s on
    assert errs[0] / errs[1] > 3.0
    # and the axial loss is really there: from 100 to 200 s the mid-length rise grows by under 80 % of the
    # infinite line's (local slope ≈ erf(L/4√(αt)) ≈ 0.68 of the ideal at 200 s)
    fin = np.diff(finite_line(10.0, soil.k, a, A, L / 2, L, np.array([100.0, 200.0])))[0]
    inf = np.diff(line_source(10.0, soil.k, a, A, np.array([100.0, 200.0])))[0]
    assert fin < 0.8 * inf


def test_bath_boundary_reaches_the_steady_logarithm() -> None:
    # Steady radial conduction from a line source inside a cylinder held at the bath temperature at R
    # (any conduction text, e.g. Carslaw & Jaeger 1959 §7.2): ΔT(r) = q/(2πk)·ln(R/r).
    R = 0.02
    probe = ResolvedProbe(layers=(ProbeLayer(2e-5, SOIL, 2), ProbeLayer(A, SOIL, 6)))
    model = build_axi(probe, Medium((SOIL,)), (AxiSensor("a", A, 0.5), AxiSensor("b", 5e-3, 0.5)),
                      AxiGrid(r_out_m=R, infinite_length=True, medium_ratio=1.2))
    sol = integrate(model.system, PowerHistory((0.0,), (10.0,)), 4096.0,
                    StepControl(max_s=4.0, store_s=64.0))
    want = 10.0 / (2 * math.pi * SOIL.k) * np.log(R / np.array([A, 5e-3]))
    assert np.allclose(sol.values[-1], want, rtol=2e-3)
    # at steady state all the power leaves through the bath
    assert sol.energy_out_J == pytest.approx(sol.energy_in_J - sol.energy_stored_J, rel=1e-10)


def test_energy_is_conserved_in_a_layered_probe_with_gap_and_power_steps() -> None:
    # the ledger: power in = stored heat + heat through the bath, to rounding, whatever the steps did
    steel = Solid("steel", 14.9, 3.77e6, "test")
    air = Solid("air", 0.026, 1.2e3, "test")
    probe = ResolvedProbe(layers=(ProbeLayer(1e-4, steel, 2), ProbeLayer(4e-4, Solid("fill", 0.2, 1.3e6, "t"), 3),
                                  ProbeLayer(A, steel, 2)), heated_z_m=(5e-4, 0.0505), top_m=0.06,
                          tip_cap_m=5e-4, gap=ProbeLayer(A + 2e-5, air, 1))
    medium = Medium((SOIL, Solid("clay", 1.1, 2.7e6, "t")), (0.03,))
    grid = AxiGrid(r_out_m=0.03, z_bottom_m=-0.02, z_top_m=0.06, bc_top="fixed", medium_ratio=1.3,
                   dz_fine_m=5e-4, dz_max_m=4e-3)
    model = build_axi(probe, medium, (AxiSensor("axis", 0.0, 0.02),), grid)
    power = PowerHistory((0.0, 20.0, 45.0, 60.0), (5.0, 3.5, 8.0, 0.0))
    sol = integrate(model.system, power, 300.0, StepControl(ratio=0.25, max_s=1.0, store_s=1.0))
    assert sol.energy_in_J == pytest.approx((5 * 20 + 3.5 * 25 + 8 * 15) * 0.05, rel=1e-12)
    assert abs(sol.energy_residual_rel) < 1e-10
    assert sol.energy_out_J > 0.1 * sol.energy_in_J  # the bath really took heat


def test_insulated_box_keeps_every_joule() -> None:
    probe = ResolvedProbe(layers=(ProbeLayer(1e-4, SOIL, 2), ProbeLayer(A, SOIL, 2)), heated_z_m=(0.0, 0.01),
                          top_m=0.01)
    grid = AxiGrid(r_out_m=0.01, z_bottom_m=-0.01, z_top_m=0.02, bc_outer="adiabatic", bc_bottom="adiabatic",
                   bc_top="adiabatic", medium_ratio=1.3, dz_fine_m=5e-4, dz_max_m=2e-3)
    model = build_axi(probe, Medium((SOIL,)), (AxiSensor("axis", 0.0, 0.005),), grid)
    sol = integrate(model.system, PowerHistory.heat_then_off(2.0, 30.0), 2000.0, StepControl(max_s=4.0, store_s=8.0))
    assert sol.energy_out_J == 0.0
    assert sol.energy_stored_J == pytest.approx(2.0 * 30.0 * 0.01, rel=1e-11)
    # and it ends uniform at energy / total heat capacity
    total_c = float(model.system.cap.sum())
    assert sol.values[-1, 0] == pytest.approx(0.6 / total_c, rel=1e-4)
