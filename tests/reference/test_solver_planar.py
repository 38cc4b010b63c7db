"""The planar dual-needle solver against analytic solutions, with its convergence."""

from __future__ import annotations

import math

import numpy as np

from .analytic import jaeger_probe, pulse_line_source
from .fv_planar import DualNeedle, NeedleLayers, PlanarGrid, build_planar
from .materials import Solid
from .stepper import PowerHistory, StepControl, integrate

SOIL = Solid("soil", 2.5, 2.5e6, "test medium")  # α = 1e-6 m²/s: the 8 mm peak comes near 20 s
ALPHA = SOIL.k / SOIL.rho_c
S = 8e-3
A = 0.5e-3


def _pulse(scale: float, sensor: Solid = SOIL, t_end: float = 60.0) -> tuple[np.ndarray, np.ndarray, float]:
    dual = DualNeedle(NeedleLayers(((1e-4, SOIL, 2), (A, SOIL, 4))), NeedleLayers(((A, sensor, 1),)), S)
    model = build_planar(dual, SOIL, PlanarGrid(extent_m=0.1, scale=scale))
    sol = integrate(model.system, PowerHistory.heat_then_off(50.0, 8.0), t_end,
                    StepControl(ratio=0.25, max_s=0.25, store_s=0.5))
    assert abs(sol.energy_residual_rel) < 1e-10
    return sol.t_s, sol.values[:, 1], sol.energy_in_J


def test_heat_pulse_at_the_sensing_needle_is_the_finite_pulse_line_source() -> None:
    # Kluitenberg, Ham & Bristow 1993 (E1 difference after the pulse), here with the needles made of the medium
    errs = []
    for scale in (0.5, 1.0):
        t, v, e_in = _pulse(scale)
        assert e_in == 0.5 * 50.0 * 8.0  # half the plane, J per metre
        sel = t >= 1.0
        ref = pulse_line_source(50.0, SOIL.k, ALPHA, S, 8.0, t[sel])
        errs.append(np.max(np.abs(v[sel] - ref)) / ref.max())
    assert errs[1] < 1e-3  # of the peak rise
    assert errs[0] / errs[1] > 2.5


def test_heater_needle_is_the_perfectly_conducting_probe() -> None:
    # Jaeger 1956; Carslaw & Jaeger 1959 §13.7 (real-integral form): the heater needle as a near-perfect
    # conductor of heat capacity S = πa²ρc, perfect contact, the sensing needle made of the medium.
    cond = Solid("conductor", 1e6, 3.5e6, "test")
    errs = []
    for scale in (0.5, 1.0):
        dual = DualNeedle(NeedleLayers(((1e-4, cond, 2), (A, cond, 4))), NeedleLayers(((A, SOIL, 1),)), S)
        model = build_planar(dual, SOIL, PlanarGrid(extent_m=0.1, scale=scale))
        sol = integrate(model.system, PowerHistory.heat_then_off(10.0, 40.0), 40.0,
                        StepControl(unit_s=2.0**-12, ratio=0.25 / scale, max_s=0.25 / scale, store_s=0.5))
        sel = sol.t_s >= 1.0
        ref = jaeger_probe(10.0, SOIL.k, ALPHA, A, math.pi * A * A * cond.rho_c, None, sol.t_s[sel][::4])
        errs.append(np.max(np.abs(sol.values[sel, 0][::4] - ref) / ref))
    assert errs[1] < 1.5e-3
    assert errs[0] / errs[1] > 2.5


def test_a_heavy_sensing_needle_lowers_and_delays_the_peak() -> None:
    # Knight, Kluitenberg, Kamai & Hopmans 2012: a sensing needle whose heat capacity exceeds the medium's
    # lowers and delays the peak; a lighter one does the opposite.
    t, v_ref, _ = _pulse(0.5)
    _, v_heavy, _ = _pulse(0.5, Solid("heavy", 15.0, 4.0e6, "test"))
    _, v_light, _ = _pulse(0.5, Solid("light", 15.0, 1.0e6, "test"))
    assert v_heavy.max() < v_ref.max() < v_light.max()
    assert t[np.argmax(v_heavy)] > t[np.argmax(v_ref)] >= t[np.argmax(v_light)]
