"""The "heating can stop" verdict: one rule for the live screen, the offline ``stable_at_s`` and the automatic stop.

It answers a prediction: if heating stopped now rather than at the planned end T, how far could the k the
reduction reports move? Both answers are predicted, for every medium the data still allow:

- **the media**: the probe model (cylinder with heat capacity and contact, Blackwell 1954; Jaeger 1956;
  ``probe_model.response_stehfest``; with the finite-line factor ½[erf(z/2√(αt)) + erf((L − z)/2√(αt))] for the
  heater's length) is fitted to the heating so far for each medium heat capacity ρc on a grid over
  ``RHO_C_RANGE`` (k from the slope, the contact h from the intercept); the ρc whose fit is within
  ``ADMIT_CHI2`` noise variances of the best are admissible (≈ 95 %), and each gives its own k, α and h.
- **what a stop now reports**: the late-time line over the reduction's own window (start where the probe's
  slope error is under 1 %, at least 0.1·t, half a decade kept), or the probe model's k when that window is
  shorter than a factor 2 (the reduction then reports the model);
- **what the full heating would report**, medium by medium: the same choice at T, the line carrying the slope
  error its window leaves (the **window's model error**), axial loss included;
- **statistical**: the difference of two fits to the same noise (residual scatter, AR(1)-inflated, and the
  overlap of the windows [0.1·t, t] and [0.1·T, T]); **drift**: an error δ in the baseline slope tilts each
  window by δ·cov(t/Q, u)/var(u), so heating on changes k by δ times the difference (δ the baseline's u).

"Can stop" when max over the media |now/full − 1| + 2·√(statistical² + drift²) ≤ tolerance, and none of these
holds: the line's window is short (less than a factor 2 in time or 20 samples); no medium explains the heating
(a boundary, moisture moving); axial loss would bend the line before T (heater length and the largest admissible
α); no baseline (drift unknown); or no recovery window would be left for the heat–cool cross-check.

It is judged on a fixed grid of ``GRID_PER_DECADE`` checkpoints per decade of time (at the first sample at or
after each grid time), from prefix sums kept only at those checkpoints: memory and time per run grow with the
number of decades, not of samples, and a sample-by-sample feed (live) and an array feed (offline) reach the same
verdict at the same sample.

The first "can stop" is latched (``first_at_s``). If the k a stop would report later moves from its value at the
verdict by more than the tolerance, the verdict is withdrawn (shown until the rule says "can stop" again).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
from scipy.special import exp1

from . import window as win
from .cooling import RECOVERY_END_FACTOR, choose_recovery_window
from .linesource import RHO_C_FLOOR, RHO_C_LIMITS, TREND_TOL, TREND_Z
from .probe_model import long_time_response, response_stehfest
from .stats import ar1_inflation

DEFAULT_TOLERANCE = 0.02
GRID_PER_DECADE = 32
WATCH_EVERY = 4             # once a verdict stands, every 4th checkpoint is judged (for a withdrawal)
CHECK_BACK = 0.5            # predictions since half the elapsed time are held to what happened (no source)
FLOOR = 0.1                 # window [0.1·t, t]: the offline line's floor (linesource.FLOOR_FRACTION)
MIN_POINTS = 20             # the offline line's "short" (linesource.MIN_POINTS)
SHORT_SPAN_LN = math.log(2.0)
COVERAGE = 2.0              # k = 2 on the random part of the change (≈ 95 %)
RHO_C_RANGE = np.geomspace(*RHO_C_LIMITS, 7)  # the media weighed (``linesource.RHO_C_LIMITS``, with sources)
START_TOL = 0.01            # the reduction's window: slope error at its start (linesource.START_TOL) …
END_FLOOR = 0.3             # … the axial limit never before 0.3·t (linesource.END_FLOOR) …
HALF_DECADE_LN = 0.5        # … and at least half a decade kept (linesource.choose_window)
SHAPE_BINS = 16             # the media are judged on at most this many bins
ADMIT_CHI2 = 4.0            # a ρc is admissible when its fit's SSE is within 2² noise variances of the best (≈ 95 %)
SHAPE_FROM = 0.03           # the media are judged on the heating since 0.03·t (earlier: the probe's own details)
MISFIT = 0.01               # model imperfection allowed: 1 % of the rise per ln-unit, as extra noise (no source)
AXIAL_TOL = 0.01            # the offline window's axial-loss end criterion (linesource.END_TOL)
H_MAX = 5.0
LATE_TAU = 200.0            # past this dimensionless time the probe's response is taken from its expansion
_NODES = 24
_U0 = 5.0                   # u is summed as u − 5 (≈ ln 150 s): smaller powers, better-conditioned moments

# prefix-sum columns: per sample, then lag-1 products (pair of a sample with the one before it)
_N, _U, _Y, _UU, _UY, _YY, _T, _W, _WU, _PYY, _PYU, _PUY, _PUU, _PU, _PY = range(15)
_COLS = 15


@dataclass(frozen=True)
class ProbeFacts:
    """What the rule knows about the probe and the sensor that drives it (SI; None: unknown)."""

    radius_m: float | None = None            # sensor radius: the probe radius for a sensor on the heater
    probe_C_J_per_m3K: float | None = None   # probe heat capacity (only for a sensor on the heater)
    length_m: float | None = None            # heated length
    axial_m: float | None = None             # sensor distance from the heater's tip (None: mid-length)
    sample_radius_m: float | None = None     # a finite sample around the probe (None: unbounded ground)

    @classmethod
    def of(cls, probe: Any, sensor: str) -> ProbeFacts:
        """From a ``ProbeProfile`` (or None) and the sensor name, as the live reducer and the reduction read it."""
        if probe is None:
            return cls()
        on_heater = not probe.has_sensor(sensor) or probe.sensor(sensor).is_on_heater
        r = probe.sensor_radius_m(sensor) if probe.has_sensor(sensor) else probe.radius_m
        axial = None
        if probe.has_sensor(sensor) and probe.sensor(sensor).axial_mm is not None:
            axial = probe.sensor(sensor).axial_mm * 1e-3
        cap = probe.heat_capacity_J_per_m3K if on_heater else None
        return cls(r, cap or None, probe.length_m, axial, probe.sample_radius_m)


@dataclass(frozen=True)
class StopSettings:
    """The operator's side of the verdict: the tolerance on k and the heating planned (None: the record's own)."""

    tolerance: float = DEFAULT_TOLERANCE
    planned_heat_s: float | None = None

    def __post_init__(self) -> None:
        if not (0 < self.tolerance < 1):
            raise ValueError(f"stop tolerance must be a fraction between 0 and 1 (0.02 = 2 %), got {self.tolerance}")
        if self.planned_heat_s is not None and not self.planned_heat_s > 0:
            raise ValueError(f"planned heating must be > 0 s, got {self.planned_heat_s}")


@dataclass(frozen=True)
class Judgement:
    """The rule at one checkpoint. ``bound_rel`` is the predicted 95 % bound on |Δk|/k from stopping now."""

    t_s: float
    can_stop: bool
    k_W_per_mK: float
    bound_rel: float
    terms: dict[str, float]
    reason: str
    recover_s: float | None = None            # stop plan: recovery to log after stopping now
    recovery_window_s: tuple[float, float] | None = None


@dataclass(frozen=True)
class Verdict:
    """What the operator is told (``to_dict`` for events and JSON; relative values as fractions)."""

    tolerance: float
    planned_heat_s: float
    judged_at_s: float | None = None
    can_stop: bool = False
    bound_rel: float | None = None
    terms: dict[str, float] = field(default_factory=dict)
    reason: str = "not judged yet"
    first_at_s: float | None = None
    at_s: float | None = None                 # the verdict that stands (or was withdrawn)
    k_at_W_per_mK: float | None = None
    moved_rel: float | None = None            # the rule's k now against k at the verdict
    withdrawn: bool = False
    recover_s: float | None = None
    recovery_window_s: tuple[float, float] | None = None
    power_W: float | None = None              # planned heater power (per metre × heated length), for the energy

    @property
    def stands(self) -> bool:
        """A verdict was given and has not been withdrawn."""
        return self.at_s is not None and not self.withdrawn

    def saved_s(self) -> float | None:
        """Heating time a stop at the verdict saves against the plan."""
        return None if self.at_s is None else max(self.planned_heat_s - self.at_s, 0.0)

    def saved_Wh(self) -> float | None:
        """Heater energy a stop at the verdict saves, at the planned power."""
        s = self.saved_s()
        return None if s is None or self.power_W is None else self.power_W * s / 3600.0

    def to_dict(self) -> dict[str, Any]:
        def clean(v: float | None) -> float | None:
            return None if v is None or not math.isfinite(v) else float(v)
        return {"tolerance": self.tolerance, "planned_heat_s": self.planned_heat_s,
                "judged_at_s": self.judged_at_s, "can_stop": self.can_stop, "bound_rel": clean(self.bound_rel),
                "terms": {k: clean(v) for k, v in self.terms.items()}, "reason": self.reason,
                "first_at_s": self.first_at_s, "at_s": self.at_s, "k_at_W_per_mK": clean(self.k_at_W_per_mK),
                "moved_rel": clean(self.moved_rel), "withdrawn": self.withdrawn, "saved_s": self.saved_s(),
                "saved_Wh": clean(self.saved_Wh()), "power_W": clean(self.power_W), "recover_s": self.recover_s,
                "recovery_window_s": list(self.recovery_window_s) if self.recovery_window_s else None}


def recovery_after_stop_s(heated_s: float, planned_heat_s: float, planned_recover_s: float) -> float:
    """How long to log the cooling after heating stopped at ``heated_s`` (the stop plan).

    The recovery window of the reduction ends at 3·t_h (``cooling.RECOVERY_END_FACTOR``), so 2·t_h after the
    switch-off gives the heat–cool cross-check all it can use; a plan that asked for relatively more cooling
    keeps its ratio of cooling to heating.
    """
    if heated_s >= planned_heat_s:
        return planned_recover_s
    return max((RECOVERY_END_FACTOR - 1.0) * heated_s, planned_recover_s * heated_s / planned_heat_s)


# --- the physics the prediction uses ------------------------------------------------------------------------------
def _deviation(t: np.ndarray, k: np.ndarray, rho_c: np.ndarray, h: np.ndarray, probe: ProbeFacts) -> np.ndarray:
    """E(t) for a unit step: 4πk·ΔT/q = ln t + ln(α/r²) + E (probe) or ln t + ln(4α/r²) + E (ideal line at r).

    E carries the probe's transient, its late constant (ln 4 − γ + 2h) and the axial loss −∫(1 − F) d ln t,
    the integral started at the first time given (only its shape within one window matters there). k, ρc and h
    are columns (one medium a row), t one row or one row per medium: the result has a row per medium.
    """
    alpha = np.asarray(k, dtype=float) / rho_c
    r = probe.radius_m
    assert r is not None
    t = np.broadcast_to(t, np.broadcast_shapes(np.shape(t), np.shape(alpha)))
    if probe.probe_C_J_per_m3K:
        tau = alpha * t / (r * r)
        aj = np.broadcast_to(2.0 * np.asarray(rho_c, dtype=float) / probe.probe_C_J_per_m3K, tau.shape)
        hh = np.broadcast_to(np.asarray(h, dtype=float), tau.shape)
        # late on, the two-term long-time expansion (error ~ (ln τ)²/τ², under 1e-3 past τ = 200) spares the
        # Laplace inversion; each τ meets its own medium's α_J and h (one more axis for the Stehfest terms)
        e = long_time_response(np.maximum(tau, LATE_TAU), aj, hh) - np.log(tau)
        early = tau < LATE_TAU
        if np.any(early):
            e[early] = (response_stehfest(tau[early], aj[early][:, None], hh[early][:, None])
                        - np.log(tau[early]))
    else:
        x = r * r / (4.0 * alpha * t)
        e = exp1(x) + np.log(x)
    if probe.length_m:
        loss = 1.0 - win.axial_slope_factor(t, probe.length_m, alpha, probe.axial_m)
        lt = np.log(t)
        steps = 0.5 * (loss[..., 1:] + loss[..., :-1]) * np.diff(lt, axis=-1)
        e = e - np.concatenate([np.zeros((*steps.shape[:-1], 1)), np.cumsum(steps, axis=-1)], axis=-1)
    return e


def _nodes(t0: float, t1: float) -> np.ndarray:
    return np.linspace(t0, t1, _NODES)


def _line_biases(windows: np.ndarray, media: list[_Medium], probe: ProbeFacts) -> np.ndarray:
    """Relative slope error of the straight line fitted to each medium's response over its own window
    (``windows`` a row [t0, t1] per medium; samples even in t)."""
    t = windows[:, :1] + (windows[:, 1:] - windows[:, :1]) * np.linspace(0.0, 1.0, _NODES)[None, :]
    col = np.array([[m.k, m.rho_c, m.h] for m in media])
    e = _deviation(t, col[:, :1], col[:, 1:2], col[:, 2:], probe)
    du = np.log(t) - np.log(t).mean(axis=1, keepdims=True)
    de = e - e.mean(axis=1, keepdims=True)
    return (du * de).sum(axis=1) / (du * du).sum(axis=1)


def _window_stats(t: np.ndarray) -> tuple[float, float, float]:
    """Mean of ln t, its variance and cov(t, ln t)/var(ln t) for samples even in t over the nodes' span."""
    u = np.log(t)
    du = u - u.mean()
    var = float(du @ du) / t.size
    return float(u.mean()), var, float(du @ (t - t.mean())) / t.size / var


