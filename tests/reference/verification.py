"""Print the solver's errors against each analytic solution at three resolutions (the README's table).

    .venv/bin/python -m tests.reference.verification

The tests (test_solver_*.py) assert on the same cases at the coarser resolutions; this prints the numbers.
"""

from __future__ import annotations

import math
import sys
import time
from collections.abc import Callable
from pathlib import Path

if __name__ == "__main__" and not __package__:
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
    __package__ = "tests.reference"

import numpy as np

from .analytic import finite_line, jaeger_probe, line_source, pulse_line_source
from .fv_axi import AxiGrid, AxiSensor, Medium, ProbeLayer, ResolvedProbe, build_axi
from .fv_planar import DualNeedle, NeedleLayers, PlanarGrid, build_planar
from .materials import Solid
from .stepper import PowerHistory, StepControl, integrate

SOIL = Solid("soil", 1.5, 2.0e6, "test")
A = 0.635e-3


def _ctl(scale: float, max_s: float = 0.5) -> StepControl:
    return StepControl(unit_s=2.0**-12, ratio=0.25 / scale, max_s=max_s / scale, store_s=max_s * max(1.0, 1 / scale))


def e1_case(scale: float) -> float:
    """Carslaw & Jaeger §10.4: line source, 100 s heating and 100 s recovery, read at 0.635 and 5 mm."""
    probe = ResolvedProbe(layers=(ProbeLayer(2e-5, SOIL, 2), ProbeLayer(A, SOIL, 8)))
    model = build_axi(probe, Medium((SOIL,)), (AxiSensor("a", A, 0.5), AxiSensor("b", 5e-3, 0.5)),
                      AxiGrid(r_out_m=1.0, infinite_length=True, medium_ratio=1.2, scale=scale))
    sol = integrate(model.system, PowerHistory.heat_then_off(10.0, 100.0), 200.0, _ctl(scale))
    t = sol.t_s[sol.t_s >= 1.0]
    v = sol.values[sol.t_s >= 1.0]
    al = SOIL.k / SOIL.rho_c
    err = 0.0
    for i, r in enumerate((A, 5e-3)):
        ref = line_source(10, SOIL.k, al, r, t) - np.where(t > 100, line_source(10, SOIL.k, al, r,
                                                                                np.maximum(t - 100, 1e-30)), 0)
        err = max(err, float(np.max(np.abs(v[:, i] - ref))))
    return err / float(line_source(10, SOIL.k, al, A, 100.0))


def jaeger_case(scale: float, rho_c: float, gap: float) -> float:
    """Jaeger 1956 / C&J §13.7 real integral: near-perfect conductor, contact film of k 0.026 and no capacity."""
    core = Solid("c", 1e6, rho_c, "t")
    film = Solid("f", 0.026, 1.0, "t")
    probe = ResolvedProbe(layers=(ProbeLayer(1e-4, core, 2), ProbeLayer(A, core, 4)),
                          gap=ProbeLayer(A + gap, film, 1) if gap else None)
    model = build_axi(probe, Medium((SOIL,)), (AxiSensor("axis", 0.0, 0.5),),
                      AxiGrid(r_out_m=1.0, infinite_length=True, medium_ratio=1.2, scale=scale))
    sol = integrate(model.system, PowerHistory.heat_then_off(10.0, 300.0), 300.0, _ctl(scale))
    b = A + gap
    sel = sol.t_s >= 1.0
    ref = jaeger_probe(10.0, SOIL.k, SOIL.k / SOIL.rho_c, b, probe.heat_capacity_per_m(),
                       film.k / (b * math.log(b / A)) if gap else None, sol.t_s[sel][::10])
    return float(np.max(np.abs(sol.values[sel, 0][::10] - ref) / ref))


