"""Surface-step cylinder test against the classical series solutions (Carslaw & Jaeger 1959; Newman's product
rule), evaluated independently with scipy (jn_zeros, brentq on 200/400-term series)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.special import j1, jn_zeros

from linerig.daemon.workflows.cylinder import (
    CylinderTestError,
    SurfaceSteps,
    centre_response,
    fit_cylinder,
    fourier_at_fraction,
    half_time,
    j0_roots,
    model_centre_C,
    unaccomplished_cylinder,
    unaccomplished_slab,
)


def test_j0_roots_match_scipy_jn_zeros() -> None:
    # scipy.special.jn_zeros is the reference; the first four are the tabulated 2.404826, 5.520078, 8.653728, 11.791534.
    ours = j0_roots(200)
    assert np.allclose(ours, jn_zeros(0, 200), rtol=0, atol=1e-10)
    assert np.allclose(ours[:4], [2.404826, 5.520078, 8.653728, 11.791534], atol=1e-6)


def test_series_coefficients() -> None:
    # 2/(λ_n J1(λ_n)) = 1.601975, −1.064799, 0.851399, −0.729645 (classical series, computed with scipy).
    lam = jn_zeros(0, 4)
    assert np.allclose(2 / (lam * j1(lam)), [1.601975, -1.064799, 0.851399, -0.729645], atol=1e-6)
    # early in the step the centre has hardly moved: the series summed here again with scipy's own J0 zeros (400
    # terms, independent of the module's roots) and the slab's classical series, at small Fourier numbers
    fo = np.array([0.005, 0.02, 0.05])
    lam = jn_zeros(0, 400)
    ref = np.exp(-np.outer(fo, lam**2)) @ (2 / (lam * j1(lam)))
    assert np.allclose(unaccomplished_cylinder(fo), ref, rtol=0, atol=1e-10)
    m = 2 * np.arange(400) + 1
    ref_slab = np.exp(-np.outer(fo, (m * np.pi / 2) ** 2)) @ (4 * (-1.0) ** np.arange(400) / (m * np.pi))
    assert np.allclose(unaccomplished_slab(fo), ref_slab, rtol=0, atol=1e-10)
    assert float(unaccomplished_cylinder(0.02)[0]) > 0.999  # erfc(1/√(4·0.02))-small: not yet moved


# Fo₅₀ = κt/R² at which the centre reaches 50 %; brentq on 200- and 400-term series with scipy.
FO50 = [(None, 0.200524), (0.5, 0.084382), (1.0, 0.167630), (1.5, 0.194693), (2.0, 0.199971), (3.0, 0.200523)]


@pytest.mark.parametrize(("h_over_d", "fo50"), FO50)
def test_half_fourier_numbers(h_over_d: float | None, fo50: float) -> None:
    assert fourier_at_fraction(0.5, h_over_d) == pytest.approx(fo50, abs=2e-6)


def test_slab_centre_half_fourier() -> None:
    # slab centre (Fo on half-thickness): 0.378748
    from scipy.optimize import brentq
    assert brentq(lambda f: 1 - float(unaccomplished_slab(f)[0]) - 0.5, 0.01, 5) == pytest.approx(0.378748, abs=2e-6)


@pytest.mark.parametrize(("frac", "inf", "h2d"), [
    (0.10, 0.08543, 0.08543), (0.25, 0.12605, 0.12602), (0.75, 0.32115, 0.31695),
    (0.90, 0.47963, 0.46587), (0.95, 0.59949, 0.57640), (0.99, 0.87779, 0.83006)])
def test_other_fractions(frac: float, inf: float, h2d: float) -> None:
    assert fourier_at_fraction(frac) == pytest.approx(inf, abs=1e-5)
    assert fourier_at_fraction(frac, 2.0) == pytest.approx(h2d, abs=1e-5)


def test_centre_response_at_given_fourier_numbers() -> None:
    fo = np.array([0.05, 0.10, 0.20, 0.30, 0.50, 1.00])
    inf = [0.012901, 0.151645, 0.498513, 0.717513, 0.911110, 0.995068]
    h2d = [0.012901, 0.151658, 0.500083, 0.723063, 0.919199, 0.996619]
    assert np.allclose(centre_response(fo), inf, atol=1e-6)
    assert np.allclose(centre_response(fo, 2.0), h2d, atol=1e-6)


def _independent_centre(fo_r: np.ndarray, h_over_d: float | None) -> np.ndarray:
    """1 − θ at the centre, summed here from the classical series (Carslaw & Jaeger 1959 §7.4 cylinder, §3.3 slab;
    Newman's product for a finite cylinder) with scipy's Bessel zeros, not through the module under test."""
    lam = jn_zeros(0, 400)
    theta = (2 / (lam * j1(lam)) * np.exp(-np.outer(fo_r, lam**2))).sum(axis=1)
    if h_over_d is not None:
        n = np.arange(400)
        fo_l = fo_r / h_over_d**2          # half-height l = H/2 = R·(H/D)
        m = (2 * n + 1) * np.pi / 2
        theta = theta * (2 * (-1.0) ** n / m * np.exp(-np.outer(fo_l, m**2))).sum(axis=1)
    return 1 - theta


# Specimens: the example's own 70 × 90 mm mould, a long one (H/D = 2), a squat one and an infinite cylinder.
SPECIMENS = [(0.035, 0.090), (0.025, 0.100), (0.040, 0.060), (0.030, None)]


@pytest.mark.parametrize(("radius_m", "height_m"), SPECIMENS)
def test_half_time_of_water_specimens(radius_m: float, height_m: float | None) -> None:
    """t₅₀ read off an independently summed centre history matches Fo₅₀·R²/κ for water at 20 °C, with κ from
    the iapws package (IAPWS-95 density and cp, IAPWS 2011 conductivity): 1.432e-7 m²/s."""
    from iapws import IAPWS95

    w = IAPWS95(T=293.15, P=0.101325)
    kappa = w.k / (w.rho * w.cp * 1e3)
    h_over_d = None if height_m is None else height_m / (2 * radius_m)
    t = np.linspace(0.0, 0.5 * radius_m**2 / kappa, 5001)
    t50 = half_time(t, _independent_centre(kappa * t / radius_m**2, h_over_d), 0.0, 1.0)
    assert t50 == pytest.approx(fourier_at_fraction(0.5, h_over_d) * radius_m**2 / kappa, rel=2e-4)


def _synthetic(alpha: float, r: float, h_m: float | None,
               noise_K: float = 0.01) -> tuple[np.ndarray, np.ndarray, SurfaceSteps]:
    t50 = 0.2 * r**2 / alpha
    t = np.arange(-60.0, 8 * t50, 5.0)
    steps = SurfaceSteps(np.array([0.0, 4 * t50]), np.array([60.0, 20.0]))  # heat in a bath, then cool in another
    y = model_centre_C(t, alpha, r, None if h_m is None else h_m / (2 * r), steps, 20.0, lag_s=12.0)
    rng = np.random.default_rng(7)
    return t, y + rng.normal(0, noise_K, t.size), steps


@pytest.mark.parametrize(("radius_m", "height_m"), SPECIMENS)
def test_fit_recovers_diffusivity_through_heating_and_cooling(radius_m: float, height_m: float | None) -> None:
    t, y, steps = _synthetic(3.2e-7, radius_m, height_m)
    fit = fit_cylinder(t, y, radius_m, steps, height_m)
    assert fit.alpha_m2_per_s == pytest.approx(3.2e-7, rel=0.005)
    assert fit.lag_s == pytest.approx(12.0, abs=1.5)
    assert fit.initial_C == pytest.approx(20.0, abs=0.02)
    assert fit.resid_rms_K == pytest.approx(0.01, rel=0.2)
    # the simple half-time estimate agrees roughly (it ignores the lag)
    assert fit.alpha_fo50_m2_per_s == pytest.approx(3.2e-7, rel=0.05)
    # the stated uncertainty carries the model error: the plain half-time reading (Fo₅₀ of the classical series,
    # checked above) lies inside U, as does the truth
    assert abs(fit.alpha_fo50_m2_per_s - fit.alpha_m2_per_s) <= 2 * fit.alpha_u_m2_per_s
    assert abs(fit.alpha_m2_per_s - 3.2e-7) <= 2 * fit.alpha_u_m2_per_s
    assert fit.alpha_u_model_rel > 0.002


def test_steps_from_a_measured_bath_record() -> None:
    t = np.arange(0, 100.0)
    bath = np.where(t < 10, 20.0, np.where(t < 60, 60.0, 20.0)) + 0.01 * np.sin(t)
    st = SurfaceSteps.from_record(t, bath, start_C=20.0)
    assert np.allclose(st.times_s, [10.0, 60.0])
    assert np.allclose(st.levels_C, [60.0, 20.0], atol=0.01)


def test_no_step_is_refused() -> None:
    t = np.arange(0, 100.0)
    with pytest.raises(CylinderTestError, match="no step"):
        fit_cylinder(t, np.full(t.size, 20.0), 0.02, SurfaceSteps.single(20.0))