@dataclass(frozen=True)
class _Bins:
    """The heating as the checkpoints cut it: per bin the count and sums (rows of prefix-sum differences)."""

    S: np.ndarray                 # (bins, columns)

    @property
    def total(self) -> np.ndarray:
        return self.S.sum(axis=0)

    @property
    def n(self) -> np.ndarray:
        return self.S[:, _N]

    def means(self, col: int) -> np.ndarray:
        return self.S[:, col] / self.S[:, _N]

    def within(self, c1: int, c2: int, c12: int) -> float:
        """Sum over bins of the centred cross-moment of columns c1, c2 (c12 their product's column)."""
        return float(np.sum(self.S[:, c12] - self.S[:, c1] * self.S[:, c2] / self.S[:, _N]))

    def since(self, t0: float, t1: float = math.inf) -> np.ndarray:
        """Sums over the bins whose mean time is from t0 to t1 (lag products of the first one dropped)."""
        tm = self.means(_T)
        i = min(int(np.searchsorted(tm, t0, side="left")), self.S.shape[0] - 1)
        j = max(int(np.searchsorted(tm, t1, side="right")), i + 1)
        S = self.S[i:j].sum(axis=0)
        S[_PYY:] -= self.S[i, _PYY:]
        return S

    def coarse(self, most: int) -> _Bins:
        """Adjacent bins merged in pairs until there are at most ``most`` (the first bin kept alone)."""
        S = self.S
        while S.shape[0] > most:
            body = S[1:]
            odd = body.shape[0] % 2
            pairs = body[:body.shape[0] - odd].reshape(-1, 2, _COLS).sum(axis=1)
            S = np.vstack([S[:1], pairs] + ([body[-1:]] if odd else []))
        return _Bins(S)


