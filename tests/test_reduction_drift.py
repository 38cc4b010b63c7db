"""Background drift: removed from the baseline trend, reported, and flagged when it cannot be trusted."""

import numpy as np
import pytest

from linerig.daemon.probe import ProbeProfile
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.drift import fit_baseline
from linerig.daemon.reduction.synthetic import Medium, make_run

PROBE = ProbeProfile(name="lab needle", radius_mm=0.635, heater_length_mm=1e4, heat_capacity_MJ_per_m3K=2.5)


def test_linear_drift_removed_and_reported() -> None:
    data = make_run(Medium(1.5, 2.5e6), drift_K_per_h=0.6, baseline_s=600.0)
    res = reduce_run(data, PROBE, method="line").sensors["heater"]
    assert res.k_W_per_mK == pytest.approx(1.5, rel=0.006)
    assert res.to_json()["drift_K_per_h"] == pytest.approx(0.6, rel=1e-6)
    assert "drift" in res.flags and "not_settled" not in res.flags


def test_curved_baseline_is_not_settled() -> None:
    data = make_run(Medium(1.5, 2.5e6), baseline_s=600.0)
    t = data.time_s
    data.temps_C["heater"] = data.temps_C["heater"] + np.where(t < 0, 0.5 * np.exp(t / 150.0), 0.5)
    res = reduce_run(data, PROBE, method="line").sensors["heater"]
    assert "not_settled" in res.flags


def test_drift_uncertainty_grows_with_a_short_noisy_baseline() -> None:
    rng = np.random.default_rng(5)
    short = fit_baseline(np.arange(-30.0, 0.0), 20 + 0.01 * rng.standard_normal(30))
    long = fit_baseline(np.arange(-600.0, 0.0), 20 + 0.01 * rng.standard_normal(600))
    assert short.rate_u_K_per_s > 20 * long.rate_u_K_per_s


def test_missing_baseline_is_flagged() -> None:
    data = make_run(Medium(1.5, 2.5e6), baseline_s=0.0)
    res = reduce_run(data, PROBE, method="line").sensors["heater"]
    assert "no_baseline" in res.flags


def test_slope_lost_in_noise_is_reported_not_extrapolated() -> None:
    # A baseline of pure noise: its fitted slope is noise, and extrapolating it over a heating several times
    # the baseline's length would bend ΔT. The level is kept, the slope reported, and its size carried into u.
    rng = np.random.default_rng(7)
    t = np.arange(-60.0, 0.0, 1.0)
    flat = fit_baseline(t, 20.0 + 0.005 * rng.standard_normal(t.size))
    assert flat.rate_K_per_s == 0.0 and flat.fitted_rate_K_per_s != 0.0
    assert flat.rate_u_K_per_s >= abs(flat.fitted_rate_K_per_s)
    assert flat.to_dict()["removed"] is False
    # a real drift of 1 K/h over the same noise stands out and is removed
    drifting = fit_baseline(t, 20.0 + t / 3600.0 + 0.005 * rng.standard_normal(t.size))
    assert drifting.rate_K_per_s == drifting.fitted_rate_K_per_s
    assert abs(drifting.rate_K_per_s * 3600.0 - 1.0) < 0.3


def test_a_slope_that_is_only_noise_is_seldom_extrapolated() -> None:
    """Removing a noise slope extrapolates it over a heating several times longer than the baseline. With the
    3σ rule a white-noise baseline loses its level only in the normal tail, 2·Φ(−3) = 0.27 % (scipy.stats.norm
    as the reference), a little more for the t distribution of a fitted slope; a real 10σ drift is removed."""
    from scipy.stats import norm

    t = np.arange(-120.0, 0.0)
    rng = np.random.default_rng(11)
    removed = [fit_baseline(t, 12.0 + rng.normal(0, 0.01, t.size)).rate_K_per_s != 0.0 for _ in range(400)]
    assert np.mean(removed) <= 4 * 2 * norm.sf(3.0)  # ≈ 1 %; a 2σ rule would remove ≈ 5 %
    slope_u = 0.01 / np.sqrt(np.sum((t - t.mean()) ** 2))  # the least-squares slope's standard error
    drifting = 12.0 + 10 * slope_u * t + rng.normal(0, 0.01, t.size)
    assert fit_baseline(t, drifting).rate_K_per_s == pytest.approx(10 * slope_u, rel=0.4)


def _white_plus_wander(rng: np.random.Generator, n: int, white: float, wander: float, phi: float) -> np.ndarray:
    e = rng.normal(0.0, wander * np.sqrt(1 - phi * phi), n)
    w = np.zeros(n)
    w[0] = rng.normal(0.0, wander)
    for i in range(1, n):
        w[i] = phi * w[i - 1] + e[i]
    return w + rng.normal(0.0, white, n)


def test_a_slow_wander_under_white_noise_is_read_off_the_baseline() -> None:
    # 3 mK white noise and a 2 mK AR(1) wander with φ = 0.9 (the reference records' instrument layer): the
    # variance of a slope over a short window, w·T, from the baseline alone, against the definition wᵀΣw with
    # Σ = σ²_e·I + σ²_w·φ^|i−j| (the AR(1) autocovariance, any time-series text), and against a Monte Carlo of it
    from linerig.daemon.reduction.stats import ar1_inflation, lag1_autocorrelation, wander_variance

    rng = np.random.default_rng(7)
    tb = np.arange(-2000.0, 0.0)
    base = _white_plus_wander(rng, tb.size, 3e-3, 2e-3, 0.9)
    tw = np.arange(150.0, 250.0)  # a window a factor 1.7 long, after a gap
    x = np.log(tw)
    w = (x - x.mean()) / float((x - x.mean()) @ (x - x.mean()))  # the least-squares slope's weights
    got = wander_variance(tb, base, tw, w)
    lag = np.abs(tw[:, None] - tw[None, :])
    exact = float(w @ ((3e-3) ** 2 * np.eye(tw.size) + (2e-3) ** 2 * 0.9**lag) @ w)
    assert got is not None and got == pytest.approx(exact, rel=0.25)
    # the lag-1 form read off the same baseline says far less (the error the wander term mends)
    lag1 = float(w @ w) * float(base.var()) * ar1_inflation(lag1_autocorrelation(base - base.mean()))
    assert lag1 < 0.6 * exact
    mc = [float(w @ _white_plus_wander(rng, tw.size, 3e-3, 2e-3, 0.9)) for _ in range(400)]
    assert float(np.var(mc)) == pytest.approx(exact, rel=0.2)
    # white noise alone: no wander to be seen, or one that adds little
    white = rng.normal(0.0, 3e-3, tb.size)
    plain = wander_variance(tb, white, tw, w)
    assert plain is None or plain < 1.3 * float(w @ w) * 9e-6
