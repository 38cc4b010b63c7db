"""From what a front end reports to what the reduction assumes about power.

A front end reports with each sample the heater power over the interval that has just ended. The reduction
(``RunData``) wants the power held from each sample to the next, with time zero at the instant the heater went
on. Given that instant (the device's own switch-on time) as zero and the switch-off instant, each interval gets
the power that was really delivered in it; an interval that the switch-off cuts gets the same energy, spread
over the interval, so superposition sees the step within a fraction of a sample of where it was.
"""

from __future__ import annotations

import numpy as np


def power_held_from_each_sample(time_s: np.ndarray, q_reported: np.ndarray,
                                heater_off_s: float | None = None) -> np.ndarray:
    """q[i] for the interval [t[i], t[i+1]), from reports made at the end of each interval.

    ``time_s`` is measured from the switch-on (baseline negative); ``q_reported[i]`` is the mean power over
    the interval ending at ``time_s[i]``. Intervals before zero carry no power; the last sample keeps its own
    report (nothing follows it).
    """
    t = np.asarray(time_s, dtype=float)
    qr = np.clip(np.asarray(q_reported, dtype=float), 0.0, None)
    n = t.size
    q = np.zeros(n)
    if n == 0:
        return q
    q[:-1] = qr[1:]
    q[-1] = qr[-1]
    q[t < 0] = 0.0
    if heater_off_s is not None and np.isfinite(heater_off_s):
        after = t >= heater_off_s
        q[after] = 0.0
        i = int(np.searchsorted(t, heater_off_s, side="right")) - 1  # the interval the switch-off falls in
        if 0 <= i < n - 1 and t[i] >= 0:
            level = qr[i] if qr[i] > 0 else qr[i + 1]
            q[i] = level * (heater_off_s - t[i]) / (t[i + 1] - t[i])
    return q