@dataclass(frozen=True)
class _Line:
    a: float
    b: float
    sse: float
    infl: float
    sxx: float


def _line(S: np.ndarray) -> _Line | None:
    n = S[_N]
    if n < 6:
        return None
    Su, Sy = S[_U], S[_Y]
    sxx = S[_UU] - Su * Su / n
    if not sxx > 0:
        return None
    a = (S[_UY] - Su * Sy / n) / sxx
    b = (Sy - a * Su) / n
    sse = max(S[_YY] - 2 * a * S[_UY] - 2 * b * Sy + a * a * S[_UU] + 2 * a * b * Su + b * b * n, 0.0)
    lag = (S[_PYY] - a * (S[_PYU] + S[_PUY]) - b * S[_PY] + a * a * S[_PUU] + a * b * S[_PU] + b * b * (n - 1))
    return _Line(a, b, sse, ar1_inflation(lag / sse if sse > 0 else 0.0), sxx)


@dataclass(frozen=True)
class _Medium:
    """One medium the data may come from: its heat capacity, the contact and k the fit gives, and the fit's SSE."""

    rho_c: float
    h: float
    k: float
    sse: float

    @property
    def alpha(self) -> float:
        return self.k / self.rho_c


def _shape_fits(bins: _Bins, rho_c: np.ndarray, k0: float, probe: ProbeFacts,
                h0: np.ndarray | None = None) -> list[_Medium]:
    """For each ρc: y = a·(u + E(t; ρc, h)) + c over the bins, the within-bin scatter kept; h from the intercept.

    A probe-model fit with ρc given: the slope gives k, and h is moved until the intercept is the one the
    model predicts, c = a·ln(α/r²) (a few fixed-point steps; each 1 of h lifts the late response by 2).
    All ρc at once (one row each); ``h0``, the contacts found at the checkpoint before, saves steps.
    """
    r = probe.radius_m
    assert r is not None
    n = bins.n
    N = float(n.sum())
    ub, yb, tb = bins.means(_U) + _U0, bins.means(_Y), bins.means(_T)
    w_uu, w_uy, w_yy = bins.within(_U, _U, _UU), bins.within(_U, _Y, _UY), bins.within(_Y, _Y, _YY)
    rc = np.asarray(rho_c, dtype=float)[:, None]
    k = np.full_like(rc, k0)
    h = np.zeros_like(rc) if h0 is None else np.asarray(h0, dtype=float).reshape(rc.shape)
    sse = np.full(rc.shape[0], np.inf)
    steps = 1 if not probe.probe_C_J_per_m3K else (2 if h0 is not None else 3)
    for _ in range(steps):
        x = ub + _deviation(tb, k, rc, h, probe)
        sx, sy = x @ n, float(n @ yb)
        sxx, sxy = (x * x) @ n + w_uu, (x * yb) @ n + w_uy
        det = sxx * N - sx * sx
        a = (sxy * N - sx * sy) / det
        c = (sxx * sy - sx * sxy) / det
        sse = w_yy - 2 * a * w_uy + a * a * w_uu + ((yb - a[:, None] * x - c[:, None]) ** 2) @ n
        good = a > 0
        k = np.where(good, 1.0 / (4.0 * math.pi * np.where(good, a, 1.0)), k[:, 0])[:, None]
        if probe.probe_C_J_per_m3K:
            offset = np.log(k[:, 0] / rc[:, 0] / (r * r))  # the model's intercept, c = a·ln(α/r²)
            h = np.clip(h[:, 0] + 0.5 * (c / np.where(good, a, 1.0) - offset), 0.0, H_MAX)[:, None]
        sse = np.where(good, np.maximum(sse, 0.0), np.inf)
    return [_Medium(float(rc[i, 0]), float(h[i, 0]), float(k[i, 0]), float(sse[i])) for i in range(rc.shape[0])]


