"""The in-memory shape of one run, shared by the CSV reader, the store and every reduction."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

# Physical bounds on a run record. Beyond them no measurement happened, and a fit would still return a number.
Q_MAX_W_PER_M = 1000.0
"""Heater power per metre: needles run at 2–60 W/m and borehole heat-exchanger tests at up to about 100 W/m; at
1 kW/m the ground next to a probe would boil within seconds (common practice, no source)."""
T_ABSOLUTE_ZERO_C = -273.15
T_MAX_C = 1000.0
"""No probe, its solder or its epoxy survives this, and no soil is measured there (common practice, no source)."""
TIME_MAX_S = 1e9
"""About 30 years either side of heater on: anything longer is a unit or column mistake (and ln t overflows
nothing below it)."""
SIGNAL_Z = 3.0
"""The rise at the end of the heating must exceed three times the sensor's sample-to-sample noise."""
NOISE_FLOOR_K = 1e-6  # no converter resolves less: a noise-free record still needs a rise above this


def out_of_bounds(column: str, v: np.ndarray) -> np.ndarray:
    """Where finite values of a run column are outside physical bounds (NaN is not flagged here)."""
    if column == "time_s":
        return np.abs(v) > TIME_MAX_S
    if column == "q_W_per_m":
        return (v < 0) | (v > Q_MAX_W_PER_M)
    return (v <= T_ABSOLUTE_ZERO_C) | (v > T_MAX_C)


def contiguous(mask: np.ndarray) -> slice | np.ndarray:
    """A boolean selection as a slice when its samples are contiguous, so that indexing a long record gives views
    rather than copies; the mask itself otherwise."""
    idx = np.flatnonzero(mask)
    if idx.size and idx[-1] - idx[0] + 1 == idx.size:
        return slice(int(idx[0]), int(idx[-1]) + 1)
    return mask


def heating_signal_problem(sensor: str, th: np.ndarray, dTh: np.ndarray, when: str = "while the heater is on",
                           span: str = "of heating") -> str | None:
    """Why ``sensor`` shows no heating (None when it warms): ``dTh``, its rise above the baseline's extrapolation
    over the heating samples ``th``, must end (median of the last quarter) more than SIGNAL_Z sample-to-sample noise
    (MAD of the steps) above zero.

    A sensor that cools, or only wanders, while the heater is on is not in the probe, is shorted (it reads its
    connector) or belongs to another column: any slope fitted to it would be noise, and its k any number.
    """
    ok = np.isfinite(dTh)
    th, dTh = th[ok], dTh[ok]
    if th.size < 4:
        return None  # too short to judge; the fit says what is missing
    rise = float(np.median(dTh[-max(th.size // 4, 2):]))
    steps = np.diff(dTh)
    noise = max(float(np.median(np.abs(steps - np.median(steps)))) / 0.6745 / math.sqrt(2.0), NOISE_FLOOR_K)
    if rise > SIGNAL_Z * noise:
        return None
    how = "falls" if rise < -SIGNAL_Z * noise else "does not rise"
    return (f"T_{sensor}_C {how} {when} ({rise:+.3g} K at the end of {th[-1]:.4g} s {span}, "
            f"noise {noise:.2g} K): is the sensor in the probe, shorted, or in the wrong column?")


class ReductionError(ValueError):
    """The data cannot give a result (no heating, too few samples ...); the message says what is missing."""


class ImplausibleRun(ReductionError):
    """A record that no heated probe could produce (power, temperature or time out of physical bounds, or a sensor
    that does not warm while heated); the message names the column and the sample."""


def value_problem(column: str, value: float) -> str | None:
    """What is physically wrong with one value of a run column ('time_s', 'q_W_per_m' or a 'T_…_C'), or None."""
    if not math.isfinite(value):
        return f"{value!r} is not a finite number"
    if column == "time_s":
        return None if abs(value) <= TIME_MAX_S else f"time {value:g} s is beyond ±{TIME_MAX_S:g} s"
    if column == "q_W_per_m":
        if value < 0:
            return f"power {value:g} is negative"
        if value > Q_MAX_W_PER_M:
            return f"power {value:g} W/m is above {Q_MAX_W_PER_M:g} W/m, more than any line-source probe delivers"
        return None
    if value <= T_ABSOLUTE_ZERO_C:
        return f"temperature {value:g} °C is at or below absolute zero"
    if value > T_MAX_C:
        return f"temperature {value:g} °C is above {T_MAX_C:g} °C, beyond any probe"
    return None


@dataclass
class RunData:
    """Samples of one run. Times in s from heater on (baseline rows negative); temperatures in °C.

    ``q_W_per_m[i]`` is the measured heater power per metre held from ``time_s[i]`` until the next sample
    (0 when off), so a row at t = 0 with q > 0 says the heater came on at 0.
    """

    time_s: np.ndarray
    q_W_per_m: np.ndarray
    temps_C: dict[str, np.ndarray] = field(default_factory=dict)

    def __post_init__(self) -> None:
        self.time_s = np.asarray(self.time_s, dtype=float)
        self.q_W_per_m = np.asarray(self.q_W_per_m, dtype=float)
        self.temps_C = {k: np.asarray(v, dtype=float) for k, v in self.temps_C.items()}
        n = self.time_s.shape[0]
        if self.q_W_per_m.shape != (n,):
            raise ReductionError(f"q_W_per_m has {self.q_W_per_m.shape[0]} values for {n} times")
        for k, v in self.temps_C.items():
            if v.shape != (n,):
                raise ReductionError(f"T_{k}_C has {v.shape[0]} values for {n} times")
        self._check_bounds()

    def _check_bounds(self) -> None:
        """Every value inside physical bounds (a missing reading, NaN, is allowed in q and the temperatures)."""
        columns = [("time_s", self.time_s), ("q_W_per_m", self.q_W_per_m),
                   *((f"T_{k}_C", v) for k, v in self.temps_C.items())]
        for name, v in columns:
            bad = out_of_bounds(name, v) | np.isinf(v)
            if name == "time_s":
                bad |= np.isnan(v)
            if bad.any():
                i = int(np.argmax(bad))
                raise ImplausibleRun(f"column {name}, sample {i + 1}: {value_problem(name, float(v[i]))}")

    @property
    def sensor_names(self) -> list[str]:
        return list(self.temps_C)

    def heating_span(self) -> tuple[int, int]:
        """Index range [i0, i1): from heater on up to (not including) the first sample after it went off.

        Raises ReductionError when the heater never came on.
        """
        on = np.nonzero((self.time_s >= 0) & (self.q_W_per_m > 0))[0]
        if on.size == 0:
            raise ReductionError("no heating: no sample at t >= 0 has q_W_per_m > 0")
        i0 = int(np.searchsorted(self.time_s, 0.0, side="left"))
        after = np.nonzero((self.time_s > 0) & (self.q_W_per_m <= 0))[0]
        after = after[after > on[0]]
        i1 = int(after[0]) if after.size else self.time_s.shape[0]
        return i0, i1

    def heater_off_s(self) -> float | None:
        """Time the heater went off (first zero-power sample after heating), or None if it never did."""
        _, i1 = self.heating_span()
        return float(self.time_s[i1]) if i1 < self.time_s.shape[0] else None
