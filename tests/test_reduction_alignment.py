"""Aligning reported power with the reduction's convention recovers k when samples straddle the switch times.

Reference: the line-source solution ΔT = q/(4πk)·E1(r²/4αt) (Carslaw & Jaeger 1959, §10.4), with heating then
recovery by superposition (§10.4 again), evaluated with scipy.special.exp1; the record is sampled at times that
do not fall on the switch-on or switch-off instants, as a real front end's samples do not.
"""

from __future__ import annotations

import numpy as np
from scipy.special import exp1

from linerig.daemon.reduction import reduce_run
from linerig.daemon.reduction.alignment import power_held_from_each_sample
from linerig.daemon.reduction.data import RunData


def _record(phase: float, t_off: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    k, alpha, r, q = 1.45, 9.2e-7, 0.635e-3, 5.0
    t = np.arange(-120.0, 600.0, 1.0) + phase  # samples 1 s apart, offset from the switch-on by `phase`
    dT = np.where(t > 0, q / (4 * np.pi * k) * exp1(r * r / (4 * alpha * np.clip(t, 1e-9, None))), 0.0)
    late = t > t_off
    dT[late] -= q / (4 * np.pi * k) * exp1(r * r / (4 * alpha * (t[late] - t_off)))
    # what a front end reports at each sample: the mean power over the interval just past
    on = np.clip(np.minimum(t, t_off) - np.maximum(t - 1.0, 0.0), 0.0, 1.0)
    return t, 12.0 + dT, q * on


def test_reported_power_is_moved_to_the_interval_it_belongs_to() -> None:
    t = np.array([-1.4, -0.4, 0.6, 1.6, 2.6, 3.6])
    reported = np.array([0.0, 0.0, 3.0, 5.0, 5.0, 0.0])  # on at 0, off at 3.0 (between 2.6 and 3.6)
    q = power_held_from_each_sample(t, reported, heater_off_s=3.0)
    np.testing.assert_allclose(q, [0.0, 0.0, 5.0, 5.0, 5.0 * 0.4, 0.0])
    energy = np.sum(q[:-1] * np.diff(t)) + 5.0 * 0.6  # plus the 0.6 s between switch-on and the first sample
    assert abs(energy - 5.0 * 3.0) < 1e-12


def test_k_recovered_when_samples_straddle_the_switch_times() -> None:
    for phase in (0.13, 0.5, 0.91):
        t, temp, reported = _record(phase, t_off=300.0)
        q = power_held_from_each_sample(t, reported, heater_off_s=300.0)
        res = reduce_run(RunData(t, q, {"heater": temp}), method="line", stable_rule=False).sensors["heater"]
        assert abs(res.k_raw_W_per_mK / 1.45 - 1) < 0.005, (phase, res.k_raw_W_per_mK)
        assert res.recovery is not None and abs(res.recovery.k_W_per_mK / 1.45 - 1) < 0.01