def _admissible(fits: list[_Medium], limit: float) -> tuple[_Medium, list[_Medium]]:
    """The best medium and the admissible ones (SSE within ``limit`` of the least).

    The SSE against ln ρc is read as a parabola through the three grid points nearest to where it is needed
    (its least, and each crossing of the limit); k and h are interpolated linearly in ln ρc. Grid points inside
    the interval are kept as well.
    """
    ok = [m for m in fits if math.isfinite(m.sse)]
    if len(ok) < 3:
        best = min(ok or fits, key=lambda m: m.sse)
        return best, [best]
    x = np.log([m.rho_c for m in ok])
    sse = np.array([m.sse for m in ok])
    ks, hs = np.array([m.k for m in ok]), np.array([m.h for m in ok])

    def parabola(j: int) -> tuple[float, float, float]:
        """SSE ≈ c2·x² + c1·x + c0 through the grid points j − 1, j, j + 1 (Newton's divided differences)."""
        j = min(max(j, 1), len(ok) - 2)
        (x0, x1, x2), (y0, y1, y2) = x[j - 1:j + 2], sse[j - 1:j + 2]
        d01, d12 = (y1 - y0) / (x1 - x0), (y2 - y1) / (x2 - x1)
        c2 = (d12 - d01) / (x2 - x0)
        c1 = d01 - c2 * (x0 + x1)
        return c2, c1, y0 - c1 * x0 - c2 * x0 * x0

    def crossing(c: tuple[float, float, float], level: float, lo_x: float, hi_x: float) -> float | None:
        """Where the parabola meets ``level`` within [lo_x, hi_x], if it does."""
        c2, c1, c0 = c
        if abs(c2) < 1e-300:
            return None if c1 == 0 else (level - c0) / c1
        disc = c1 * c1 - 4 * c2 * (c0 - level)
        if disc < 0:
            return None
        for r in ((-c1 - math.sqrt(disc)) / (2 * c2), (-c1 + math.sqrt(disc)) / (2 * c2)):
            if lo_x - 1e-9 <= r <= hi_x + 1e-9:
                return r
        return None

    def at(xv: float, sse_v: float) -> _Medium:
        return _Medium(math.exp(xv), float(np.interp(xv, x, hs)), float(np.interp(xv, x, ks)), sse_v)

    i = int(np.argmin(sse))
    xb, sb = float(x[i]), float(sse[i])
    c = parabola(i)
    if c[0] > 0:
        xv = min(max(-c[1] / (2 * c[0]), x[max(i - 1, 0)]), x[min(i + 1, len(ok) - 1)])
        xb, sb = xv, min(c[0] * xv * xv + c[1] * xv + c[2], sb)
    thr = sb + limit
    lo, hi = float(x[0]), float(x[-1])
    for j in range(len(ok) - 1):  # the interval's ends, where the SSE crosses the limit
        if min(sse[j], sse[j + 1]) <= thr < max(sse[j], sse[j + 1]):
            xv = crossing(parabola(j if sse[j] < sse[j + 1] else j + 1), thr, x[j], x[j + 1])
            if xv is None:
                xv = x[j] + (thr - sse[j]) / (sse[j + 1] - sse[j]) * (x[j + 1] - x[j])
            if sse[j] > thr:
                lo = max(lo, xv) if xv <= xb else lo
            else:
                hi = min(hi, xv) if xv >= xb else hi
    media = [at(xb, sb), at(lo, thr), at(hi, thr)] + [m for m, xv in zip(ok, x, strict=True) if lo < xv < hi]
    return media[0], media


def _reported_window(m: _Medium, horizon: float, probe: ProbeFacts) -> tuple[float, float, bool]:
    """The reduction's late-time window for a heating of ``horizon`` in medium m, and whether it is short.

    As ``linesource.choose_window``: end at the heating's end or where axial loss takes 1 % (never before
    0.3·t), start at the later of 0.1·end and where the probe's slope error falls under 1 %, half a decade
    kept. A window under a factor 2 is short: the reduction then reports the probe model.
    """
    r = probe.radius_m
    assert r is not None
    end = horizon
    if probe.length_m:
        end = min(horizon, max(win.axial_end_s(probe.length_m, m.alpha, AXIAL_TOL, probe.axial_m),
                               END_FLOOR * horizon))
    aj = 2.0 * m.rho_c / probe.probe_C_J_per_m3K if probe.probe_C_J_per_m3K else None
    start = max(FLOOR * end, win.start_s(r, m.alpha, aj, m.h, START_TOL))
    if math.log(end / start) < HALF_DECADE_LN:
        start = end / math.exp(HALF_DECADE_LN)
    return start, end, math.log(end / start) < SHORT_SPAN_LN


