"""The simulator's conduction models against published analytic solutions.

Oracles come from outside the project: the line-source solution with scipy's E1, Blackwell's (1954) probe
solution inverted numerically with mpmath, steady radial conduction, the cylinder-cooling series and the
finite-line-source integral (Carslaw & Jaeger 1959).
"""

from __future__ import annotations

import math

import mpmath as mp
import numpy as np
import pytest
from scipy.integrate import quad
from scipy.special import erf, exp1, j0, j1, jn_zeros

from linerig.daemon.sim.physics import AxialRadialModel, ModelConfigError, RadialModel

EULER_GAMMA = 0.57721566490153286


def run_to(model: RadialModel | AxialRadialModel, q: float, t_end: float, dt: float) -> None:
    while model.t_s < t_end - 1e-9:
        model.step(q, min(dt, t_end - model.t_s))


def run_log(model: RadialModel, q: float, t_end: float, per_decade: int = 40) -> None:
    """Geometrically growing steps: fine at first, cheap later."""
    while model.t_s < t_end * (1 - 1e-12):
        dt = max(model.t_s * (10 ** (1 / per_decade) - 1), t_end * 1e-6)
        model.step(q, min(dt, t_end - model.t_s))


# --- (a) infinite line source, Carslaw & Jaeger (1959) §10.4: ΔT = q/(4πk)·E1(r²/4κt) ---


@pytest.mark.parametrize("t_s", [300.0, 1000.0, 3000.0])
def test_radius_far_from_tiny_probe_follows_line_source(t_s: float) -> None:
    k, rho_c, q, r = 1.45, 1.57e6, 10.0, 6e-3
    m = RadialModel(k, rho_c, probe_radius_m=0.05e-3, probe_rho_c=rho_c, contact_conductance=None)
    run_to(m, q, t_s, dt=1.0)
    exact = q / (4 * math.pi * k) * exp1(r * r / (4 * k / rho_c * t_s))  # scipy E1
    assert m.rise_at_K(r) == pytest.approx(exact, rel=5e-3)


def test_dry_sand_line_source_values() -> None:
    # dry sand, q = 3 W/m, k = 0.30, ρc = 1.3e6, read at r = 0.635 mm: exact E1 values 3.463700 K (60 s) and
    # 5.697106 K (1000 s) from Carslaw & Jaeger §10.4, evaluated with mpmath's E1
    k, rho_c, q, r = 0.30, 1.3e6, 3.0, 0.635e-3
    m = RadialModel(k, rho_c, probe_radius_m=0.02e-3, probe_rho_c=rho_c)
    run_to(m, q, 60.0, dt=0.25)
    assert m.rise_at_K(r) == pytest.approx(3.463700, rel=5e-3)
    run_to(m, q, 1000.0, dt=1.0)
    assert m.rise_at_K(r) == pytest.approx(5.697106, rel=5e-3)


# --- (b) probe with heat capacity and contact resistance: Blackwell (1954), Jaeger (1956) ---


def blackwell_laplace(p: mp.mpf, alpha: float, h: float) -> mp.mpf:
    """Laplace transform of 4πkΔT/q at the probe, p = s a²/κ (Blackwell 1954; Carslaw & Jaeger §13.7)."""
    z = mp.sqrt(p)
    k0, k1 = mp.besselk(0, z), mp.besselk(1, z)
    num = k0 + h * z * k1
    return (2 / p) * num / ((p / alpha) * num + z * k1)


# 4πkΔT/q at τ = κt/a² = 1, 10, 100, 1000 for (α, h); computed by numerical Laplace inversion (mpmath
# Talbot and de Hoog agreeing to 8 digits) of the Blackwell (1954) probe solution
BLACKWELL_TABLE = {
    (2.0, 0.0): (1.22745361, 3.16185916, 5.41926665, 7.71733430),
    (2.0, 0.5): (1.81621819, 4.11011261, 6.41421830, 8.71683352),
    (2.0, 2.0): (2.76015202, 6.91982616, 9.39883357, 11.71532893),
    (1.0, 0.5): (1.28313614, 3.89432013, 6.38164917, 8.71246452),
    (0.5, 0.0): (0.65837921, 2.72351903, 5.33594173, 7.70569778),
    (0.5, 2.0): (0.90610641, 5.09122386, 9.23973255, 11.69751477),
}


