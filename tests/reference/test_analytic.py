"""The analytic oracles themselves, checked against independent forms and published limits."""

from __future__ import annotations

import math

import mpmath as mp
import numpy as np
import pytest
from scipy.optimize import minimize_scalar
from scipy.special import exp1

from .analytic import finite_line, jaeger_probe, line_source, pulse_line_source

EULER_C = math.exp(0.5772156649015329)  # C = e^γ


def _dimless_jaeger(aj: float, h: float, tau: np.ndarray) -> np.ndarray:
    """4πkΔT/q of the real-integral form for a = 1, α = 1, k = 1 (so t = τ)."""
    S = 2.0 * math.pi / aj  # ρc = 1
    return jaeger_probe(4.0 * math.pi, 1.0, 1.0, 1.0, S, None if h == 0 else 1.0 / h, tau)


@pytest.mark.parametrize(("aj", "h"), [(2.0, 0.0), (1.0, 2.0), (0.5, 0.5)])
def test_jaeger_real_integral_equals_the_inverted_transform(aj: float, h: float) -> None:
    # The Laplace-domain probe solution (Blackwell 1954; Jaeger 1956; Carslaw & Jaeger 1959 §13.7),
    # L{4πkΔT/q}(p) = (2/p)·N/[(p/α_J)·N + √p·K1(√p)], N = K0(√p) + h√p·K1(√p), inverted here by mpmath's
    # Talbot contour — a different route to the same function than the real integral under test.
    mp.mp.dps = 15

    def F(p: mp.mpf) -> mp.mpf:
        z = mp.sqrt(p)
        n = mp.besselk(0, z) + h * z * mp.besselk(1, z)
        return (2 / p) * n / ((p / aj) * n + z * mp.besselk(1, z))

    taus = np.array([0.3, 30.0])
    got = _dimless_jaeger(aj, h, taus)
    want = np.array([float(mp.invertlaplace(F, t, method="talbot")) for t in taus])
    assert np.max(np.abs(got - want)) < 2e-8


@pytest.mark.parametrize(("aj", "h"), [(2.0, 0.0), (1.3, 0.4), (0.6, 1.5)])
def test_jaeger_long_time_expansion(aj: float, h: float) -> None:
    # Carslaw & Jaeger 1959 §13.7 / Blackwell 1954 large-τ form:
    # 4πkΔT/q = 2h + ln(4τ/C) + [(α_J − 2)·ln(4τ/C) + α_J − 4h]/(2α_J·τ) + O(ln²τ/τ²)
    tau = np.array([2e4, 2e5])
    lg = np.log(4 * tau / EULER_C)
    asym = 2 * h + lg + ((aj - 2) * lg + aj - 4 * h) / (2 * aj * tau)
    assert np.max(np.abs(_dimless_jaeger(aj, h, tau) - asym)) < 5e-7


def test_jaeger_short_time_is_the_lumped_probe() -> None:
    # At τ → 0 every joule stays in the probe: ΔT = q·t/S, i.e. 4πkΔT/q = 2α_J·τ (Jaeger 1956, first term);
    # the leak into the medium lowers it by a relative O(√τ), about 1e-3 at τ = 1e-6 for α_J = 1.4.
    tau = np.array([1e-8, 1e-6])
    got = _dimless_jaeger(1.4, 0.0, tau)
    assert np.allclose(got, 2 * 1.4 * tau, rtol=[2e-4, 2e-3])


def test_finite_line_tends_to_the_steady_segment_potential() -> None:
    # Steady temperature at mid-length of a line segment of length L (potential of a uniform segment,
    # Carslaw & Jaeger 1959 §10.3 with t → ∞): ΔT = q/(4πk)·2·asinh(L/2r). The transient tail decays as
    # L/√(παt) relative to q/(4πk), 4e-7 at t = 1e16 s here.
    q, k, alpha, r, L = 10.0, 1.5, 6e-7, 1e-3, 0.1
    got = finite_line(q, k, alpha, r, L / 2, L, 1e16)
    assert got == pytest.approx(q / (4 * math.pi * k) * 2 * math.asinh(L / (2 * r)), rel=2e-6)


def test_finite_line_long_heater_is_the_infinite_line() -> None:
    # For L ≫ √(αt) the segment is an infinite line (Carslaw & Jaeger 1959 §10.4, E1).
    t = np.array([1.0, 30.0, 600.0])
    got = finite_line(5.0, 0.6, 1.4e-7, 0.635e-3, 5.0, 10.0, t)
    assert np.allclose(got, line_source(5.0, 0.6, 1.4e-7, 0.635e-3, t), rtol=1e-9)


def test_finite_line_end_sees_half_the_far_field() -> None:
    # At the end of a long segment, once diffusion has crossed r but is far from the other end, half the line
    # is missing: the late slope is half the infinite line's (point-source superposition; Blackwell 1956).
    q, k, alpha, r, L = 4 * math.pi, 1.0, 1e-6, 1e-3, 10.0
    t = np.array([1e3, 2e3])
    y = finite_line(q, k, alpha, r, 0.0, L, t)
    slope = (y[1] - y[0]) / math.log(2.0)
    assert slope == pytest.approx(0.5, rel=2e-3)


def test_pulse_solution_obeys_the_published_inverse_formulas() -> None:
    # Kluitenberg, Ham & Bristow 1993; Bristow, Kluitenberg & Horton 1994: with t_m the time of the maximum and
    # ΔT_m its rise, κ = (r²/4)·[1/(t_m − t0) − 1/t_m]/ln[t_m/(t_m − t0)] and
    # ρc = q/(4πκΔT_m)·[E1(r²/4κt_m) − E1(r²/4κ(t_m − t0))].
    q, k, rho_c, r, t0 = 50.0, 1.1, 2.8e6, 8e-3, 8.0
    kappa = k / rho_c
    res = minimize_scalar(lambda t: -pulse_line_source(q, k, kappa, r, t0, np.array([t]))[0],
                          bounds=(t0 + 0.1, 300.0), method="bounded", options={"xatol": 1e-9})
    tm, dTm = res.x, -res.fun
    kappa_back = r * r / 4 * (1 / (tm - t0) - 1 / tm) / math.log(tm / (tm - t0))
    rho_c_back = q / (4 * math.pi * kappa_back * dTm) * (exp1(r * r / (4 * kappa_back * tm))
                                                         - exp1(r * r / (4 * kappa_back * (tm - t0))))
    assert kappa_back == pytest.approx(kappa, rel=1e-6)
    assert rho_c_back == pytest.approx(rho_c, rel=1e-6)