def _change(best: _Medium, media: list[_Medium], bins: _Bins, k_line: float, t: float, T: float,
            probe: ProbeFacts) -> tuple[float, float]:
    """The k a stop now reports (in the best medium) and the largest change to what the full heating would
    report, over the admissible media, noise aside.

    In each medium the reduction reports the late-time line over its window, or the probe model where that window
    is short (a window short at T is short now too). The model's k is the data's best fit now; at T the model is
    refitted on the longer record, so its k stays within the range the admissible media span now, narrowed by
    √(1 − t/T) (nested fits: the variance that more data removes). The line now is read off the data; the line at
    T is the line now times the change of its slope error from the window now to the window at T (the medium's
    shape, anchored on the data), or, where the line is not reported now, the medium's k with the slope error of
    its window at T.
    """
    now = [_reported_window(m, t, probe) for m in media]
    at_T = [_reported_window(m, T, probe) for m in media]
    lines_now = []
    for s0, e0, short in now:
        fit = None if short else _line(bins.since(s0, e0))
        lines_now.append(1.0 / (4.0 * math.pi * fit.a) if fit is not None and fit.a > 0 else k_line)
    reported_now = [best.k if short else k for (_, _, short), k in zip(now, lines_now, strict=True)]
    spread = float(np.max(np.abs(np.array([m.k for m in media]) / best.k - 1.0))) * math.sqrt(max(1.0 - t / T, 0.0))
    line_T = [i for i, w in enumerate(at_T) if not w[2]]
    b_T = _line_biases(np.array([at_T[i][:2] for i in line_T]), [media[i] for i in line_T], probe) if line_T else []
    anchored = [i for i in line_T if not now[i][2]]
    b_now = (_line_biases(np.array([now[i][:2] for i in anchored]), [media[i] for i in anchored], probe)
             if anchored else [])
    b_T_of, b_now_of = dict(zip(line_T, b_T, strict=True)), dict(zip(anchored, b_now, strict=True))
    worst = 0.0
    for i, m in enumerate(media):
        S = reported_now[i]
        if at_T[i][2]:
            full = [best.k * (1.0 - spread), best.k * (1.0 + spread)]
        elif i in b_now_of:
            full = [S * (1.0 + b_now_of[i]) / (1.0 + b_T_of[i])]
        else:
            full = [m.k / (1.0 + b_T_of[i])]
        worst = max(worst, max(abs(S / f - 1.0) for f in full))
    best_now = media.index(best) if best in media else 0
    return reported_now[best_now], worst


def _trend(bins: _Bins, t0: float, t1: float, noise_var: float, infl: float) -> tuple[float, float]:
    """The reduction's straightness test (``stats.quadratic_curvature``: how far the local slope drifts across
    the window, relative, and its z) over the window [t0, t1], read from the bins: a quadratic in u through the
    bin means weighted by their counts, with the rule's noise variance and AR(1) inflation."""
    tm = bins.means(_T)
    i, j = int(np.searchsorted(tm, t0, side="left")), int(np.searchsorted(tm, t1, side="right"))
    n, ub, yb = bins.n[i:j], bins.means(_U)[i:j], bins.means(_Y)[i:j]
    if n.size < 4:
        return 0.0, 0.0
    um = float(n @ ub) / float(n.sum())
    scale = float(np.max(np.abs(ub - um))) or 1.0
    xs = (ub - um) / scale
    A = np.stack([np.ones_like(xs), xs, xs * xs], axis=1)
    try:
        inv = np.linalg.inv(A.T @ (A * n[:, None]))
    except np.linalg.LinAlgError:
        return 0.0, 0.0
    _, c1, c2 = inv @ (A.T @ (n * yb))
    if c1 == 0:
        return math.inf, math.inf
    rel = 2.0 * c2 * float(xs.max() - xs.min()) / c1
    var_c2 = inv[2, 2] * noise_var * infl
    return float(rel), abs(float(c2)) / math.sqrt(var_c2) if var_c2 > 0 else math.inf


@dataclass
class _Context:
    probe: ProbeFacts
    settings: StopSettings
    planned_s: float
    drift_u_K_per_s: float | None     # None: no baseline
    q_W_per_m: float
    k_scale: float = 1.0              # calibration factor applied to the k the verdict quotes
    noise_infl: float = 1.0           # variance inflation for correlated noise, from the baseline's residuals
    noise: tuple[float, float] = (0.0, 0.0)  # the baseline's residual variance (K²) and its degrees of freedom
    wander_infl: float = 1.0          # a slow wander's long-run factor (``stats.wander_inflation``): the slope only