def probe_model(alpha: float, h: float, k: float = 1.0, rho_c: float = 2e6, a: float = 1e-3) -> RadialModel:
    """α = 2πa²ρc/S with S = πa²(ρc)_probe, h = k/(aH)."""
    return RadialModel(
        k, rho_c, probe_radius_m=a, probe_rho_c=2 * rho_c / alpha,
        contact_conductance=None if h == 0 else k / (a * h), outer_radius_m=0.5,
    )


@pytest.mark.parametrize(("alpha", "h"), list(BLACKWELL_TABLE))
def test_probe_rise_matches_blackwell_table(alpha: float, h: float) -> None:
    k, rho_c, a = 1.0, 2e6, 1e-3
    q = 4 * math.pi * k  # so the rise is 4πkΔT/q directly
    m = probe_model(alpha, h, k, rho_c, a)
    for tau, expected in zip((1, 10, 100, 1000), BLACKWELL_TABLE[(alpha, h)], strict=True):
        run_log(m, q, tau * a * a * rho_c / k)
        assert m.probe_rise_K() == pytest.approx(expected, rel=2e-3), f"tau={tau}"


def test_needle_in_moist_sand_matches_mpmath_inversion_with_uniform_steps() -> None:
    # a real needle (a = 0.635 mm, ρc 3.2 MJ/(m³K), H = 3000 W/(m²K)) stepped at a 1 s sample interval, as the
    # simulator does; oracle: mpmath Talbot inversion of Blackwell's (1954) Laplace-domain solution
    k, rho_c, a, prc, H, q = 1.45, 1.57e6, 0.635e-3, 3.2e6, 3000.0, 10.0
    alpha, h, kappa = 2 * rho_c / prc, k / (a * H), k / rho_c
    m = RadialModel(k, rho_c, a, prc, contact_conductance=H)
    mp.mp.dps = 20
    for t in (10.0, 100.0, 600.0):
        run_to(m, q, t, dt=1.0)
        tau = kappa * t / a**2
        exact = float(mp.invertlaplace(lambda p: blackwell_laplace(p, alpha, h), tau, method="talbot"))
        assert m.probe_rise_K() == pytest.approx(exact * q / (4 * math.pi * k), rel=2e-3)


# --- (c) late-time slope q/(4πk) and the long-time expansion (Blackwell 1954; Carslaw & Jaeger §13.7) ---


def test_late_slope_is_q_over_4_pi_k_whatever_the_contact() -> None:
    k, rho_c, a, q = 0.60, 4.18e6, 0.635e-3, 5.0
    for H in (None, 500.0):
        m = RadialModel(k, rho_c, a, 3.2e6, contact_conductance=H)
        ts, ys = [], []
        for t in np.geomspace(300.0, 3000.0, 12):
            run_to(m, q, float(t), dt=1.0)
            ts.append(math.log(m.t_s))
            ys.append(m.probe_rise_K())
        slope = np.polyfit(ts, ys, 1)[0]
        assert slope == pytest.approx(q / (4 * math.pi * k), rel=5e-3)


def test_contact_resistance_adds_q_over_2_pi_a_H() -> None:
    # long-time offset 2h in 4πkΔT/q, i.e. ΔT shifts by q/(2πaH) (Blackwell 1954)
    k, rho_c, a, q, H = 1.0, 2e6, 1e-3, 2.0, 800.0
    m0 = RadialModel(k, rho_c, a, 2e6, None, outer_radius_m=1.0)
    m1 = RadialModel(k, rho_c, a, 2e6, H, outer_radius_m=1.0)
    run_to(m0, q, 2000.0, dt=2.0)
    run_to(m1, q, 2000.0, dt=2.0)
    assert m1.probe_rise_K() - m0.probe_rise_K() == pytest.approx(q / (2 * math.pi * a * H), rel=2e-3)


def test_two_term_long_time_expansion() -> None:
    # 4πkΔT/q = 2h + ln(4τ/C) + [(α−2) ln(4τ/C) + α − 4h]/(2ατ), C = e^γ (Blackwell 1954)
    alpha, h, tau_end = 0.8, 1.0, 5000.0
    m = probe_model(alpha, h)
    run_log(m, 4 * math.pi, tau_end * 1e-6 * 2e6)
    L = math.log(4 * tau_end / math.exp(EULER_GAMMA))
    expected = 2 * h + L + ((alpha - 2) * L + alpha - 4 * h) / (2 * alpha * tau_end)
    assert m.probe_rise_K() == pytest.approx(expected, rel=5e-4)


# --- boundaries and conservation ---


