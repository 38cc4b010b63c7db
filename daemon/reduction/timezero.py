"""Time zero checked against the temperature: heat cannot arrive before the heater is on.

The power column fixes the switch-on (the first step of ``superposition.power_steps``). A logger that writes the
power reading one or more rows late puts that step after the instant the heater really came on; a sensor in the
heater then shows its rise *before* the power column says the heater was on, which no physics allows. This
module finds that contradiction from the temperatures alone and bounds the real switch-on: after the last
sample still at the baseline and before the first that had clearly risen. The other direction (the rise seen
later than the power says) is left alone: a sensor inside a probe or a rod can lag its heater for seconds.

"Clearly risen" is 5 standard deviations of the baseline residual (and at least 1 mK), held for three samples in
a row so that one noise spike does not count (common practice, no source).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

RISE_Z = 5.0           # a rise counts from this many baseline standard deviations (no source)
RISE_FLOOR_K = 1e-3    # and never below 1 mK (noise-free records)
PERSIST = 3            # samples in a row above the threshold
MAX_SHIFT_SAMPLES = 5  # beyond this many samples it is not a late power column: flagged, not moved


@dataclass(frozen=True)
class TimeZero:
    """The switch-on bounded by the temperature: between ``lo_s`` and ``hi_s`` (relative to the power column's
    step, so both are negative), and what was seen."""

    lo_s: float
    hi_s: float
    power_on_s: float
    risen_at_s: float
    risen_K: float
    threshold_K: float

    @property
    def samples(self) -> float:
        return -self.lo_s / max(self.hi_s - self.lo_s, 1e-12)

    @property
    def mid_s(self) -> float:
        return 0.5 * (self.lo_s + self.hi_s)

    def note(self, shift_s: float, how: str) -> str:
        return (f"time zero: ΔT had risen {self.risen_K:.3g} K (> {self.threshold_K:.2g} K) at t = "
                f"{self.risen_at_s:.4g} s, before the power column shows the heater on at {self.power_on_s:.4g} s; "
                f"the power record is moved by {shift_s:+.4g} s ({how}, within {self.lo_s:+.4g} to "
                f"{self.hi_s:+.4g} s)")


def early_rise(t: np.ndarray, dT: np.ndarray, power_on_s: float, noise_K: float) -> TimeZero | None:
    """The bound on the switch-on when the temperature rose before ``power_on_s``; None when it did not.

    ``t``, ``dT``: the record (baseline rows included) and its rise above the baseline; ``noise_K``: the
    baseline's residual standard deviation.
    """
    thr = max(RISE_Z * noise_K, RISE_FLOOR_K)
    up = dT > thr
    if up.size < PERSIST:
        return None
    run = np.convolve(up.astype(int), np.ones(PERSIST, dtype=int), mode="valid") == PERSIST
    first = np.nonzero(run & (t[: run.size] > t[0]))[0]
    if first.size == 0:
        return None
    j = int(first[0])
    if t[j] > power_on_s:
        return None  # rose after the power column's switch-on (as it must, or later: a lagging sensor)
    return TimeZero(float(t[j - 1] - power_on_s), float(t[j] - power_on_s), power_on_s, float(t[j]),
                    float(dT[j]), thr)


def rectangular_u(lo: float, hi: float) -> float:
    """Standard uncertainty of a value known only to lie in [lo, hi] (JCGM 100:2008 §4.3.7): (hi − lo)/√12."""
    return abs(hi - lo) / math.sqrt(12.0)
