"""Time integration shared by both reference geometries: C·dT/dt = −G·T + q(t)·s, T = 0 at t = 0.

Scheme: backward Euler extrapolated once (Richardson): x = 2·BE(dt/2, dt/2) − BE(dt). Its stability function
R(z) = 2/(1 − z/2)² − 1/(1 − z) tends to 0 as z → −∞ (L-stable) and is second order, so the large steps that
follow a switch-on do not ring, and every stage is a plain implicit solve. Step lengths are binary multiples of a
time unit (2^-k s), so the matrices C/dt + G are factorised once per length and reused; every power change and
every stored time is an exact multiple of the unit and is landed on. After each large power change the steps
restart short and double as the age of the change grows (dt ≤ ratio·age).

Energy: each backward Euler stage conserves Σ C·T + boundary outflow exactly, and so does their linear
combination; the ledger kept here is the check.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import splu

__all__ = ["LinearThermalSystem", "PowerHistory", "StepControl", "integrate"]


@dataclass(frozen=True)
class PowerHistory:
    """Piecewise-constant heater power per metre: q_W_per_m[i] from t_s[i] to t_s[i + 1] (the last one onwards)."""

    t_s: tuple[float, ...]
    q_W_per_m: tuple[float, ...]

    def __post_init__(self) -> None:
        if len(self.t_s) != len(self.q_W_per_m) or not self.t_s:
            raise ValueError("power history needs matching, non-empty t_s and q_W_per_m")
        if self.t_s[0] != 0.0:
            raise ValueError("power history must start at t = 0 (heater on)")
        if any(b <= a for a, b in zip(self.t_s, self.t_s[1:], strict=False)):
            raise ValueError("power change times must increase")

    @classmethod
    def heat_then_off(cls, q: float, t_heat: float) -> PowerHistory:
        return cls((0.0, float(t_heat)), (float(q), 0.0))

    def at(self, t: np.ndarray | float) -> np.ndarray:
        """Power at time t (right-continuous; 0 before t = 0)."""
        t = np.asarray(t, dtype=float)
        idx = np.searchsorted(np.asarray(self.t_s), t, side="right") - 1
        q = np.asarray(self.q_W_per_m)[np.clip(idx, 0, None)]
        return np.where(t < 0.0, 0.0, q)

    def energy(self, t: np.ndarray | float) -> np.ndarray:
        """∫_0^t q dt' (J/m), exact for the steps."""
        t = np.asarray(t, dtype=float)
        ts = np.asarray(self.t_s)
        qs = np.asarray(self.q_W_per_m)
        cum = np.concatenate(([0.0], np.cumsum(qs[:-1] * np.diff(ts))))
        idx = np.clip(np.searchsorted(ts, t, side="right") - 1, 0, None)
        return np.where(t <= 0.0, 0.0, cum[idx] + qs[idx] * (np.maximum(t, 0.0) - ts[idx]))

    def mean(self, t0: np.ndarray, t1: np.ndarray) -> np.ndarray:
        """Mean power over [t0, t1] — what a logger that averages over the interval would record."""
        t0 = np.asarray(t0, dtype=float)
        t1 = np.asarray(t1, dtype=float)
        return (self.energy(t1) - self.energy(t0)) / (t1 - t0)

    def as_dict(self) -> dict[str, list[float]]:
        return {"t_s": list(self.t_s), "q_W_per_m": list(self.q_W_per_m)}


@dataclass
class LinearThermalSystem:
    """Capacities C (J/K per cell), conductances G (symmetric, boundary terms on the diagonal), source weights s.

    `boundary_g[i]` is cell i's conductance to a fixed-temperature boundary (already inside G) so that the heat
    leaving through it can be booked; Σ s is the heated length (m), so the power in is q·Σ s.
    """

    cap: np.ndarray
    G: sp.csr_matrix
    src: np.ndarray
    boundary_g: np.ndarray
    readout: sp.csr_matrix  # n_sensors × n_cells
    _lu: dict[int, object] = field(default_factory=dict, repr=False)

    def solver(self, dt_units: int, unit_s: float) -> object:
        """LU of C/dt + G for a step of dt_units/2 units (keys are half-units so dt/2 stages share the cache)."""
        lu = self._lu.get(dt_units)
        if lu is None:
            dt = dt_units * unit_s / 2.0
            m = (sp.diags(self.cap / dt) + self.G).tocsc()
            lu = splu(m, permc_spec="MMD_AT_PLUS_A")  # symmetric pattern: far less fill than COLAMD
            self._lu[dt_units] = lu
        return lu