def test_fixed_boundary_reaches_steady_radial_conduction() -> None:
    # steady state in an annulus: ΔT = q/(2πk)·ln(R/a) + q/(2πaH) (Carslaw & Jaeger §7.2, Fourier's law)
    k, rho_c, a, R, H, q = 1.0, 2e6, 1e-3, 0.02, 2000.0, 5.0
    m = RadialModel(k, rho_c, a, 3e6, H, outer_radius_m=R, boundary="fixed", n_cells=60)
    run_to(m, q, 20 * R * R * rho_c / k, dt=50.0)
    assert m.probe_rise_K() == pytest.approx(q / (2 * math.pi * k) * math.log(R / a) + q / (2 * math.pi * a * H),
                                             rel=1e-4)
    r = 0.01
    assert m.rise_at_K(r) == pytest.approx(q / (2 * math.pi * k) * math.log(R / r), rel=1e-3)


def test_adiabatic_sample_stores_every_joule() -> None:
    k, rho_c, a, R, q = 0.3, 1.3e6, 0.635e-3, 0.025, 3.0
    m = RadialModel(k, rho_c, a, 3.2e6, 1500.0, outer_radius_m=R, boundary="adiabatic", n_cells=80)
    t = 0.0
    for dt, qq in ((0.3, q), (1.0, 2 * q), (7.0, 0.0), (2.0, q)):
        for _ in range(50):
            m.step(qq, dt)
            t += qq * dt
    assert m.energy_J_per_m() == pytest.approx(t, rel=1e-10)
    # long after heating stops the sample sits at E/(total heat capacity) everywhere
    run_to(m, 0.0, m.t_s + 20 * R * R * rho_c / k, dt=20.0)
    uniform = t / (math.pi * a * a * 3.2e6 + math.pi * (R * R - a * a) * rho_c)
    assert m.probe_rise_K() == pytest.approx(uniform, rel=1e-6)
    assert m.rise_at_K(R) == pytest.approx(uniform, rel=1e-6)


def test_cylinder_centre_reaches_half_at_fourier_0_2005() -> None:
    # a cylinder at uniform temperature with its surface stepped: the centre has moved half-way at
    # Fo = κt/R² = 0.200524 (series solution, Carslaw & Jaeger §7.4; roots from scipy jn_zeros)
    k, rho_c, R = 0.598, 4.177e6, 0.030
    lam = jn_zeros(0, 60)
    fo = 0.200524
    series = float(np.sum(2 / (lam * j1(lam)) * np.exp(-lam * lam * fo)))  # remaining fraction at the centre
    assert series == pytest.approx(0.5, abs=1e-5)
    m = RadialModel(k, rho_c, probe_radius_m=0.02e-3, probe_rho_c=rho_c, outer_radius_m=R, boundary="fixed")
    m.reset(rise_K=1.0)
    run_to(m, 0.0, fo * R * R * rho_c / k, dt=2.0)
    assert m.probe_rise_K() == pytest.approx(0.5, abs=2e-3)
    # and off-centre, the full series J0(λ r/R) term
    r = 0.5 * R
    off = float(np.sum(2 / (lam * j1(lam)) * j0(lam * r / R) * np.exp(-lam * lam * fo)))
    assert m.rise_at_K(r) == pytest.approx(off, abs=2e-3)


def test_power_switched_off_cools_by_superposition() -> None:
    # heating then cooling: ΔT = q/(4πk)[E1(r²/4κt) − E1(r²/4κ(t − t_h))] (Carslaw & Jaeger §10.4 superposed)
    k, rho_c, q, r, th = 0.6065, 4.169e6, 5.0, 3e-3, 600.0
    kappa = k / rho_c
    m = RadialModel(k, rho_c, probe_radius_m=0.03e-3, probe_rho_c=rho_c)
    run_to(m, q, th, dt=1.0)
    run_to(m, 0.0, 1200.0, dt=1.0)
    exact = q / (4 * math.pi * k) * (exp1(r * r / (4 * kappa * 1200.0)) - exp1(r * r / (4 * kappa * 600.0)))
    assert m.rise_at_K(r) == pytest.approx(exact, rel=5e-3)


def test_bad_parameters_say_what_to_fix() -> None:
    with pytest.raises(ModelConfigError, match="k must be"):
        RadialModel(0.0, 1e6, 1e-3, 1e6)
    with pytest.raises(ModelConfigError, match="boundary"):
        RadialModel(1.0, 1e6, 1e-3, 1e6, boundary="mirror")
    with pytest.raises(ModelConfigError, match="outer_radius_m"):
        RadialModel(1.0, 1e6, 1e-3, 1e6, outer_radius_m=1e-3)
    m = RadialModel(1.0, 1e6, 1e-3, 1e6, outer_radius_m=0.1)
    with pytest.raises(ModelConfigError, match="outside"):
        m.rise_at_K(0.2)
    with pytest.raises(ModelConfigError, match="dt_s"):
        m.step(1.0, 0.0)