def finite_line_case(scale: float) -> float:
    """Blackwell 1956 / C&J §10.3: a 40 mm segment, α = 1e-6; read at mid-length, 5 mm from an end, 5 mm out."""
    soil = Solid("s", 2.0, 2.0e6, "t")
    L = 0.04
    sensors = (AxiSensor("mid", A, L / 2), AxiSensor("end", A, 0.005), AxiSensor("far", 5e-3, L / 2))
    probe = ResolvedProbe(layers=(ProbeLayer(2e-5, soil, 2), ProbeLayer(A, soil, 6)), heated_z_m=(0.0, L), top_m=L)
    grid = AxiGrid(r_out_m=0.5, z_bottom_m=-0.5, z_top_m=L + 0.5, bc_top="fixed", medium_ratio=1.25,
                   dz_fine_m=4e-4, dz_growth=1.25, dz_max_m=4e-3, scale=scale)
    model = build_axi(probe, Medium((soil,)), sensors, grid)
    sol = integrate(model.system, PowerHistory.heat_then_off(10.0, 200.0), 200.0, _ctl(scale))
    sel = np.nonzero(sol.t_s >= 2.0)[0][::25]
    e = 0.0
    for i, s in enumerate(sensors):
        ref = finite_line(10.0, soil.k, soil.k / soil.rho_c, s.r_m, s.z_m, L, sol.t_s[sel])
        e = max(e, float(np.max(np.abs(sol.values[sel, i] - ref)) / ref[-1]))
    return e


def pulse_case(scale: float) -> float:
    """Kluitenberg, Ham & Bristow 1993: 8 s pulse at 50 W/m, read at 8 mm (needles made of the medium)."""
    soil = Solid("s", 2.5, 2.5e6, "t")
    dual = DualNeedle(NeedleLayers(((1e-4, soil, 2), (5e-4, soil, 4))), NeedleLayers(((5e-4, soil, 1),)), 8e-3)
    model = build_planar(dual, soil, PlanarGrid(extent_m=0.1, scale=scale))
    sol = integrate(model.system, PowerHistory.heat_then_off(50.0, 8.0), 60.0, _ctl(scale, 0.25))
    sel = sol.t_s >= 1.0
    ref = pulse_line_source(50.0, soil.k, soil.k / soil.rho_c, 8e-3, 8.0, sol.t_s[sel])
    return float(np.max(np.abs(sol.values[sel, 1] - ref)) / ref.max())


def planar_jaeger_case(scale: float) -> float:
    """Jaeger 1956 for the heater needle of the planar model (near-perfect conductor, ρc 3.5 MJ/(m³·K))."""
    soil = Solid("s", 2.5, 2.5e6, "t")
    cond = Solid("c", 1e6, 3.5e6, "t")
    a = 5e-4
    dual = DualNeedle(NeedleLayers(((1e-4, cond, 2), (a, cond, 4))), NeedleLayers(((a, soil, 1),)), 8e-3)
    model = build_planar(dual, soil, PlanarGrid(extent_m=0.1, scale=scale))
    sol = integrate(model.system, PowerHistory.heat_then_off(10.0, 40.0), 40.0, _ctl(scale, 0.25))
    sel = sol.t_s >= 1.0
    ref = jaeger_probe(10.0, soil.k, soil.k / soil.rho_c, a, math.pi * a * a * cond.rho_c, None, sol.t_s[sel][::4])
    return float(np.max(np.abs(sol.values[sel, 0][::4] - ref) / ref))


CASES: list[tuple[str, Callable[[float], float]]] = [
    ("infinite line, E1 heating + recovery (1-D)", e1_case),
    ("Jaeger probe, α_J 1.33, no contact (1-D)", lambda s: jaeger_case(s, 3.0e6, 0.0)),
    ("Jaeger probe, α_J 1.33, 10 µm film (1-D)", lambda s: jaeger_case(s, 3.0e6, 1e-5)),
    ("Jaeger probe, α_J 4, 40 µm film (1-D)", lambda s: jaeger_case(s, 1.0e6, 4e-5)),
    ("finite line 40 mm, 3 points (r, z)", finite_line_case),
    ("heat pulse at 8 mm (planar)", pulse_case),
    ("Jaeger heater needle (planar)", planar_jaeger_case),
]


if __name__ == "__main__":
    print("max |error| relative to the signal (see each case's docstring); scale ×2 = half the cells and steps")
    print(f"{'case':46s} {'scale ½':>10s} {'scale 1':>10s} {'scale 2':>10s} {'ratio':>6s} {'ratio':>6s}  time")
    for label, fn in CASES:
        t0 = time.perf_counter()
        e = [fn(s) for s in (0.5, 1.0, 2.0)]
        print(f"{label:46s} {e[0]:10.2e} {e[1]:10.2e} {e[2]:10.2e} {e[0] / e[1]:6.2f} {e[1] / e[2]:6.2f}"
              f"  {time.perf_counter() - t0:.0f} s", flush=True)
