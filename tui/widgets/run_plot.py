"""The run plot: ΔT against ln t (the straight-line view), against t, the cooling view, and for a heat pulse the
radial sensor's rise and decay with the pulse fit.

``build_spec`` turns a ``RunTrace`` into a plain description of what to draw (series, window marks, ticks,
labels); ``RunPlot`` hands that to plotext. Keeping the two apart lets tests check the picture's content
without a terminal. Series differ by marker and legend label as well as colour.
"""

from __future__ import annotations

import enum
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from rich.text import Text
from textual_plotext import PlotextPlot

from linerig.tui.screens.live_state import RunTrace

MAX_POINTS = 400  # per series; more than a terminal can show, few enough to redraw quickly
SENSOR_MARKERS = ("•", "+", "x", "o", "*", "=")
_TICK_STEPS = (1, 2, 5)


class PlotView(enum.StrEnum):
    """Which picture of the run to draw."""

    LOG = "ln t"
    """ΔT against ln t during heating: the late-time straight line, the fit and its window."""
    LINEAR = "t"
    """ΔT against t for the whole cycle: baseline, heating and cooling."""
    COOLING = "cooling"
    """ΔT against ln(t/(t − t_off)) after heater off: a line through the origin of slope q/(4πk)."""
    PULSE = "pulse"
    """A heat pulse: the radial sensor's ΔT against t, its rise, peak and decay, with the daemon's pulse fit."""

    def next(self) -> PlotView:
        members = list(PlotView)
        return members[(members.index(self) + 1) % len(members)]


@dataclass
class Series:
    x: np.ndarray
    y: np.ndarray
    label: str
    marker: str
    line: bool = False
    color: str | None = None


@dataclass
class PlotSpec:
    title: str
    xlabel: str
    ylabel: str = "ΔT, K"
    series: list[Series] = field(default_factory=list)
    vlines: list[tuple[float, str]] = field(default_factory=list)  # (x, tag written at the top)
    xticks: tuple[list[float], list[str]] | None = None
    labels: list[tuple[str, float]] = field(default_factory=list)  # (text, x) written along the top
    note: str | None = None  # shown when there is nothing to draw yet


def thin(n: int, limit: int = MAX_POINTS) -> np.ndarray:
    """Indices that keep at most ``limit`` points, always including the last."""
    if n <= limit:
        return np.arange(n)
    idx = np.linspace(0, n - 1, limit).round().astype(int)
    return np.unique(idx)