def test_probe_without_heat_capacity_is_allowed() -> None:
    # S = 0 is the bare cylinder surface; at late times it meets the line-source log law (§10.4)
    k, rho_c, a, q = 1.0, 2e6, 1e-3, 4 * math.pi
    m = RadialModel(k, rho_c, a, 0.0, None, outer_radius_m=0.5)
    run_log(m, q, 1000 * a * a * rho_c / k)
    assert m.probe_rise_K() == pytest.approx(math.log(4 * 1000 / math.exp(EULER_GAMMA)), rel=2e-3)


# --- finite heater length: axial loss (finite line source, Carslaw & Jaeger §10.4 integrated along z) ---


def finite_line_mid(q: float, k: float, kappa: float, L: float, r: float, t: float) -> float:
    """ΔT at mid-length, radius r: q/(4πk) ∫_{r²/4κt}^∞ e^{-u}/u · erf((L/2r)√u) du."""
    val, _ = quad(lambda u: math.exp(-u) / u * erf(L / (2 * r) * math.sqrt(u)), r * r / (4 * kappa * t), 50.0,
                  limit=200)
    return q / (4 * math.pi * k) * val


def test_short_heater_midlength_matches_finite_line_source() -> None:
    k, rho_c, L, q, r = 1.45, 1.57e6, 0.04, 10.0, 3e-3
    kappa = k / rho_c
    m = AxialRadialModel(k, rho_c, probe_radius_m=0.1e-3, probe_rho_c=rho_c, heater_length_m=L,
                         outer_radius_m=0.3, outer_half_height_m=0.3)
    for t in (100.0, 400.0, 1200.0):
        run_to(m, q, t, dt=2.0)
        assert m.rise_at_K(r, 0.0) == pytest.approx(finite_line_mid(q, k, kappa, L, r, t), rel=5e-3), t


def test_short_heater_slope_falls_as_erf() -> None:
    # local log-slope at mid-length relative to q/(4πk) is exp(−r²/4κt)·erf(L/(4√(κt))) (d/d ln t of the
    # finite-line integral above)
    k, rho_c, L, q, r = 1.0, 2.0e6, 0.05, 8.0, 1.5e-3
    kappa = k / rho_c
    m = AxialRadialModel(k, rho_c, probe_radius_m=0.1e-3, probe_rho_c=rho_c, heater_length_m=L,
                         outer_radius_m=0.3, outer_half_height_m=0.3)
    t1, t2 = 500.0, 600.0
    run_to(m, q, t1, dt=1.0)
    y1 = m.rise_at_K(r)
    run_to(m, q, t2, dt=1.0)
    y2 = m.rise_at_K(r)
    slope = (y2 - y1) / math.log(t2 / t1)
    tm = math.sqrt(t1 * t2)
    predicted = q / (4 * math.pi * k) * math.exp(-r * r / (4 * kappa * tm)) * erf(L / (4 * math.sqrt(kappa * tm)))
    assert predicted < 0.8 * q / (4 * math.pi * k)  # the case really is deep in axial loss
    assert slope == pytest.approx(predicted, rel=1e-2)


def test_long_heater_agrees_with_radial_model() -> None:
    k, rho_c, a, prc, H, q = 1.45, 1.57e6, 0.635e-3, 3.2e6, 3000.0, 10.0
    m2 = AxialRadialModel(k, rho_c, a, prc, heater_length_m=2.0, contact_conductance=H)
    m1 = RadialModel(k, rho_c, a, prc, H)
    run_to(m2, q, 300.0, dt=1.0)
    run_to(m1, q, 300.0, dt=1.0)
    assert m2.rise_at_K(0.0, 0.0) == pytest.approx(m1.probe_rise_K(), rel=3e-3)
    assert m2.rise_at_K(6e-3, 0.0) == pytest.approx(m1.rise_at_K(6e-3), rel=5e-3)
    # just outside the contact layer the medium is cooler than the probe by the contact drop
    assert m2.rise_at_K(1.001 * a, 0.0) == pytest.approx(m1.rise_at_K(1.001 * a), rel=3e-3)
    assert m1.probe_rise_K() - m1.rise_at_K(1.001 * a) > 0.5


