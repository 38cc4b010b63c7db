"""Measured power as a sum of steps, so any response can be superposed (Duhamel) instead of assuming q fixed.

Convention: q[i] is held from t[i] until t[i+1]; the heater comes on at t = 0. A step of size q[i] − q[i−1]
therefore happens at t[i] (and the first heating sample's q is a step at 0).
"""

from __future__ import annotations

import math

import numpy as np

EXACT_WORK = 5e7
"""Samples × steps summed term by term. A longer record with a measured power that changes at every sample
(10 M rows of meter noise would be 10¹³ terms) has its steps merged first (``merge_steps``) and is summed by
``_regressor_expanded``."""
MERGE_ABOVE = 20_000   # more steps than this are merged where they are made (power_steps)
MERGE_KEEP = 1000      # the first steps are kept as they are (the early, fast part of the response)
MERGE_RATIO = 0.01     # after them a merged segment spans at most 1 % of the time since heater on
MERGE_BIG = 0.02       # a step above 2 % of the largest power level always starts a segment (a real change)
MERGE_MAX_BIG = 2000   # ... unless there are more than this many: then the bar is raised until there are not
EXPAND_RATIO = 4.0     # steps older than 4 chunk lengths are summed from a series in (t − t_a)/(t_a − τ)
EXPAND_TERMS = 16      # (1/4)^17/17 ≈ 4e-12 of the steps' size: the series is exact to rounding
EXPAND_CHUNK = 2048


