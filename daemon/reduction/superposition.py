"""Measured power as a sum of steps, so any response can be superposed (Duhamel) instead of assuming q fixed.

Convention: q[i] is held from t[i] until t[i+1]; the heater comes on at t = 0. A step of size q[i] − q[i−1]
therefore happens at t[i] (and the first heating sample's q is a step at 0).
"""

from __future__ import annotations

import numpy as np


def power_steps(t: np.ndarray, q: np.ndarray, t_stop: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Step times and sizes (W/m) of the measured power from heater on (t = 0) up to ``t_stop``.

    Zero-size steps are dropped. Baseline rows (t < 0) are ignored whatever their q.
    """
    t = np.asarray(t, dtype=float)
    q = np.asarray(q, dtype=float)
    sel = t >= 0 if t_stop is None else (t >= 0) & (t <= t_stop)
    ts, qs = t[sel], np.clip(q[sel], 0.0, None)
    if ts.size == 0:
        return np.zeros(0), np.zeros(0)
    dq = np.diff(qs, prepend=0.0)
    times = ts.copy()
    times[0] = 0.0
    keep = dq != 0.0
    return times[keep], dq[keep]


def compress_steps(times: np.ndarray, dq: np.ndarray, rel_tol: float = 0.002,
                   max_steps: int = 200) -> tuple[np.ndarray, np.ndarray]:
    """Merge small steps into fewer, larger ones that keep the power within ``rel_tol`` of the full record.

    Used only to make the probe-model convolution cheap; the late-time method uses every step.
    """
    if times.size <= 2:
        return times, dq
    level = np.cumsum(dq)
    tol = rel_tol * max(float(np.max(np.abs(level))), 1e-300)
    while True:
        out_t: list[float] = [float(times[0])]
        out_l: list[float] = []
        lo = hi = acc = float(level[0])
        n = 1
        for i in range(1, level.size):
            v = float(level[i])
            if max(hi, v) - min(lo, v) > 2 * tol:
                out_l.append(acc / n)  # segment held at its mean, so a slow sag is followed without bias
                out_t.append(float(times[i]))
                lo = hi = acc = v
                n = 1
            else:
                lo, hi, acc, n = min(lo, v), max(hi, v), acc + v, n + 1
        out_l.append(acc / n)
        if len(out_t) <= max_steps:
            break
        tol *= 2.0
    return np.asarray(out_t), np.diff(np.asarray(out_l), prepend=0.0)


def log_time_regressor(t: np.ndarray, times: np.ndarray, dq: np.ndarray,
                       chunk: int = 512) -> tuple[np.ndarray, np.ndarray]:
    """Σ Δq_j·ln(t − t_j) and Σ Δq_j over the steps before each t (late-time line-source superposition).

    With these, the late-time response of every step adds up to ΔT = X/(4πk) + Q·c, linear in 1/(4πk):
    a sagging supply changes X and Q, not the fitted k. During recovery Q = 0 and X = q·ln(t/(t − t_h)).
    """
    t = np.asarray(t, dtype=float)
    x = np.zeros_like(t)
    qsum = np.zeros_like(t)
    for s in range(0, t.size, chunk):
        tt = t[s:s + chunk, None]
        age = tt - times[None, :]
        before = age > 0
        with np.errstate(divide="ignore", invalid="ignore"):
            lg = np.where(before, np.log(np.where(before, age, 1.0)), 0.0)
        x[s:s + chunk] = lg @ dq
        qsum[s:s + chunk] = before @ dq
    return x, qsum
