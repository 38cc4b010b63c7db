"""Incremental late-time line-source reduction: one estimate per sample, at constant cost.

Each heating sample is turned into the superposition regressors (see ``superposition``): u = X/Q ("equivalent
ln t", exactly ln t at constant power) and y = ΔT/Q, so y = u/(4πk) + c whatever the power did. Prefix sums of
u, y, their products and lag-1 products let any window [start, now] be fitted in O(1): slope, intercept,
residual RMS, lag-1 autocorrelation of the residuals and a quadratic-curvature test. The window is chosen by
the same rule as offline (``window``); the "heating can stop" verdict by ``stop_rule``, fed the same regressors
(``record_verdict`` gives it for a whole record at once, with the same answer). Only the heating phase is handled
here.

Temperatures may be in K or °C: only differences are used.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np

from ..probe import ProbeProfile
from . import window as win
from .drift import Baseline, fit_baseline, no_baseline
from .linesource import ALPHA_MIN, RHO_C_FLOOR
from .stats import ar1_inflation, combine, lag1_autocorrelation, wander_inflation
from .stop_rule import ProbeFacts, StopRule, StopSettings, Verdict
from .superposition import log_time_regressor, power_steps

MIN_POINTS = 10
MIN_SPAN_LN = 0.25          # window must cover at least this much ln t before an estimate is published
SHORT_SPAN_LN = math.log(2.0)  # shorter than a factor 2 in time: window_short (common practice, no source)
# The window never starts before 0.1·t_end, as offline (common practice, no source): over a factor 10 in time the
# heating's ln t shape tells the drift from the slope, so the ± shrinks as heating goes on (METHODS.md, "Live").
FLOOR_FRACTION = 0.1
START_TOL = 0.02            # slope error allowed at the window start (probe criterion, see window.py)
END_TOL = 0.02              # slope error allowed at the window end (axial loss, see window.py)
# The intercept gives α·e^{2h}: contact resistance inflates it, and an inflated α would end the window early and
# feed back through the next intercept. For the axial end α is capped at the top of the range of soils and
# rocks (about 2 mm²/s; common practice, no source). The offline reduction uses the probe model instead.
ALPHA_AXIAL_MAX = 2e-6
# The start criterion needs the medium's ρc through α_J; taken from the intercept it would inherit the same
# inflation. A typical soil's 2 MJ/(m³·K) is assumed instead (de Vries 1963 lists 1.3–3.1 for sands and clays).
NOMINAL_RHO_C = 2.0e6
NOISE_HIGH_FRACTION = 0.05  # residual RMS above 5 % of the slope (K per ln-unit): noise_high (no source)
TREND_TOL = 0.02            # local slope drifts > 2 % over the window with z > 3: residual_trend (no source)
DEFAULT_POWER_U_REL = 0.005  # power readback standard uncertainty (relative), common practice, no source

# columns of the prefix-sum table (w = t/Q: the drift's regressor in y)
_N_COLS = 18
(_U, _Y, _UU, _UY, _YY, _U3, _U4, _U2Y, _PYY, _PYU, _PUY, _PUU, _PU, _PY, _W, _WU, _WW, _WY) = range(_N_COLS)


@dataclass(frozen=True)
class LiveEstimate:
    """The running estimate after one sample (SI values; ``to_dict`` for JSON)."""

    t_s: float
    k_W_per_mK: float
    k_u_W_per_mK: float
    k_u_stat_W_per_mK: float
    slope_K: float
    intercept_K: float
    window_s: tuple[float, float]
    stable: bool                 # the "heating can stop" verdict stands (given, not withdrawn)
    stable_at_s: float | None    # when it was first given
    residual_rms_K: float
    n_used: int
    flags: tuple[str, ...]
    alpha_m2_per_s: float | None
    q_mean_W_per_m: float
    rise_K: float
    rho1: float
    verdict: dict[str, Any] | None = None  # ``stop_rule.Verdict.to_dict``: why, when, the bound, the stop plan

    def to_dict(self) -> dict[str, object]:
        d = asdict(self)
        d["window_s"] = list(self.window_s)
        d["flags"] = list(self.flags)
        for key, v in d.items():
            if isinstance(v, float) and not math.isfinite(v):
                d[key] = None
        return d


class LiveReducer:
    """Feed samples with ``add``; get a ``LiveEstimate`` once a window can be fitted."""

    def __init__(self, probe: ProbeProfile | None = None, sensor: str = "heater", *,
                 stop: StopSettings | None = None, calibration_factor: float = 1.0,
                 calibration_factor_u: float = 0.0, power_u_rel: float = DEFAULT_POWER_U_REL,
                 max_rise_K: float | None = None, defer: Callable[[Callable[[], None]], None] | None = None) -> None:
        """``stop``: the verdict's tolerance and the planned heating (without one, the verdict is not judged);
        ``defer``: where the verdict's judgements run (``StopRule``; None: at once)."""
        self.defer = defer
        self.probe = probe
        self.sensor = sensor
        self.r_m: float | None = None
        self.alpha_J_factor: float | None = None  # α_J = factor·ρc_medium
        self.length_m: float | None = None
        self.axial_m: float | None = None
        self.sample_radius_m: float | None = None
        if probe is not None:
            self.sample_radius_m = probe.sample_radius_m
            self.r_m = probe.sensor_radius_m(sensor) if probe.has_sensor(sensor) else probe.radius_m
            on_heater = not probe.has_sensor(sensor) or probe.sensor(sensor).is_on_heater
            cap = probe.heat_capacity_J_per_m3K
            if on_heater and cap:
                self.alpha_J_factor = 2.0 / cap
            self.length_m = probe.length_m
            if probe.has_sensor(sensor) and probe.sensor(sensor).axial_mm is not None:
                self.axial_m = probe.sensor(sensor).axial_mm * 1e-3  # type: ignore[operator]
        self.calibration_factor = calibration_factor
        self.calibration_factor_u = calibration_factor_u
        self.power_u_rel = power_u_rel
        self.max_rise_K = max_rise_K
        self.stop_settings = stop
        self.rule: StopRule | None = None
        self._base_t: list[float] = []
        self._base_T: list[float] = []
        self.baseline: Baseline | None = None
        self._last_q = 0.0
        self._heating_seen = False
        self._k_raw: float | None = None
        self._step_t = np.zeros(64)
        self._step_dq = np.zeros(64)
        self._n_steps = 0
        self._cap = 1024
        self._t = np.zeros(self._cap)
        self._u = np.zeros(self._cap)
        self._y = np.zeros(self._cap)
        self._P = np.zeros((self._cap + 1, _N_COLS))
        self._n = 0
        self._alpha: float | None = None
        self._rise = 0.0
        self.last: LiveEstimate | None = None

    # --- feeding ------------------------------------------------------------------------------------------
    def add(self, t_s: float, temp_K: float, q_W_per_m: float) -> LiveEstimate | None:
        """One sample: s from heater on (< 0 = baseline), temperature, power per metre held from now on."""
        if t_s < 0:
            self._base_t.append(t_s)
            self._base_T.append(temp_K)
            return None
        if self.baseline is None:
            self.baseline = (fit_baseline(np.asarray(self._base_t), np.asarray(self._base_T)) if self._base_t
                             else no_baseline(temp_K))
        if not self._heating_seen:  # first row at t >= 0: heater on is t = 0 by definition of the time axis
            self._heating_seen = True
            self._push_step(0.0, q_W_per_m)
            self.rule = _stop_rule(self.stop_settings, self.probe, self.sensor, self.baseline, q_W_per_m,
                                   self.calibration_factor, np.asarray(self._base_t), np.asarray(self._base_T),
                                   self.defer)
        else:
            self._push_step(t_s, q_W_per_m - self._last_q)
        self._last_q = q_W_per_m
        if t_s <= 0:
            return None
        steps_t = self._step_t[:self._n_steps]
        steps_dq = self._step_dq[:self._n_steps]
        before = steps_t < t_s
        Q = float(steps_dq[before].sum())
        if Q <= 0:
            return self.last
        X = float(steps_dq[before] @ np.log(t_s - steps_t[before]))
        dT = temp_K - float(self.baseline.at(t_s))
        self._rise = max(self._rise, dT)
        self._append(t_s, X / Q, dT / Q, t_s / Q)
        if self.rule is not None:
            self.rule.feed_one(t_s, X / Q, dT / Q, t_s / Q)
        est = self._estimate(t_s)
        if est is not None:
            self.last = est
        return est

    def _push_step(self, t: float, dq: float) -> None:
        if dq == 0.0:
            return
        if self._n_steps == self._step_t.size:
            self._step_t = np.concatenate([self._step_t, np.zeros(self._step_t.size)])
            self._step_dq = np.concatenate([self._step_dq, np.zeros(self._step_dq.size)])
        self._step_t[self._n_steps] = t
        self._step_dq[self._n_steps] = dq
        self._n_steps += 1

    def _append(self, t: float, u: float, y: float, w: float) -> None:
        n = self._n
        if n == self._cap:
            self._cap *= 2
            for name in ("_t", "_u", "_y"):
                arr = getattr(self, name)
                setattr(self, name, np.concatenate([arr, np.zeros(arr.size)]))
            self._P = np.concatenate([self._P, np.zeros((self._cap + 1 - self._P.shape[0], _N_COLS))])
        self._t[n], self._u[n], self._y[n] = t, u, y
        row = self._P[n].copy()
        uu = u * u
        row[_U] += u
        row[_Y] += y
        row[_UU] += uu
        row[_UY] += u * y
        row[_YY] += y * y
        row[_U3] += uu * u
        row[_U4] += uu * uu
        row[_U2Y] += uu * y
        row[_W] += w
        row[_WU] += w * u
        row[_WW] += w * w
        row[_WY] += w * y
        if n > 0:
            up, yp = self._u[n - 1], self._y[n - 1]
            row[_PYY] += yp * y
            row[_PYU] += yp * u
            row[_PUY] += up * y
            row[_PUU] += up * u
            row[_PU] += up + u
            row[_PY] += yp + y
        self._P[n + 1] = row
        self._n = n + 1

    # --- fitting ------------------------------------------------------------------------------------------
    def _fit(self, i: int, j: int) -> tuple[float, float, float, float, float] | None:
        """Slope a, intercept b, SSE, lag-1 autocorrelation, Sxx of y = a·u + b over samples [i, j)."""
        n = j - i
        if n < 3:
            return None
        S = self._P[j] - self._P[i]
        Su, Sy = S[_U], S[_Y]
        sxx = S[_UU] - Su * Su / n
        if sxx <= 0:
            return None
        sxy = S[_UY] - Su * Sy / n
        a = sxy / sxx
        b = (Sy - a * Su) / n
        sse = S[_YY] - 2 * a * S[_UY] - 2 * b * Sy + a * a * S[_UU] + 2 * a * b * Su + b * b * n
        sse = max(sse, 0.0)
        P2 = self._P[j] - self._P[i + 1]
        lag = (P2[_PYY] - a * (P2[_PYU] + P2[_PUY]) - b * P2[_PY] + a * a * P2[_PUU] + a * b * P2[_PU]
               + b * b * (n - 1))
        rho = lag / sse if sse > 0 else 0.0
        return a, b, sse, rho, sxx

    def _curvature(self, i: int, j: int, a: float) -> tuple[float, float]:
        """Relative change of the local slope across [i, j) and its z-score, from the prefix sums."""
        n = j - i
        if n < 8:
            return 0.0, 0.0
        S = self._P[j] - self._P[i]
        M = np.array([[n, S[_U], S[_UU]], [S[_U], S[_UU], S[_U3]], [S[_UU], S[_U3], S[_U4]]])
        v = np.array([S[_Y], S[_UY], S[_U2Y]])
        try:
            c = np.linalg.solve(M, v)
            Minv = np.linalg.inv(M)
        except np.linalg.LinAlgError:
            return 0.0, 0.0
        sse = S[_YY] - float(c @ v)
        s2 = max(sse, 0.0) / max(n - 3, 1)
        var_c2 = Minv[2, 2] * s2
        span = self._u[j - 1] - self._u[i]
        rel = 2 * c[2] * span / a if a else 0.0
        z = abs(c[2]) / math.sqrt(var_c2) if var_c2 > 0 else 0.0
        return float(rel), float(z)

    def _window_start(self, t_end: float, alpha: float | None) -> tuple[float, bool]:
        """Start of the window ending at ``t_end``, and whether the start criterion could be met."""
        floor = FLOOR_FRACTION * t_end
        if not (alpha and self.r_m):
            return floor, True
        aj = self.alpha_J_factor * NOMINAL_RHO_C if self.alpha_J_factor is not None else None
        start = max(floor, win.start_s(self.r_m, alpha, aj, 0.0, START_TOL))
        if start > t_end * math.exp(-MIN_SPAN_LN):
            return floor, False  # not late enough yet: keep a usable window, flagged short
        return start, True

    def _fit_to(self, t_end: float, alpha: float | None) -> tuple[Any, int, int, float | None, bool] | None:
        """Fit the window that ends at ``t_end``, its start set by the probe criterion with the intercept's α."""
        t_arr = self._t[: self._n]
        j = int(np.searchsorted(t_arr, t_end, side="right"))
        fit, i, criterion_met = None, 0, True
        for _ in range(3):
            start, criterion_met = self._window_start(t_end, alpha)
            i = int(np.searchsorted(t_arr, start, side="left"))
            if j - i < MIN_POINTS:
                i = max(0, j - MIN_POINTS)
            fit = self._fit(i, j)
            if fit is None or fit[0] <= 0:
                return None
            a, b = fit[0], fit[1]
            if self.r_m:
                new_alpha = min(max(win.alpha_from_intercept(self.r_m, -b / a), ALPHA_MIN), ALPHA_AXIAL_MAX)
                if alpha and abs(new_alpha / alpha - 1) < 0.05:
                    alpha = new_alpha
                    break
                alpha = new_alpha
        return fit, i, j, alpha, criterion_met

    def _estimate(self, t_now: float) -> LiveEstimate | None:
        # The window runs to now while the residuals stay straight; once they bend (axial loss, a boundary) it
        # ends where the axial criterion says, and stays there: more heating adds nothing, the estimate settles.
        got = self._fit_to(t_now, self._alpha)
        if got is None:
            return None
        fit, i, j, alpha, criterion_met = got
        t_wall = math.inf
        if self.sample_radius_m and fit[0] > 0:  # a sample's face: the offline window's end, bent or not
            t_wall = win.wall_end_s(self.sample_radius_m, win.wall_alpha(1.0 / (4.0 * math.pi * fit[0]),
                                                                          RHO_C_FLOOR) or 0.0,
                                    END_TOL, self.r_m or 0.0)
            if t_wall < t_now:
                cut = self._fit_to(t_wall, alpha)
                if cut is None:
                    return None
                fit, i, j, alpha, criterion_met = cut
        if alpha and self.length_m and j - i >= 8:
            rel_curv, z_curv = self._curvature(i, j, fit[0])
            t_ax = min(win.axial_end_s(self.length_m, alpha, END_TOL, self.axial_m), t_wall)  # never past the face
            if abs(rel_curv) > TREND_TOL and z_curv > 3.0 and t_ax < t_now:
                cut = self._fit_to(t_ax, alpha)
                if cut is not None:
                    fit, i, j, alpha, criterion_met = cut
        a, b, sse, rho, sxx = fit
        n = j - i
        t0, t1 = float(self._t[i]), float(self._t[j - 1])
        span_ln = math.log(t1 / t0) if t0 > 0 else math.inf
        if n < MIN_POINTS or span_ln < MIN_SPAN_LN:
            return None
        self._alpha = alpha
        q_mean = self._q_mean(t0, t1)
        s2 = sse / max(n - 2, 1)
        infl = ar1_inflation(rho)
        var_a = s2 / sxx * infl
        rel_stat = math.sqrt(var_a) / a
        a, rel_drift = self._with_drift(i, j, a, s2 * infl, rel_stat)
        k_raw = 1.0 / (4.0 * math.pi * a)
        self._k_raw = k_raw
        k = k_raw * self.calibration_factor
        rel_cal = self.calibration_factor_u / self.calibration_factor if self.calibration_factor else 0.0
        rel_tot = combine({"statistical": rel_stat, "drift": rel_drift, "power": self.power_u_rel,
                           "calibration": rel_cal})
        slope_K = a * q_mean
        rms_K = math.sqrt(sse / n) * q_mean
        flags: list[str] = []
        flags += self.baseline.flags(self._rise, t_now)
        if span_ln < SHORT_SPAN_LN or n < 20 or not criterion_met:
            flags.append("window_short")
        rel_curv, z_curv = self._curvature(i, j, a)
        if abs(rel_curv) > TREND_TOL and z_curv > 3.0:
            flags.append("residual_trend")
        if rms_K > NOISE_HIGH_FRACTION * slope_K:
            flags.append("noise_high")
        if self.max_rise_K is not None and self._rise > self.max_rise_K:
            flags.append("rise_above_limit")
        v = self.verdict
        return LiveEstimate(t_s=t_now, k_W_per_mK=k, k_u_W_per_mK=k * rel_tot, k_u_stat_W_per_mK=k * rel_stat,
                            slope_K=slope_K, intercept_K=b * q_mean, window_s=(t0, t1),
                            stable=bool(v and v.stands), stable_at_s=v.first_at_s if v else None,
                            residual_rms_K=rms_K, n_used=n, flags=tuple(flags),
                            # the intercept's α carries e^{2h} (contact, the probe's own resistance): not α
                            alpha_m2_per_s=None, q_mean_W_per_m=q_mean, rise_K=self._rise, rho1=rho,
                            verdict=v.to_dict() if v else None)

    def _with_drift(self, i: int, j: int, a: float, s2: float, rel_stat: float) -> tuple[float, float]:
        """The slope with the drift as a third parameter, anchored by the baseline's own fit of it, and the part
        of u(a) the drift adds (see ``driftfit``: the same model, in y = ΔT/Q with the drift's regressor t/Q).

        The baseline says the drift left in ΔT is b' = (fitted − removed rate) ± u; the window's ln t shape adds
        what it knows. Without a baseline the drift stays unknown and unestimated (flagged no_baseline).
        """
        base = self.baseline
        assert base is not None
        if not base.present or base.fitted_rate_u_K_per_s <= 0 or s2 <= 0:
            return a, 0.0
        n = j - i
        S = self._P[j] - self._P[i]
        M = np.array([[S[_UU], S[_U], S[_WU]], [S[_U], n, S[_W]], [S[_WU], S[_W], S[_WW]]]) / s2
        v = np.array([S[_UY], S[_Y], S[_WY]]) / s2
        prior = 1.0 / base.fitted_rate_u_K_per_s**2
        b0 = (base.fitted_rate_K_per_s or 0.0) - base.rate_K_per_s
        M[2, 2] += prior
        v[2] += prior * b0
        try:
            theta = np.linalg.solve(M, v)
            cov = np.linalg.inv(M)
        except np.linalg.LinAlgError:
            return a, 0.0
        a2 = float(theta[0])
        if not a2 > 0:
            return a, 0.0
        rel = math.sqrt(max(float(cov[0, 0]), 0.0)) / a2
        return a2, math.sqrt(max(rel**2 - rel_stat**2, 0.0))

    def _q_mean(self, t0: float, t1: float) -> float:
        """Time-average power over [t0, t1] from the step record (used only to express the fit in kelvin)."""
        ts = self._step_t[:self._n_steps]
        levels = np.cumsum(self._step_dq[:self._n_steps])
        edges = np.clip(np.append(ts, math.inf), t0, t1)
        w = np.diff(edges)
        tot = float(w.sum())
        return float(w @ levels) / tot if tot > 0 else float(levels[-1])

    @property
    def verdict(self) -> Verdict | None:
        return self.rule.verdict if self.rule is not None else None

    @property
    def stable_at_s(self) -> float | None:
        v = self.verdict
        return v.first_at_s if v is not None else None


