"""A sagging supply must not bias k: superposition of the measured power steps (Duhamel's theorem)."""

import math

import numpy as np
import pytest
from scipy.special import exp1

from linerig.daemon.probe import ProbeProfile
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.data import RunData
from linerig.daemon.reduction.live import replay
from linerig.daemon.reduction.stats import fit_line
from linerig.daemon.reduction.superposition import compress_steps, power_steps


def _sagging(k: float = 1.2, rho_c: float = 2.2e6, q0: float = 6.0, sag: float = 0.15, r: float = 0.635e-3):
    """Exact line-source response (Carslaw & Jaeger §10.4) superposed over every measured power step."""
    alpha = k / rho_c
    t = np.arange(-120.0, 900.5, 1.0)
    q = np.where(t >= 0, q0 * (1 - sag * np.clip(t, 0, None) / 900.0), 0.0)
    st, sd = power_steps(t, q)
    age = t[:, None] - st[None, :]
    G = np.where(age > 0, exp1(r**2 / (4 * alpha * np.where(age > 0, age, 1.0))), 0.0) / (4 * math.pi * k)
    return RunData(t, q, {"heater": 10.0 + G @ sd}), k


def test_sag_does_not_bias_k() -> None:
    data, k = _sagging()
    probe = ProbeProfile(name="ideal line", radius_mm=0.635)
    res = reduce_run(data, probe, method="line").sensors["heater"]
    assert res.k_W_per_mK == pytest.approx(k, rel=0.005)
    # a naive fit that divides by the mean power is biased by several % on the same record
    t, dT, q = data.time_s, data.temps_C["heater"] - 10.0, data.q_W_per_m
    sel = (t >= 90) & (t <= 900)
    naive = fit_line(np.log(t[sel]), dT[sel])
    k_naive = float(np.mean(q[sel])) / (4 * math.pi * naive.slope)
    assert abs(k_naive / k - 1) > 0.03


def test_live_reducer_follows_sag_too() -> None:
    data, k = _sagging()
    _, ests = replay(data.time_s, data.temps_C["heater"], data.q_W_per_m, ProbeProfile("x", 0.635))
    assert ests[-1].k_W_per_mK == pytest.approx(k, rel=0.005)


def test_step_compression_keeps_power_within_tolerance() -> None:
    t = np.arange(0.0, 600.0)
    q = 5.0 * (1 - 0.1 * t / 600)
    st, sd = power_steps(t, q)
    ct, cd = compress_steps(st, sd, rel_tol=0.002)
    assert ct.size < 40
    level = np.cumsum(cd)[np.searchsorted(ct, t, side="right") - 1]
    assert np.max(np.abs(level - q)) <= 0.002 * 5.0 * 1.01
