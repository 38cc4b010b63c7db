"""E1 and the constants the reduction is built on, against outside tables."""

import math

import mpmath
import numpy as np
import pytest

from linerig.daemon.reduction import window as win
from linerig.daemon.reduction.synthetic import line_source_run

# Abramowitz & Stegun (1964), Table 5.1, reproduced to 12 digits with mpmath (30-digit e1); values as tabulated
# with mpmath in the project's check-value notes (original sources: A&S Table 5.1, mpmath.e1).
E1_TABLE = [(0.0001, 8.63322470457), (0.001, 6.33153936414), (0.01, 4.03792957654), (0.1, 1.82292395842),
            (0.5, 0.559773594776), (1.0, 0.219383934396), (2.0, 0.0489005107081), (5.0, 0.00114829559128),
            (10.0, 4.15696892969e-6)]


@pytest.mark.parametrize(("x", "e1"), E1_TABLE)
def test_ideal_line_departure_matches_abramowitz_stegun_table_5_1(x: float, e1: float) -> None:
    # The window rules' departure of an ideal line at r from its late-time form, G = E1(x) + ln x + γ with
    # x = r²/(4αt) (Carslaw & Jaeger §10.4), against the tabulated E1 (A&S Table 5.1)
    r, alpha = 0.635e-3, 1.4548e-7
    age = r * r / (4 * alpha * x)
    G, _ = win.StepModel(alpha, r).deviation(np.array([age]))
    assert float(G[0]) == pytest.approx(e1 + math.log(x) + win.EULER_GAMMA, abs=2e-5 + 2e-5 * e1)


def test_record_generator_against_the_table() -> None:
    # the synthetic records of the other tests, ΔT = q/(4πk)·E1(r²/4αt), against A&S Table 5.1 (not scipy):
    # q = 4πk makes ΔT = E1 itself; t chosen so that x takes the tabulated values
    r, k, rho_c = 1e-3, 1.0, 1e6
    alpha = k / rho_c
    xs = np.array([x for x, _ in E1_TABLE])
    got = line_source_run(k, rho_c, 4 * math.pi * k, r, r * r / (4 * alpha * xs))
    assert got == pytest.approx([e for _, e in E1_TABLE], rel=1e-10)
    # the late-time form −γ − ln x departs from E1 by 0.016 %, 0.25 %, 2.0 %, 5.4 % at x = 0.001 … 0.1 (series
    # E1 = −γ − ln x + x − x²/4 …, Carslaw & Jaeger §10.4), which is why the window starts late
    for x, expected in [(0.001, -0.016e-2), (0.01, -0.25e-2), (0.05, -2.0e-2), (0.1, -5.4e-2)]:
        e1 = float(line_source_run(k, rho_c, 4 * math.pi * k, r, np.array([r * r / (4 * alpha * x)]))[0])
        assert (-win.EULER_GAMMA - math.log(x)) / e1 - 1 == pytest.approx(expected, abs=0.05 * abs(expected) + 1e-5)


def test_constants() -> None:
    # Euler's constant and e^γ/4 (for α = 0.4452681·r²/t0): standard values (e.g. A&S 6.1.3 / OEIS A001620)
    assert abs(win.EULER_GAMMA - float(mpmath.euler)) < 1e-15
    assert abs(win.EXP_GAMMA / 4 - 0.44526810) < 1e-8


def test_line_source_case_a_water() -> None:
    # Carslaw & Jaeger (1959) §10.4 line source, Case A: water 25 °C, q = 5 W/m, r = 0.635 mm (k, ρc from IAPWS)
    t = np.array([10, 60, 100, 300, 1000.0])
    exact = line_source_run(0.6065, 4.169e6, 5.0, 0.635e-3, t)
    assert exact == pytest.approx([1.417245, 2.555580, 2.887685, 3.605393, 4.394186], abs=2e-6)
    # recovery after 600 s of heating
    tc = np.array([610, 660, 900, 1200.0])
    cool = line_source_run(0.6065, 4.169e6, 5.0, 0.635e-3, tc, t_heat=600.0)
    assert cool == pytest.approx([2.652953, 1.566246, 0.719723, 0.454353], abs=2e-6)