def power_steps(t: np.ndarray, q: np.ndarray, t_stop: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Step times and sizes (W/m) of the measured power from heater on (t = 0) up to ``t_stop``.

    Zero-size steps are dropped. Baseline rows (t < 0) are ignored whatever their q. More than MERGE_ABOVE
    steps (a power that changes at every sample of a long record) are merged (``merge_steps``).
    """
    t = np.asarray(t, dtype=float)
    q = np.asarray(q, dtype=float)
    sel = t >= 0 if t_stop is None else (t >= 0) & (t <= t_stop)
    times, qs = t[sel], q[sel]  # copies, changed in place below
    if times.size == 0:
        return np.zeros(0), np.zeros(0)
    np.clip(qs, 0.0, None, out=qs)
    dq = np.diff(qs, prepend=0.0)
    del qs
    times[0] = 0.0
    keep = dq != 0.0
    if np.count_nonzero(keep) > MERGE_ABOVE:  # a power meter's noise on a long record: see merge_steps
        return merge_steps(times[keep], dq[keep])
    return times[keep], dq[keep]


def compress_steps(times: np.ndarray, dq: np.ndarray, rel_tol: float = 0.002,
                   max_steps: int = 200) -> tuple[np.ndarray, np.ndarray]:
    """Merge small steps into fewer, larger ones that keep the power within ``rel_tol`` of the full record.

    Used only to make the probe-model convolution cheap; the late-time method uses every step (or, past
    ``EXACT_WORK``, the merged steps). A very long step record is merged first so that this loop stays short.
    """
    if times.size <= 2:
        return times, dq
    if times.size > MERGE_ABOVE:
        times, dq = merge_steps(times, dq)
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
    if t.size * times.size > EXACT_WORK and t.size > 1 and bool(np.all(np.diff(t) > 0)):
        mt, mdq = merge_steps(times, dq, float(t[-1]))
        return _regressor_expanded(t, mt, mdq), _levels_at(t, times, dq)
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


def _levels_at(t: np.ndarray, times: np.ndarray, dq: np.ndarray) -> np.ndarray:
    """Σ Δq_j over the steps strictly before each t: the power held at t, exactly (the steps are not merged)."""
    level = np.concatenate(([0.0], np.cumsum(dq)))
    return level[np.searchsorted(times, t, side="left")]


def merge_steps(times: np.ndarray, dq: np.ndarray, t_end: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Fewer steps for a long record: the power held at its time-weighted mean over each merged segment.

    The first MERGE_KEEP steps stay as they are; after them a segment spans at most MERGE_RATIO of the time since
    heater on, and any step above MERGE_BIG of the largest level starts a new one. Because each segment keeps
    its mean, the change in the regressor at a time t after the segment is ∫(q − q̄)(s − c)ds/(t − c)² and smaller:
    second order in the segment's width over its age. What is lost is the power's own fast noise, which a
    meter adds and the ground does not see.
    """
    times = np.asarray(times, dtype=float)
    dq = np.asarray(dq, dtype=float)
    if times.size <= MERGE_KEEP + 1:
        return times, dq
    level = np.cumsum(dq)
    end = max(float(times[-1]), t_end if t_end is not None else float(times[-1]))
    # segment boundaries: every kept step, geometric bins after them, and every large change (arrays reused in
    # place: a long record's steps are tens of MB each)
    t_keep = max(float(times[MERGE_KEEP]), 1e-300)
    bins = np.maximum(times, t_keep)
    bins /= t_keep
    np.log(bins, out=bins)
    bins /= math.log1p(MERGE_RATIO)
    np.floor(bins, out=bins)
    start = np.ones(times.size, dtype=bool)
    start[1:] = bins[1:] != bins[:-1]
    del bins
    start[: MERGE_KEEP + 1] = True
    size = np.abs(dq)
    bar = MERGE_BIG * max(float(np.max(np.abs(level))), 1e-300)
    while np.count_nonzero(size > bar) > MERGE_MAX_BIG:
        bar *= 2.0
    start |= size > bar
    del size
    first = np.flatnonzero(start)
    del start
    # time-weighted mean level over each segment [times[first[k]], times[first[k + 1]])
    acc = np.diff(times, append=end)
    acc *= level
    np.cumsum(acc, out=acc)  # acc[i]: integral of the power from the first step to times[i + 1]
    seg_end = np.append(first[1:], times.size)
    seg_t0 = times[first]
    span = np.append(times[first[1:]], end) - seg_t0
    held = level[seg_end - 1]  # a segment of zero length (the record ends at its step) keeps its last level
    before = np.where(first > 0, acc[np.maximum(first - 1, 0)], 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        mean = np.where(span > 0, (acc[seg_end - 1] - before) / np.where(span > 0, span, 1.0), held)
    new_dq = np.diff(mean, prepend=0.0)
    keep = new_dq != 0.0
    return seg_t0[keep], new_dq[keep]


def _regressor_expanded(t: np.ndarray, times: np.ndarray, dq: np.ndarray) -> np.ndarray:
    """Σ Δq_j·ln(t − t_j) for sorted t, in chunks: recent steps term by term, older ones from a series.

    For a chunk starting at t_a and a step older than EXPAND_RATIO chunk lengths, with A = t_a − t_j and
    x = (t − t_a)/A ≤ 1/4: ln(t − t_j) = ln A + Σ_p (−1)^(p+1) x^p / p, so the chunk needs only Σ Δq·ln A and
    the moments Σ Δq·A^−p of those steps.
    """
    x = np.zeros_like(t)
    p = np.arange(1, EXPAND_TERMS + 1)
    coef = (-1.0) ** (p + 1) / p
    for s in range(0, t.size, EXPAND_CHUNK):
        tc = t[s:s + EXPAND_CHUNK]
        t_a, t_b = float(tc[0]), float(tc[-1])
        n_before = int(np.searchsorted(times, t_b, side="left"))
        if n_before == 0:
            continue
        n_far = int(np.searchsorted(times[:n_before], t_a - EXPAND_RATIO * (t_b - t_a), side="right"))
        if n_far and t_b > t_a:
            age = t_a - times[:n_far]
            d = dq[:n_far]
            inv = 1.0 / age
            moments = np.empty(EXPAND_TERMS)
            power = d.copy()
            for i in range(EXPAND_TERMS):
                power *= inv
                moments[i] = power.sum()
            dx = tc - t_a
            poly = np.zeros_like(tc)
            for c in (coef * moments)[::-1]:  # Horner in dx
                poly = (poly + c) * dx
            x[s:s + tc.size] = float(d @ np.log(age)) + poly
        elif n_far:  # a chunk of one time
            x[s:s + tc.size] = float(dq[:n_far] @ np.log(t_a - times[:n_far]))
        near_t, near_dq = times[n_far:n_before], dq[n_far:n_before]
        if near_t.size:
            age = tc[:, None] - near_t[None, :]
            before = age > 0
            with np.errstate(divide="ignore", invalid="ignore"):
                lg = np.where(before, np.log(np.where(before, age, 1.0)), 0.0)
            x[s:s + tc.size] += lg @ near_dq
    return x