@dataclass(frozen=True)
class StepControl:
    """Step-length rules. unit_s must be 2^-k s; all times handled are integer multiples of it."""

    unit_s: float = 2.0**-10
    first_units: int = 1  # first step after a large power change
    ratio: float = 0.25  # dt ≤ ratio × time since the last large change
    max_s: float = 0.5
    store_s: float = 0.5  # every multiple of this is stored (plus the short steps after a change)
    refine_rel: float = 0.05  # a change larger than this fraction of max |q| restarts short steps

    def units(self, t: float) -> int:
        u = t / self.unit_s
        n = round(u)
        if abs(u - n) > 1e-9 * max(1.0, abs(u)):
            raise ValueError(f"time {t} s is not a multiple of the step unit {self.unit_s} s")
        return int(n)


@dataclass
class Solution:
    t_s: np.ndarray
    values: np.ndarray  # n_times × n_sensors (temperature rise, K)
    energy_in_J: float
    energy_stored_J: float
    energy_out_J: float
    n_steps: int
    final_state: np.ndarray

    @property
    def energy_residual_rel(self) -> float:
        return (self.energy_in_J - self.energy_stored_J - self.energy_out_J) / max(self.energy_in_J, 1e-300)


def _pow2_floor(x: float) -> int:
    return 1 << math.floor(math.log2(x)) if x >= 1 else 0


def integrate(system: LinearThermalSystem, power: PowerHistory, t_end_s: float, ctl: StepControl) -> Solution:
    """Integrate from rest to t_end, storing the readout at t = 0, every multiple of store_s and every short step."""
    n = system.cap.shape[0]
    x = np.zeros(n)
    changes = [ctl.units(t) for t in power.t_s]
    qvals = list(power.q_W_per_m)
    qmax = max(abs(q) for q in qvals) or 1.0
    end = ctl.units(t_end_s)
    store = ctl.units(ctl.store_s)
    max_units = max(1, ctl.units(ctl.max_s))
    if max_units & (max_units - 1) or store % max_units:
        raise ValueError("max_s must be a power-of-two number of units dividing store_s")
    s_total = float(system.src.sum())
    times = [0.0]
    vals = [system.readout @ x]
    e_in = 0.0
    e_out = 0.0
    t = 0
    last_big = 0
    seg = 0
    q_prev = 0.0
    nsteps = 0
    while t < end:
        while seg + 1 < len(changes) and changes[seg + 1] <= t:
            seg += 1
        if changes[seg] == t:
            q_now = qvals[seg]
            if abs(q_now - q_prev) > ctl.refine_rel * qmax:
                last_big = t
        q = qvals[seg]
        next_change = changes[seg + 1] if seg + 1 < len(changes) else end
        next_store = (t // store + 1) * store
        hard = min(next_change, next_store, end)
        age = t - last_big
        allow = max(ctl.first_units, min(max_units, _pow2_floor(ctl.ratio * age)))
        dt = 1 << math.floor(math.log2(allow))
        while dt > 1 and (t % dt or t + dt > hard):
            dt >>= 1
        dt_s = dt * ctl.unit_s
        rhs_src = q * system.src
        lu_full = system.solver(2 * dt, ctl.unit_s)
        lu_half = system.solver(dt, ctl.unit_s)
        c_full = system.cap / dt_s
        c_half = system.cap / (dt_s / 2.0)
        x1 = lu_full.solve(c_full * x + rhs_src)
        xh = lu_half.solve(c_half * x + rhs_src)
        x2 = lu_half.solve(c_half * xh + rhs_src)
        bg = system.boundary_g
        e_out += dt_s * (float(bg @ xh) + float(bg @ x2) - float(bg @ x1))
        x = 2.0 * x2 - x1
        e_in += q * s_total * dt_s
        q_prev = q
        t += dt
        nsteps += 1
        if t % store == 0 or dt < min(store, max_units):
            times.append(t * ctl.unit_s)
            vals.append(system.readout @ x)
    e_stored = float(system.cap @ x)
    return Solution(np.asarray(times), np.asarray(vals), e_in, e_stored, e_out, nsteps, x)