def _stop_rule(settings: StopSettings | None, probe: ProbeProfile | None, sensor: str, baseline: Baseline | None,
               q_W_per_m: float, calibration_factor: float, base_t: np.ndarray, base_T: np.ndarray,
               defer: Callable[[Callable[[], None]], None] | None = None) -> StopRule | None:
    """The verdict for one heating: the drift's uncertainty and the noise's correlation from the baseline, the
    power switched on at t = 0."""
    if settings is None or settings.planned_heat_s is None or not q_W_per_m > 0:
        return None
    # the reduction fits the drift as a parameter around the baseline's own slope (``driftfit``): what stays
    # unknown is that slope's standard uncertainty
    drift_u = None
    if baseline is not None and baseline.present:
        drift_u = baseline.fitted_rate_u_K_per_s or baseline.rate_u_K_per_s
    infl, noise, wander = 1.0, (0.0, 0.0), 1.0
    if base_t.size >= 3 and float(np.ptp(base_t)) > 0:
        resid = base_T - np.polyval(np.polyfit(base_t, base_T, 1), base_t)
        infl = ar1_inflation(lag1_autocorrelation(resid))
        wander = wander_inflation(base_t, resid)  # a slow wander under white noise, where the baseline shows one
        noise = (float(resid @ resid) / (base_t.size - 2), float(base_t.size - 2))
    return StopRule(ProbeFacts.of(probe, sensor), settings, drift_u, q_W_per_m, settings.planned_heat_s,
                    calibration_factor, infl, noise, defer, wander_infl=wander)