def judge(all_bins: _Bins, first: int, t0: float, t1: float, ctx: _Context, h0: np.ndarray | None = None,
          want_plan: bool = True) -> tuple[Judgement, np.ndarray | None]:
    """The rule at one checkpoint: pure, no state. ``all_bins`` cover the heating since ``SHAPE_FROM``·t (the
    media are judged on them); from bin ``first`` on they are the window [t0 ≈ 0.1·t, t1 = t]. ``h0``: the
    contacts of the checkpoint before (a warm start); ``want_plan``: work out the stop plan's recovery window
    (only needed while no verdict stands). Returns the judgement and the contacts found."""
    t, T, tol = t1, ctx.planned_s, ctx.settings.tolerance
    bins = _Bins(all_bins.S[first:].copy())
    bins.S[0, _PYY:] = 0.0
    S = bins.total
    line = _line(S)
    if line is None or line.a <= 0:
        return Judgement(t, False, math.nan, math.inf, {}, "no rise yet"), h0
    k_line = 1.0 / (4.0 * math.pi * line.a)

    def no(reason: str, terms: dict[str, float] | None = None, bound: float = math.inf,
           k: float = k_line) -> Judgement:
        return Judgement(t, False, k * ctx.k_scale, bound, terms or {}, reason)

    def no_h(*args: Any) -> tuple[Judgement, np.ndarray | None]:
        return no(*args), h0

    n = float(S[_N])
    if n < MIN_POINTS or math.log(t1 / t0) < SHORT_SPAN_LN:
        return no_h("too few samples yet for a window of a factor 2 in time")
    if ctx.probe.radius_m is None:
        return no_h("the probe's radius is unknown: its transient cannot be predicted")
    if ctx.drift_u_K_per_s is None:
        return no_h("no baseline before heating: the ground's drift is unknown")

    # --- statistical and drift parts of the change (samples even in time, rate from the data) ---------------
    nodes_t, nodes_T = _nodes(t0, t), _nodes(FLOOR * T, T)
    rate = n / max(t - t0, 1e-12)
    um_t, var_t, tilt_t = _window_stats(nodes_t)
    um_T, var_T, tilt_T = _window_stats(nodes_T)
    sxx_t, sxx_T = rate * (t - t0) * var_t, rate * T * (1 - FLOOR) * var_T
    lo, hi = max(t0, FLOOR * T), t
    cross = 0.0
    if hi > lo:
        ov = np.log(_nodes(lo, hi))
        cross = rate * (hi - lo) * float(np.mean((ov - um_t) * (ov - um_T))) / (sxx_t * sxx_T)

    # --- the noise: the scatter inside the bins of two or more samples about a common slope (free of the
    # transient), pooled with the baseline's; its correlation is the baseline's (the line's own residuals are
    # correlated by the transient it misses)
    n_all = float(all_bins.n.sum())
    multi = _Bins(all_bins.S[all_bins.n >= 2])
    w_uu = multi.within(_U, _U, _UU)
    w_resid = multi.within(_Y, _Y, _YY) - (multi.within(_U, _Y, _UY) ** 2 / w_uu if w_uu > 0 else 0.0)
    base_var, base_dof = ctx.noise[0] / ctx.q_W_per_m**2, ctx.noise[1]
    dof = max(float(multi.n.sum()) - multi.S.shape[0] - 1, 0.0) + base_dof
    if dof < MIN_POINTS:
        return no_h("too few samples yet to tell the noise")
    infl = ctx.noise_infl
    var_eff = (w_resid + base_var * base_dof) / dof * infl + (MISFIT * line.a) ** 2
    # the slopes now and at T scatter with the wander too (the shapes above are judged on the lag-1 noise: a
    # wander is smooth, it bends no line into a transient's shape)
    var_slope = var_eff + max(ctx.wander_infl / infl - 1.0, 0.0) * (var_eff - (MISFIT * line.a) ** 2)
    stat = math.sqrt(max(var_slope * (1.0 / sxx_t + 1.0 / sxx_T - 2.0 * cross), 0.0)) / line.a
    drift = ctx.drift_u_K_per_s * abs(tilt_T - tilt_t) / max(ctx.q_W_per_m, 1e-12) / line.a if t < T else 0.0
    noise = COVERAGE * math.hypot(stat, drift)
    if noise > tol:  # noise and drift alone rule it out: the media are not worth judging yet
        return no_h(f"k could still move by up to {100 * noise:.1f} % from noise and drift alone "
                  f"(tolerance {100 * tol:g} %)", {"statistical": stat, "drift": drift}, noise)

    # --- the media the heating so far allows -----------------------------------------------------------------
    fits = _shape_fits(all_bins.coarse(SHAPE_BINS), RHO_C_RANGE, k_line, ctx.probe, h0)
    h_found = np.array([m.h for m in fits])
    best, media = _admissible(fits, ADMIT_CHI2 * var_eff)
    # explained: what the best medium leaves beyond the noise is within the model's own imperfection, or is
    # not told from the noise at all
    noise_var = var_eff - (MISFIT * line.a) ** 2
    misfit2 = best.sse / max(n_all - 3, 1) - noise_var
    explained = misfit2 <= (MISFIT * line.a) ** 2 or misfit2 <= 3.0 * noise_var * math.sqrt(2.0 * infl / n_all)

    # --- what a stop now reports, against what the full heating would, medium by medium ----------------------
    k_now, model = _change(best, media, all_bins, k_line, t, T, ctx.probe)
    model = model if t < T else 0.0
    alpha_hi = max(m.alpha for m in media)
    terms = {"model": model, "statistical": stat, "drift": drift}
    bound = model + noise

    def refuse(reason: str) -> Judgement:
        return no_h(reason, terms, bound, k_now)

    # a plan past the sample's face first: it is why the line bends, and the operator's remedy
    if ctx.probe.sample_radius_m:
        t_wall = win.wall_end_s(ctx.probe.sample_radius_m, k_line / RHO_C_FLOOR, AXIAL_TOL, ctx.probe.radius_m)
        if t_wall < T:
            return refuse(f"the sample's outer face (R = {1e3 * ctx.probe.sample_radius_m:.3g} mm) would bend the "
                          f"line from about {t_wall:.0f} s, before the planned end at {T:.0f} s (plan at most "
                          f"{t_wall:.0f} s of heating in this sample, or use a wider one)")
    if not explained:
        return refuse("the line bends in a way the probe's transient does not explain (a boundary, moisture "
                      "moving, drift?)")
    # the line a stop now reports must be one the reduction keeps whole: a window it would trim for a residual
    # trend (``linesource.choose_window``) reports the k of a shorter stretch, which no term above predicts
    s0, e0, short_now = _reported_window(best, t, ctx.probe)
    if not short_now:
        rel, z = _trend(all_bins, s0, e0, noise_var, infl)
        if abs(rel) > TREND_TOL and z > TREND_Z:
            return refuse(f"the line a stop now would report still curves (its slope drifts {100 * rel:+.1f} % "
                          "across its window): the reduction would shorten it")
    if ctx.probe.length_m:
        t_ax = win.axial_end_s(ctx.probe.length_m, alpha_hi, AXIAL_TOL, ctx.probe.axial_m)
        if t_ax < T:
            return refuse(f"axial loss would bend the line from about {t_ax:.0f} s, before the planned end at "
                          f"{T:.0f} s (plan at most {t_ax:.0f} s of heating with this probe)")
    if bound > tol:
        return refuse(f"k could still move by up to {100 * bound:.1f} % (tolerance {100 * tol:g} %)")
    if t >= T:
        return refuse("the planned heating is over")
    plan = _recovery_plan(t, media, ctx, rate) if want_plan else None
    if want_plan and plan is None:
        return refuse("stopping now would leave no recovery window for the heat–cool cross-check")
    return Judgement(t, True, k_now * ctx.k_scale, bound, terms, f"k will not move by more than "
                     f"{100 * bound:.1f} % (tolerance {100 * tol:g} %)", recover_s=(RECOVERY_END_FACTOR - 1.0) * t,
                     recovery_window_s=plan), h_found


