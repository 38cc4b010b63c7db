"""The live reducer: incremental fit equals a direct fit, the verdict rule is shared with the offline result."""

import json
import math

import numpy as np
import pytest

from linerig.daemon.probe import ProbeProfile
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.live import LiveReducer, replay
from linerig.daemon.reduction.stats import fit_line
from linerig.daemon.reduction.synthetic import Medium, make_run

PROBE = ProbeProfile(name="lab needle", radius_mm=0.635, heater_length_mm=100.0, heat_capacity_MJ_per_m3K=2.5)


SOIL = Medium(1.2, 2.4e6)


def _run(seed: int = 0, medium: Medium = SOIL, **kw):
    # probe model with heat capacity (Blackwell 1954), moist soil, q = 5 W/m, 0.004 K noise
    return make_run(medium, noise_K=0.004, rng=np.random.default_rng(seed), heat_s=900.0, **kw)


def test_none_until_enough_then_estimates() -> None:
    red = LiveReducer(PROBE)
    assert red.add(-5.0, 20.0, 0.0) is None
    assert red.add(0.0, 20.0, 5.0) is None
    assert red.add(1.0, 20.3, 5.0) is None
    data = _run()
    _, ests = replay(data.time_s, data.temps_C["heater"], data.q_W_per_m, PROBE)
    assert ests and ests[0].n_used >= 10
    json.dumps(ests[-1].to_dict(), allow_nan=False)
    last = ests[-1]
    assert last.k_W_per_mK == pytest.approx(1.2, rel=0.02)
    assert last.window_s[0] < last.window_s[1] <= 900.0


def test_incremental_fit_equals_direct_fit_on_its_window() -> None:
    data = _run(1)
    t, T = data.time_s, data.temps_C["heater"]
    red, ests = replay(t, T, data.q_W_per_m, PROBE)
    e = ests[-1]
    sel = (t >= e.window_s[0]) & (t <= e.window_s[1])
    u, y = np.log(t[sel]), T[sel] - red.baseline.at(t[sel])
    lf = fit_line(u, y)
    assert e.k_u_stat_W_per_mK == pytest.approx(e.k_W_per_mK * lf.slope_u / lf.slope, rel=1e-6)
    assert e.rho1 == pytest.approx(lf.rho1, abs=1e-6)
    # k: the same window with the drift as a third parameter, the baseline's own fit of it as a prior (weighted
    # least squares with one pseudo-row), computed directly
    base = red.baseline
    s2 = (lf.slope_u / lf.slope) ** 2 * lf.slope**2 * float(((u - u.mean()) ** 2).sum())  # s²·AR inflation
    A = np.column_stack([u, np.ones_like(u), t[sel]]) / math.sqrt(s2)
    prior = np.array([[0.0, 0.0, 1.0 / base.fitted_rate_u_K_per_s]])
    b0 = (base.fitted_rate_K_per_s - base.rate_K_per_s) / base.fitted_rate_u_K_per_s
    theta, *_ = np.linalg.lstsq(np.vstack([A, prior]), np.append(y / math.sqrt(s2), b0), rcond=None)
    assert e.k_W_per_mK == pytest.approx(5.0 / (4 * math.pi * theta[0]), rel=1e-9)


def test_offline_stable_at_is_the_live_verdict_and_close_to_final() -> None:
    data = _run(2)
    res = reduce_run(data, PROBE).sensors["heater"]
    red, ests = replay(data.time_s, data.temps_C["heater"], data.q_W_per_m, PROBE)
    first_stable = next(e for e in ests if e.stable)
    assert res.stable_at_s == first_stable.t_s == red.stable_at_s
    # the aim: a value within 2 % of the full-duration one well before the end of heating
    assert first_stable.t_s < 0.5 * 900.0
    assert first_stable.k_W_per_mK == pytest.approx(ests[-1].k_W_per_mK, rel=0.02)


def test_noisy_record_is_not_stable_early() -> None:
    data = make_run(Medium(0.6065, 4.169e6), noise_K=0.08, rng=np.random.default_rng(3), heat_s=300.0)
    _, ests = replay(data.time_s, data.temps_C["heater"], data.q_W_per_m, PROBE, target_rel_u=0.005)
    assert all(not e.stable for e in ests)
    assert "noise_high" in ests[-1].flags


def test_live_uncertainty_shrinks_as_heating_goes_on() -> None:
    # The default plan (120 s baseline, 600 s at 5 W/m) with the default needle in the simulator's moist sand (its
    # finite-volume solver, noise 10 mK). Before the drift became a parameter of the live fit, the ± grew from
    # about 1.7 % after a minute to 6.4 % at the end of heating (the baseline's slope uncertainty extrapolated).
    from pathlib import Path

    from linerig.daemon.probe import load_probe_profile
    from linerig.daemon.sim.materials import get_material
    from linerig.daemon.sim.records import recorded_run
    from linerig.daemon.sim.rig_model import ProbeSpec, SimulatedRig

    needle = load_probe_profile(Path(__file__).resolve().parents[1] / "daemon" / "profiles" / "default-needle.toml")
    for seed in (2, 3):
        rig = SimulatedRig(get_material("moist-sand"), ProbeSpec.default_needle(), seed=seed, axial_loss=True)
        data = recorded_run(rig, baseline_s=120.0, heat_s=600.0, recover_s=0.0, q_W_per_m=5.0)
        _, ests = replay(data.time_s, data.temps_C["heater"], data.q_W_per_m, needle)
        rel = {round(e.t_s): e.k_u_W_per_mK / e.k_W_per_mK for e in ests}
        later = [v for t, v in rel.items() if t >= 60]
        # at the end no wider than after the first minute (once axial loss bends the line the window stops there
        # and the ± with it), and never on the way more than half as wide again
        assert rel[max(rel)] <= 1.02 * rel[60], (seed, rel[60], rel[max(rel)])
        assert max(later) <= 1.5 * rel[60], (seed, rel[60], max(later))
