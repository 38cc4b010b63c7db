"""The cylinder-probe model (Blackwell 1954; Jaeger 1956; Carslaw & Jaeger 1959 §13.7) against outside values."""

import math

import mpmath
import numpy as np
import pytest

from linerig.daemon.reduction.probe_model import long_time_response, response_stehfest, response_talbot

# 4πk·ΔT/q of the Blackwell (1954) probe model at τ = 1, 10, 100, 1000. Not a published table: the project's own
# numerical inversion of the transform, with mpmath.invertlaplace (Talbot and de Hoog agreeing to 8+ digits), kept
# in the project's check-value notes. It pins the module's inversions to those digits; the transform itself is
# checked independently below against the real-integral form of Jaeger (1956) / Carslaw & Jaeger (1959) §13.7.
# Model: Blackwell 1954, J. Appl. Phys. 25:137; Jaeger 1956, Aust. J. Phys. 9:167.
PROJECT_INVERSION_TABLE = {
    (2, 0): [1.22745361, 3.16185916, 5.41926665, 7.71733430],
    (2, 0.5): [1.81621819, 4.11011261, 6.41421830, 8.71683352],
    (2, 2): [2.76015202, 6.91982616, 9.39883357, 11.71532893],
    (1, 0): [0.96186969, 3.01591587, 5.39212961, 7.71347153],
    (1, 0.5): [1.28313614, 3.89432013, 6.38164917, 8.71246452],
    (1, 2): [1.64857100, 6.34224094, 9.34912891, 11.70943428],
    (0.5, 0): [0.65837921, 2.72351903, 5.33594173, 7.70569778],
    (0.5, 0.5): [0.78974636, 3.43421489, 6.31328459, 8.70366155],
    (0.5, 2): [0.90610641, 5.09122386, 9.23973255, 11.69751477],
}
TAU = np.array([1.0, 10.0, 100.0, 1000.0])


@pytest.mark.parametrize(("aj", "h"), list(PROJECT_INVERSION_TABLE))
def test_inversions_match_the_projects_mpmath_inversion(aj: float, h: float) -> None:
    ref = np.array(PROJECT_INVERSION_TABLE[(aj, h)])
    assert response_talbot(TAU, aj, h) == pytest.approx(ref, rel=3e-8)   # table printed to 8 decimals
    assert response_stehfest(TAU, aj, h) == pytest.approx(ref, rel=1e-5)  # Stehfest N=14 in double precision


def test_against_independent_mpmath_invertlaplace() -> None:
    # Independent evaluation: mpmath.invertlaplace (Talbot) of the dimensional-free transform written here again.
    def F(p, A=1.5, h=0.3):
        z = mpmath.sqrt(p)
        k0, k1 = mpmath.besselk(0, z), mpmath.besselk(1, z)
        return (2 / p) * (k0 + h * z * k1) / ((p / A) * (k0 + h * z * k1) + z * k1)

    with mpmath.workdps(20):
        for tau in (3.0, 300.0):
            ref = float(mpmath.invertlaplace(F, tau, method="talbot"))
            assert response_talbot(np.array([tau]), 1.5, 0.3)[0] == pytest.approx(ref, rel=1e-8)
            assert response_stehfest(np.array([tau]), 1.5, 0.3)[0] == pytest.approx(ref, rel=2e-5)


@pytest.mark.parametrize(("aj", "h"), [(2, 0), (1, 0.5), (0.5, 2)])
def test_line_source_asymptote(aj: float, h: float) -> None:
    # Long-time form 2h + ln(4τ/C) + O(ln τ/τ) (Carslaw & Jaeger §13.7; C = e^γ): at τ = 1e6 the remaining term
    # is < 5e-5, and the two-term expansion agrees with the full solution to O(ln²τ/τ²).
    tau = np.array([1e6])
    full = response_stehfest(tau, aj, h)[0]
    assert full == pytest.approx(2 * h + math.log(4 * 1e6 / math.exp(0.5772156649)), abs=5e-5)
    assert full == pytest.approx(long_time_response(tau, aj, h)[0], abs=1e-6)


def test_medium_sensor_far_away_tends_to_e1() -> None:
    # A massless thin heater seen from ρ = r/a = 200: the line source E1(r²/4ατ) (Carslaw & Jaeger §10.4);
    # the finite radius changes it by O((a/r)²) only.
    from scipy.special import exp1

    rho = 200.0
    tau = np.array([0.5, 2.0, 10.0]) * rho**2
    assert response_talbot(tau, None, 0.0, rho) == pytest.approx(exp1(rho**2 / (4 * tau)), rel=2e-4)


def test_finite_sample_reaches_steady_conduction() -> None:
    # Boundary held at the initial temperature at R = 20a: the steady state is conduction through a cylindrical
    # shell, ΔT = q/(2πk)·ln(R/a) (Fourier's law, any heat-transfer textbook), i.e. 4πkΔT/q = 2 ln(R/a) + 2h.
    tau = np.array([1e5])
    assert response_talbot(tau, 2.0, 0.5, outer_rho=20.0)[0] == pytest.approx(2 * math.log(20) + 1.0, rel=1e-6)


@pytest.mark.parametrize(("aj", "h"), [(2.0, 0.0), (1.0, 0.5), (0.5, 2.0)])
def test_transform_against_jaegers_real_integral(aj: float, h: float) -> None:
    # The real-integral solution for a perfectly conducting cylinder with heat capacity behind a contact
    # conductance (Jaeger 1956; Carslaw & Jaeger 1959 §13.7), evaluated by quadrature in the reference solver's
    # analytic module (tests/reference/analytic.py), which shares no code with this Laplace-domain model. With
    # k = α = a = 1 and q = 4π it returns 4πk·ΔT/q at t = τ; S = 2πa²ρc/α_J and H = k/(a·h).
    from tests.reference.analytic import jaeger_probe

    tau = np.array([1.0, 10.0, 100.0, 1000.0])
    ref = jaeger_probe(4 * math.pi, 1.0, 1.0, 1.0, 2 * math.pi / aj, None if h == 0 else 1.0 / h, tau)
    assert response_talbot(tau, aj, h) == pytest.approx(ref, rel=1e-7)
    assert response_stehfest(tau, aj, h) == pytest.approx(ref, rel=2e-5)