def test_axial_model_conserves_energy_in_insulated_sample() -> None:
    m = AxialRadialModel(0.6, 4.18e6, 0.635e-3, 3.2e6, heater_length_m=0.06, contact_conductance=2000.0,
                         outer_radius_m=0.03, outer_half_height_m=0.05, boundary="adiabatic", probe_axial_k=15.0)
    for _ in range(40):
        m.step(4.0, 5.0)
    assert m.energy_J_per_m() == pytest.approx(4.0 * 200.0, rel=1e-9)


@pytest.mark.parametrize("height_over_diameter", [2.0, 1.0])
def test_finite_cylinder_centre_follows_the_product_solution(height_over_diameter: float) -> None:
    # finite cylinder with its whole surface stepped: (1 − θ) = (1 − θ_cyl)(1 − θ_slab) (Newman product of the
    # Carslaw & Jaeger §7.4 cylinder and §3.3 slab series); at H/D = 2 the centre is half-way at Fo = 0.199971
    k, rho_c, R = 0.598, 4.177e6, 0.030
    kappa, half_h = k / rho_c, height_over_diameter * R
    lam, n = jn_zeros(0, 200), np.arange(400)

    def remaining(fo: float) -> float:
        cyl = np.sum(2 / (lam * j1(lam)) * np.exp(-lam * lam * fo))
        fo_slab = fo * R * R / half_h**2
        slab = np.sum(4 * (-1) ** n / ((2 * n + 1) * np.pi) * np.exp(-(((2 * n + 1) * np.pi / 2) ** 2) * fo_slab))
        return float(cyl * slab)

    if height_over_diameter == 2.0:
        assert remaining(0.199971) == pytest.approx(0.5, abs=1e-5)
    # a tiny 'heater' of the sample's own properties stands in for the centre thermocouple
    m = AxialRadialModel(k, rho_c, 0.02e-3, rho_c, heater_length_m=1e-3, outer_radius_m=R,
                         outer_half_height_m=half_h, boundary="fixed", probe_axial_k=k, n_axial_heater=4,
                         n_radial=120)
    m.reset(1.0)
    for fo in (0.1, 0.2, 0.3, 0.5):
        run_to(m, 0.0, fo * R * R / kappa, dt=2.0)
        assert m.rise_at_K(0.0, 0.0) == pytest.approx(remaining(fo), abs=2e-3), fo


def test_inner_zone_of_other_conductivity_conducts_in_series() -> None:
    # steady conduction through two concentric shells: ΔT = q/(2π)[ln(r1/a)/k1 + ln(R/r1)/k2] (thermal
    # resistances of cylindrical shells in series, Carslaw & Jaeger §7.2); r1 is set on a cell face
    k, rho_c, a, R, q = 1.5, 2.0e6, 1e-3, 0.03, 4.0
    m = RadialModel(k, rho_c, a, 3e6, None, outer_radius_m=R, boundary="fixed", n_cells=80)
    r1 = float(m._faces[30])
    m.set_conductivity_within(r1, 0.4)
    run_to(m, q, 30 * R * R * rho_c / 0.4, dt=100.0)
    expected = q / (2 * math.pi) * (math.log(r1 / a) / 0.4 + math.log(R / r1) / k)
    assert m.probe_rise_K() == pytest.approx(expected, rel=1e-6)
    m.set_conductivity_within(0.0, None)
    run_to(m, q, m.t_s + 30 * R * R * rho_c / 0.4, dt=100.0)
    assert m.probe_rise_K() == pytest.approx(q / (2 * math.pi * k) * math.log(R / a), rel=1e-6)


def test_axial_layers_beyond_the_tips() -> None:
    # the same medium declared as a 'layer' changes nothing; a more conductive one beyond the tips draws more
    # heat out of the ends, so the mid-length probe runs cooler (common sense of Fourier's law, no source)
    args = (1.0, 2.0e6, 0.635e-3, 3.2e6, 0.04)
    kw = {"outer_radius_m": 0.2, "outer_half_height_m": 0.2}
    plain = AxialRadialModel(*args, **kw)
    same = AxialRadialModel(*args, layers=[(0.03, 1.0, 2.0e6)], **kw)
    wet = AxialRadialModel(*args, layers=[(0.02, 2.5, 2.96e6)], **kw)
    for m in (plain, same, wet):
        run_to(m, 5.0, 600.0, dt=2.0)
    assert same.probe_rise_K() == pytest.approx(plain.probe_rise_K(), rel=1e-12)
    assert wet.probe_rise_K() < plain.probe_rise_K() - 0.01