def _recovery_plan(t_h: float, media: list[_Medium], ctx: _Context, rate: float) -> tuple[float, float] | None:
    """The recovery window the reduction would use after stopping at t_h, for every admissible medium; the one
    that starts latest and ends earliest (None when one of them leaves none)."""
    p = ctx.probe
    assert p.radius_m is not None
    n = int(min(max((RECOVERY_END_FACTOR - 1.0) * t_h * rate, 8), 2000))
    t_rec = t_h + (RECOVERY_END_FACTOR - 1.0) * t_h * np.arange(1, n + 1) / n
    start, end = 0.0, math.inf
    for m in media:
        aj = 2.0 * m.rho_c / p.probe_C_J_per_m3K if p.probe_C_J_per_m3K else None
        model = win.StepModel(m.k / m.rho_c, p.radius_m, aj, m.h, p.length_m, p.axial_m)
        level, _ = win.recovery_errors(t_rec, np.array([0.0, t_h]), np.array([1.0, -1.0]), model)
        try:
            cw = choose_recovery_window(t_rec, level, t_h, FLOOR * t_h)
        except ValueError:
            return None
        start, end = max(start, cw.t_start), min(end, cw.t_end)
    return (start, end) if end > start else None


# --- the streaming part: prefix sums at checkpoints -----------------------------------------------------------
def _columns(t: np.ndarray, u: np.ndarray, y: np.ndarray, w: np.ndarray, prev: tuple[float, float] | None
             ) -> list[np.ndarray]:
    """Per-sample columns, one array each (see the column list); ``prev`` is the (u, y) of the sample before."""
    u = u - _U0
    up = np.empty_like(u)
    yp = np.empty_like(y)
    up[1:], yp[1:] = u[:-1], y[:-1]
    lag = np.ones_like(u)
    if prev is None:
        up[0] = yp[0] = lag[0] = 0.0
    else:
        up[0], yp[0] = prev[0] - _U0, prev[1]
    return [np.ones_like(u), u, y, u * u, u * y, y * y, t, w, w * u, yp * y * lag, yp * u * lag, up * y * lag,
            up * u * lag, (up + u) * lag, (yp + y) * lag]


def _next_grid(t: float) -> float:
    """The grid time after the one ``t`` reached: 10^(j/GRID_PER_DECADE)."""
    return 10.0 ** ((math.floor(math.log10(t) * GRID_PER_DECADE + 1e-9) + 1) / GRID_PER_DECADE)


