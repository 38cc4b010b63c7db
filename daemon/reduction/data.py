"""The in-memory shape of one run, shared by the CSV reader, the store and every reduction."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


class ReductionError(ValueError):
    """The data cannot give a result (no heating, too few samples ...); the message says what is missing."""


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