def log_ticks(lo_s: float, hi_s: float, max_ticks: int = 7) -> tuple[list[float], list[str]]:
    """Ticks at 1-2-5 seconds between lo and hi, placed at ln t and labelled in seconds.

    A span too short to hold two such values gets its two ends, rounded to two significant figures.
    """
    if not (lo_s > 0 and hi_s > lo_s):
        return [], []
    vals: list[float] = []
    decade = 10.0 ** math.floor(math.log10(lo_s))
    while decade <= hi_s:
        vals += [s * decade for s in _TICK_STEPS if lo_s <= s * decade <= hi_s]
        decade *= 10
    if len(vals) > max_ticks:
        ones = [v for v in vals if f"{v:g}".strip("0.").startswith("1")]
        vals = ones if len(ones) >= 2 else vals[:: len(vals) // max_ticks + 1]
    if len(vals) < 2:
        vals = sorted({float(f"{lo_s:.2g}"), float(f"{hi_s:.2g}")})
        vals = [v for v in vals if v > 0]
    return [math.log(v) for v in vals], [f"{v:g}" for v in vals]


def _fit(est: dict[str, Any] | None) -> tuple[float, float, float, float] | None:
    if not est:
        return None
    slope, icpt, win = est.get("slope_K"), est.get("intercept_K"), est.get("window_s") or [None, None]
    if not all(isinstance(v, int | float) for v in (slope, icpt, win[0], win[1])):
        return None
    return float(slope), float(icpt), float(win[0]), float(win[1])


def _sensor_series(x: np.ndarray, dT: np.ndarray, tr: RunTrace, primary_only: bool = False) -> list[Series]:
    out = []
    order = [tr.primary] + [i for i in range(dT.shape[1] if dT.ndim == 2 else 0) if i != tr.primary]
    for n, i in enumerate(order):
        if i >= dT.shape[1] or (primary_only and n > 0):
            continue
        y = dT[:, i]
        ok = np.isfinite(y) & np.isfinite(x)
        if not np.any(ok):
            continue
        xs, ys = x[ok], y[ok]
        keep = thin(xs.size)
        name = tr.sensors[i] if i < len(tr.sensors) else f"ch{i}"
        out.append(Series(xs[keep], ys[keep], name, SENSOR_MARKERS[n % len(SENSOR_MARKERS)]))
    return out


BASELINE_WORDS = {"daemon": "baseline from the daemon", "fit": "baseline extrapolated from the fit",
                  "none": "no baseline seen"}


def build_spec(tr: RunTrace | None, view: PlotView) -> PlotSpec:
    """What to draw for ``tr`` in ``view``."""
    if view is PlotView.LOG:
        spec = _log_spec(tr)
    elif view is PlotView.LINEAR:
        spec = _linear_spec(tr)
    elif view is PlotView.PULSE:
        spec = _pulse_spec(tr)
    else:
        spec = _cooling_spec(tr)
    if tr is not None and tr.heat_start_device_s is not None and tr.baseline_source in BASELINE_WORDS:
        spec.ylabel = f"ΔT, K ({BASELINE_WORDS[tr.baseline_source]})"
    return spec


def _log_spec(tr: RunTrace | None) -> PlotSpec:
    spec = PlotSpec("ΔT vs ln t (heating)", "time since heater on, s (log scale)")
    if tr is None:
        spec.note = "no run yet: F3 sets one up"
        return spec
    t, dT = tr.heating()
    if t.size < 2:
        spec.note = "ln t view: heater not on yet" if tr.heat_start_device_s is None else "ln t view: first samples"
        return spec
    x = np.log(t)
    spec.series = _sensor_series(x, dT, tr)
    lo, hi = float(t[0]), float(t[-1])
    fit = _fit(tr.last_estimate)
    if fit is not None:
        slope, icpt, t0, t1 = fit
        xs = np.linspace(math.log(max(t0, 1e-3)), math.log(max(t1, t0 * 1.0001)), 40)
        spec.series.append(Series(xs, slope * xs + icpt, "fit", "braille", line=True, color="red"))
        spec.vlines = [(math.log(t0), ""), (math.log(t1), "")]
        spec.labels = [("window", 0.5 * (math.log(t0) + math.log(t1)))]
        spec.title = f"ΔT vs ln t · window {t0:.0f}–{t1:.0f} s"
        lo, hi = min(lo, t0), max(hi, t1)
    spec.xticks = log_ticks(lo, hi)
    return spec


def _linear_spec(tr: RunTrace | None) -> PlotSpec:
    spec = PlotSpec("ΔT vs t (whole cycle)", "time since heater on, s")
    if tr is None or not tr.device_s:
        spec.note = "no run yet: F3 sets one up"
        return spec
    t, dT = tr.rise()
    if tr.heat_start_device_s is None:  # still settling: time from the first sample, ΔT from its mean
        dev = np.asarray(tr.device_s)
        t = dev - dev[-1]
        spec.xlabel = "time before now, s (settling)"
    spec.series = _sensor_series(t, dT, tr)
    if tr.heat_start_device_s is not None:
        spec.vlines.append((0.0, "on"))
        fit = _fit(tr.last_estimate)
        if fit is not None:
            slope, icpt, t0, t1 = fit
            xs = np.linspace(t0, t1, 40)
            spec.series.append(Series(xs, slope * np.log(xs) + icpt, "fit", "braille", line=True, color="red"))
        if tr.heat_off_t_s is not None:
            spec.vlines.append((tr.heat_off_t_s, "off"))
    return spec


def _cooling_spec(tr: RunTrace | None) -> PlotSpec:
    spec = PlotSpec("cooling: ΔT vs ln(t/(t−t_off))", "ln(t / (t − t_off)), late cooling at left")
    if tr is None or tr.heat_off_t_s is None:
        spec.note = "cooling view: heater still on"
        return spec
    x, dT = tr.cooling()
    if x.size < 2:
        spec.note = "cooling view: first samples"
        return spec
    spec.series = _sensor_series(x, dT, tr)
    fit = _fit(tr.last_estimate)
    if fit is not None:
        xs = np.linspace(0.0, float(np.nanmax(x)), 40)
        spec.series.append(Series(xs, fit[0] * xs, "heating fit", "braille", line=True, color="red"))
    return spec


def _pulse_spec(tr: RunTrace | None) -> PlotSpec:
    name = tr.sensors[tr.primary] if tr is not None and tr.primary < len(tr.sensors) else "radial sensor"
    spec = PlotSpec(f"pulse at {name}: ΔT vs t", "time since heater on, s")
    if tr is None or tr.heat_start_device_s is None:
        spec.note = "pulse view: heater not on yet" if tr is not None else "no run yet: F3 sets one up"
        return spec
    t, dT = tr.rise()
    if t.size < 2 or dT.ndim != 2 or dT.shape[1] <= tr.primary:
        spec.note = "pulse view: first samples"
        return spec
    ok = np.isfinite(t) & np.isfinite(dT[:, tr.primary]) & (t >= -30.0)
    if np.count_nonzero(ok) < 2:
        spec.note = "pulse view: no baseline seen yet"
        return spec
    keep = thin(int(np.count_nonzero(ok)))
    spec.series = [Series(t[ok][keep], dT[ok, tr.primary][keep], name, SENSOR_MARKERS[0])]
    spec.vlines.append((0.0, "on"))
    if tr.heat_off_t_s is not None:
        spec.vlines.append((tr.heat_off_t_s, "off"))
    fit = tr.pulse_fit
    curve = (fit or {}).get("curve") or {}
    if curve.get("t_s") and curve.get("dT_K"):
        x, y = np.asarray(curve["t_s"], dtype=float), np.asarray(curve["dT_K"], dtype=float)
        spec.series.append(Series(x, y, "pulse fit" + ("" if fit and fit.get("final") else " (live)"), "braille",
                                  line=True, color="red"))
        peak = fit.get("t_peak_s") if fit else None
        if isinstance(peak, int | float):
            spec.labels.append(("peak", float(peak)))
        spec.title = f"pulse at {name} · {pulse_summary(fit)}"
    return spec


def pulse_summary(fit: dict[str, Any] | None) -> str:
    """k, α and ρc of a pulse fit with their standard uncertainties, for titles and readouts."""
    if not fit:
        return "no fit yet"

    def pm(v: Any, u: Any, digits: int) -> str:
        if not isinstance(v, int | float):
            return "—"
        return f"{v:.{digits}f} ± {u:.{digits}f}" if isinstance(u, int | float) else f"{v:.{digits}f}"

    return (f"k {pm(fit.get('k_W_per_mK'), fit.get('k_u_W_per_mK'), 3)} W/(m·K), α "
            f"{pm(fit.get('alpha_mm2_per_s'), fit.get('alpha_u_mm2_per_s'), 3)} mm²/s, ρc "
            f"{pm(fit.get('rho_c_MJ_per_m3K'), fit.get('rho_c_u_MJ_per_m3K'), 2)} MJ/(m³·K)")


def legend_text(spec: PlotSpec) -> Text:
    """The plot's legend as a line of its own (markers and colours as drawn), never over the data."""
    out = Text()
    for s in spec.series:
        if out:
            out.append("   ")
        mark = "──" if s.line else ("⠶" if s.marker == "braille" else s.marker)
        out.append(mark, style=s.color or "")
        out.append(f" {s.label}")
    return out


def auto_view(state: str | None, pulse: bool = False) -> PlotView:
    """The view that suits the phase: drift while settling, the line while heating, cooling after; a heat pulse
    shows its radial sensor from the moment the heater goes on."""
    if pulse and state not in (None, "checking", "settling"):
        return PlotView.PULSE
    if state in ("checking", "settling"):
        return PlotView.LINEAR
    if state == "recovering":
        return PlotView.COOLING
    return PlotView.LOG


def next_choice(choice: PlotView | None, pulse: bool = False) -> PlotView | None:
    """Cycle auto → ln t → t → cooling → auto (→ pulse → auto for a heat pulse)."""
    if choice is None:
        return PlotView.LOG
    if choice is PlotView.COOLING:
        return PlotView.PULSE if pulse else None
    return None if choice is PlotView.PULSE else choice.next()


class RunPlot(PlotextPlot):
    """A terminal plot of the current cycle in the chosen view (``choice`` None: follow the phase)."""

    DEFAULT_CSS = "RunPlot { height: 1fr; min-height: 8; }"

    def __init__(self, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self.choice: PlotView | None = None

    def draw(self, spec: PlotSpec) -> None:
        plt = self.plt
        plt.clear_figure()
        plt.title(spec.title)
        plt.xlabel(spec.xlabel)
        plt.ylabel(spec.ylabel)
        if spec.note is not None or not spec.series:
            plt.xlim(0.0, 1.0)
            plt.ylim(0.0, 1.0)
            plt.xticks([], [])
            plt.yticks([], [])
            plt.text(spec.note or "no data", 0.5, 0.5, alignment="center")
            self.refresh()
            return
        for s in spec.series:  # no labels: plotext's legend sits on the data; legend_text() says it below the plot
            kwargs: dict[str, Any] = {"marker": s.marker}
            if s.color:
                kwargs["color"] = s.color
            if s.line:
                plt.plot(s.x.tolist(), s.y.tolist(), **kwargs)
            else:
                plt.scatter(s.x.tolist(), s.y.tolist(), **kwargs)
        ys = np.concatenate([s.y for s in spec.series])
        top = float(np.nanmax(ys)) if ys.size else 1.0
        for x, tag in spec.vlines:
            plt.vline(x, "gray")
            if tag:
                plt.text(tag, x, top, alignment="left")
        for tag, x in spec.labels:
            plt.text(tag, x, top, alignment="center")
        if spec.xticks and spec.xticks[0]:
            plt.xticks(*spec.xticks)
        self.refresh()


class EstimatePlot(PlotextPlot):
    """The running estimate of k against time with its ± band: shows it settling (large terminals only)."""

    DEFAULT_CSS = "EstimatePlot { height: 12; }"

    def draw(self, tr: RunTrace | None) -> None:
        plt = self.plt
        plt.clear_figure()
        plt.title("running estimate k, W/(m·K): line k, dots ± U (k = 2)")
        plt.xlabel("time since heater on, s")
        if tr is None or len(tr.estimates) < 2:
            plt.title("running estimate k — none yet")
            self.refresh()
            return
        arr = np.asarray([(t, k, u) for t, k, u, _ in tr.estimates], dtype=float)
        keep = thin(arr.shape[0])
        t, k, u = arr[keep, 0], arr[keep, 1], 2.0 * np.nan_to_num(arr[keep, 2])   # U = 2u
        plt.plot(t.tolist(), k.tolist(), marker="braille")
        plt.plot(t.tolist(), (k + u).tolist(), marker="·", color="gray")
        plt.plot(t.tolist(), (k - u).tolist(), marker="·", color="gray")
        self.refresh()