class StopRule:
    """Feed heating samples (t > 0, in order) as arrays of any length; read ``verdict``.

    u = X/Q and y = ΔT/Q are the superposition regressors (``live``), w = t/Q. The rule keeps the prefix sums at
    its checkpoints only, so a long record costs one pass and a few hundred judgements.
    """

    def __init__(self, probe: ProbeFacts, settings: StopSettings, drift_u_K_per_s: float | None,
                 q_W_per_m: float, planned_heat_s: float, calibration_factor: float = 1.0,
                 noise_infl: float = 1.0, noise: tuple[float, float] = (0.0, 0.0),
                 defer: Callable[[Callable[[], None]], None] | None = None, wander_infl: float = 1.0) -> None:
        """``noise``: the baseline's residual variance (K²) and degrees of freedom; ``noise_infl`` its AR(1)
        variance inflation, ``wander_infl`` a slow wander's long-run one (the slopes' scatter). ``defer``: runs
        each checkpoint's judgement later, in order (the daemon hands them to a worker thread so the loop never
        waits); the verdict is then the same, only known a little later."""
        self._defer = defer
        self.ctx = _Context(probe, settings, planned_heat_s, drift_u_K_per_s, q_W_per_m, calibration_factor,
                            noise_infl, noise, wander_infl)
        self._total = np.zeros(_COLS)
        self._prev: tuple[float, float] | None = None
        self._cp_t: list[float] = []            # checkpoint sample times
        self._cp_before: list[np.ndarray] = []  # prefix sums before the checkpoint sample
        self._cp_incl: list[np.ndarray] = []    # … and including it
        self._next_grid = -math.inf
        self._h: np.ndarray | None = None     # contacts per ρc at the last checkpoint (a warm start)
        self._watch = 0                        # checkpoints since the verdict
        self._past: list[tuple[float, float, float]] = []  # (t, k, bound) of the latest judgements
        self.judgements: list[Judgement] = []
        power = q_W_per_m * probe.length_m if probe.length_m else None
        self.verdict = Verdict(settings.tolerance, planned_heat_s, power_W=power)

    @property
    def planned_heat_s(self) -> float:
        return self.ctx.planned_s

    def feed(self, t: np.ndarray, u: np.ndarray, y: np.ndarray, w: np.ndarray, chunk: int = 262_144) -> Verdict:
        """Take samples in time order (t > 0); judge at every checkpoint crossed."""
        t, u, y, w = (np.asarray(a, dtype=float) for a in (t, u, y, w))
        for s in range(0, t.size, chunk):
            self._feed_chunk(t[s:s + chunk], u[s:s + chunk], y[s:s + chunk], w[s:s + chunk])
        return self.verdict

    def feed_one(self, t: float, u: float, y: float, w: float) -> Verdict:
        """One sample (the live path): the same sums as ``feed`` to the last bit, without the array set-up."""
        uc = u - _U0
        if self._prev is None:
            up = yp = lag = 0.0
        else:
            up, yp, lag = self._prev[0] - _U0, self._prev[1], 1.0
        row = np.array((1.0, uc, y, uc * uc, uc * y, y * y, t, w, w * uc, yp * y * lag, yp * uc * lag,
                        up * y * lag, up * uc * lag, (up + uc) * lag, (yp + y) * lag))
        before = self._total
        self._total = before + row
        self._prev = (u, y)
        if t >= self._next_grid:
            self._checkpoint(t, before, self._total.copy())
        return self.verdict

    def _feed_chunk(self, t: np.ndarray, u: np.ndarray, y: np.ndarray, w: np.ndarray) -> None:
        if t.size == 0:
            return
        # the samples that are checkpoints: the first at or after each grid time
        marks: list[int] = []
        idx, grid = 0, self._next_grid
        while idx < t.size:
            j = idx + int(np.searchsorted(t[idx:], grid, side="left"))
            if j >= t.size:
                break
            marks.append(j)
            grid = _next_grid(float(t[j]))
            idx = j + 1
        # each column summed from the running total, one sample after another (a 1-D cumulative sum is
        # sequential): a sample-by-sample feed gives the same bits; only the sums at the marks are kept
        at = np.array(marks, dtype=int)
        incl = np.empty((at.size, _COLS))
        before = np.empty((at.size, _COLS))
        last = np.empty(_COLS)
        for c, col in enumerate(_columns(t, u, y, w, self._prev)):
            run = np.cumsum(np.concatenate(([self._total[c]], col)))
            incl[:, c] = run[at + 1]
            before[:, c] = run[at]
            last[c] = run[-1]
        for k, j in enumerate(marks):
            self._checkpoint(float(t[j]), before[k], incl[k])
        self._total = last
        self._prev = (float(u[-1]), float(y[-1]))

    def _checkpoint(self, t: float, before: np.ndarray, incl: np.ndarray) -> None:
        self._next_grid = _next_grid(t)
        self._cp_t.append(t)
        self._cp_before.append(before)
        self._cp_incl.append(incl)
        cp_t = np.asarray(self._cp_t)
        i = min(int(np.searchsorted(cp_t, FLOOR * t, side="left")), len(self._cp_t) - 1)
        i_all = min(int(np.searchsorted(cp_t, SHAPE_FROM * t, side="left")), i)
        # bins: the first sample alone, then each stretch up to the next checkpoint
        rows = [self._cp_incl[i_all] - self._cp_before[i_all]]
        rows += [self._cp_incl[m] - self._cp_incl[m - 1] for m in range(i_all + 1, len(self._cp_t))]
        S = np.array(rows)
        S[0, _PYY:] = 0.0  # its lag products pair it with a sample outside
        job = _Job(_Bins(S), i - i_all, self._cp_t[i], t)
        if self._defer is None:
            self._judge(job)
        else:
            self._defer(lambda: self._judge(job))

    def _judge(self, job: _Job) -> None:
        """One checkpoint's judgement, folded into the verdict (in checkpoint order, whoever runs it). Once a
        verdict stands only every ``WATCH_EVERY``-th checkpoint is judged: enough to see k move away."""
        if self.verdict.stands:
            self._watch += 1
            if self._watch % WATCH_EVERY:
                return
        else:
            self._watch = 0
        j, self._h = judge(job.bins, job.first, job.t0, job.t1, self.ctx, self._h, not self.verdict.stands)
        j = self._held_to_account(j)
        self.judgements.append(j)
        self.verdict = _update(self.verdict, j)


    def _held_to_account(self, j: Judgement) -> Judgement:
        """A prediction is checked against what has happened since: if k has already moved, since a checkpoint
        in the latest half of the heating, by more than was predicted there for the whole remaining heating,
        the media do not describe this record (a probe unlike the model, moisture moving) and it cannot stop."""
        if "model" not in j.terms or not math.isfinite(j.k_W_per_mK):
            return j
        recent = [(tp, kp, bp) for tp, kp, bp in self._past if tp >= CHECK_BACK * j.t_s]
        self._past = [*recent, (j.t_s, j.k_W_per_mK, j.bound_rel)]
        if not j.can_stop:
            return j
        for tp, kp, bp in recent:
            moved = j.k_W_per_mK / kp - 1.0
            if abs(moved) > bp:
                return replace(j, can_stop=False, recover_s=None, recovery_window_s=None,
                               reason=f"k has moved {100 * moved:+.1f} % since {tp:.0f} s, more than the "
                                      f"{100 * bp:.1f} % predicted there: the probe's model does not describe "
                                      "this heating well enough")
        return j


@dataclass(frozen=True)
class _Job:
    bins: _Bins
    first: int
    t0: float
    t1: float


def _update(v: Verdict, j: Judgement) -> Verdict:
    """Fold one judgement into the verdict: latch the first, withdraw when k has moved beyond the tolerance."""
    v = replace(v, judged_at_s=j.t_s, can_stop=j.can_stop, bound_rel=j.bound_rel, terms=dict(j.terms),
                reason=j.reason)
    if j.can_stop and not v.stands:
        return replace(v, first_at_s=v.first_at_s if v.first_at_s is not None else j.t_s, at_s=j.t_s,
                       k_at_W_per_mK=j.k_W_per_mK, moved_rel=0.0, withdrawn=False, recover_s=j.recover_s,
                       recovery_window_s=j.recovery_window_s)
    if v.at_s is not None and v.k_at_W_per_mK and math.isfinite(j.k_W_per_mK):
        moved = j.k_W_per_mK / v.k_at_W_per_mK - 1.0
        v = replace(v, moved_rel=moved)
        if abs(moved) > v.tolerance and not v.withdrawn:
            v = replace(v, withdrawn=True)
    return v