def _heating_rows(t_s: np.ndarray, q_W_per_m: np.ndarray) -> tuple[int, int]:
    """[first row at t >= 0, last row fed] as ``replay`` feeds a record: through the first zero-power row after
    the heater came on (its temperature was still heated), or to the end."""
    on = np.nonzero((t_s >= 0) & (q_W_per_m > 0))[0]
    i0 = int(np.searchsorted(t_s, 0.0, side="left"))
    if on.size == 0:
        return i0, i0 - 1
    off = np.nonzero((t_s > 0) & (q_W_per_m <= 0))[0]
    off = off[off > on[0]]
    return i0, int(off[0]) if off.size else t_s.size - 1


_CHUNK = 262_144


def planned_heat_of_record(t_s: np.ndarray, q_W_per_m: np.ndarray) -> float | None:
    """The heating a record shows (heater on to the first zero-power row, or its last row): the plan offline."""
    t_s = np.asarray(t_s, dtype=float)
    i0, i1 = _heating_rows(t_s, np.asarray(q_W_per_m, dtype=float))
    return float(t_s[i1]) if i1 > i0 and t_s[i1] > 0 else None


def record_verdict(t_s: np.ndarray, temp: np.ndarray, q_W_per_m: np.ndarray, probe: ProbeProfile | None = None,
                   sensor: str = "heater", stop: StopSettings | None = None, calibration_factor: float = 1.0, *,
                   X: np.ndarray | None = None, Q: np.ndarray | None = None) -> Verdict | None:
    """The verdict ``replay`` reaches on a record, from whole arrays in one pass (bounded memory, no estimates).

    The regressors are those ``LiveReducer.add`` builds sample by sample: the baseline fitted to every row before
    t = 0, the power's steps from t = 0 on, X and Q over the steps strictly before each row (``X``, ``Q``: the
    same over the whole record, when the caller has them already).
    """
    t_s = np.asarray(t_s, dtype=float)
    temp = np.asarray(temp, dtype=float)
    q = np.asarray(q_W_per_m, dtype=float)
    settings = stop or StopSettings()
    if settings.planned_heat_s is None:
        settings = StopSettings(settings.tolerance, planned_heat_of_record(t_s, q))
    i0, i1 = _heating_rows(t_s, q)
    if i1 < i0 or settings.planned_heat_s is None:
        return None
    base = t_s < 0
    baseline = fit_baseline(t_s[base], temp[base]) if np.any(base) else no_baseline(float(temp[i0]))
    rule = _stop_rule(settings, probe, sensor, baseline, float(q[i0]), calibration_factor, t_s[base], temp[base])
    if rule is None:
        return None
    th, Th = t_s[i0:i1 + 1], temp[i0:i1 + 1]
    if X is None or Q is None:
        steps_t, steps_dq = power_steps(th, q[i0:i1 + 1])
        Xh, Qh = log_time_regressor(th, steps_t, steps_dq)
    else:
        Xh, Qh = np.asarray(X, dtype=float)[i0:i1 + 1], np.asarray(Q, dtype=float)[i0:i1 + 1]
    for s in range(0, th.size, _CHUNK):  # in pieces, so a long record never has all its regressors at once
        tc, Qc = th[s:s + _CHUNK], Qh[s:s + _CHUNK]
        use = (tc > 0) & (Qc > 0)
        tc, Xc, Qc, Tc = tc[use], Xh[s:s + _CHUNK][use], Qc[use], Th[s:s + _CHUNK][use]
        rule.feed(tc, Xc / Qc, (Tc - baseline.at(tc)) / Qc, tc / Qc)
    return rule.verdict


def replay(t_s: np.ndarray, temp: np.ndarray, q_W_per_m: np.ndarray, probe: ProbeProfile | None = None,
           sensor: str = "heater", stop: StopSettings | None = None, **kwargs: float
           ) -> tuple[LiveReducer, list[LiveEstimate]]:
    """Run the live reducer over a recorded heating phase (up to the first zero-power sample after it).

    The verdict is judged against ``stop`` (default: 2 % and the heating the record shows, as offline)."""
    settings = stop or StopSettings()
    if settings.planned_heat_s is None:
        settings = StopSettings(settings.tolerance, planned_heat_of_record(np.asarray(t_s, dtype=float),
                                                                           np.asarray(q_W_per_m, dtype=float)))
    red = LiveReducer(probe, sensor, stop=settings, **kwargs)  # type: ignore[arg-type]
    out: list[LiveEstimate] = []
    heating = False
    for t, T, q in zip(t_s, temp, q_W_per_m, strict=True):
        if t >= 0 and q > 0:
            heating = True
        elif heating and t > 0 and q <= 0:
            red.add(float(t), float(T), float(q))
            break
        e = red.add(float(t), float(T), float(q))
        if e is not None and (not out or out[-1] is not e):
            out.append(e)
    return red, out
