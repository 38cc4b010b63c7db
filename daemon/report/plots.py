"""Report figures as matplotlib Figures (no pyplot state): SVG for the reports, any format for ``--plot``."""

from __future__ import annotations

import io
import math
import re
from collections.abc import Sequence
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from linerig.daemon.probe import ProbeProfile
from linerig.daemon.reduction.api import SensorResult
from linerig.daemon.reduction.data import RunData

DPI = 110


def svg_bytes(fig: Figure) -> bytes:
    """Vector SVG, glyphs as paths, so the PDF and the browser draw exactly what matplotlib laid out."""
    buf = io.BytesIO()
    fig.savefig(buf, format="svg", bbox_inches="tight", metadata={"Date": None})
    # svglib reads fill-opacity and stroke-opacity but not a whole element's "opacity" (matplotlib's for a
    # patch with alpha): spell it out, or a shaded span prints solid
    return re.sub(rb"(?<![-\w])opacity: ([0-9.]+)", rb"fill-opacity: \1; stroke-opacity: \1", buf.getvalue())


def save_plot(fig: Figure, path: Path) -> None:
    """Write a plot for ``--plot``: the format follows the file's suffix (.png, .svg, .pdf ...)."""
    fig.savefig(path, dpi=DPI, bbox_inches="tight")


def _subplots(nrows: int, figsize: tuple[float, float], **kw: object) -> tuple[Figure, object]:
    fig = Figure(figsize=figsize)
    axes = fig.subplots(nrows, 1, **kw)  # type: ignore[arg-type]
    return fig, axes


def _rise(data: RunData, r: SensorResult) -> np.ndarray:
    T = data.temps_C[r.name]
    return T - r.baseline.at(data.time_s) if r.baseline is not None else T - T[0]


def model_curve(data: RunData, r: SensorResult, probe: ProbeProfile | None, t: np.ndarray) -> np.ndarray | None:
    """ΔT of the fitted probe model at ``t`` (heater sensor), from the measured power steps (Blackwell's probe)."""
    from linerig.daemon.reduction.probe_model import ResponseTable, superpose
    from linerig.daemon.reduction.superposition import compress_steps, power_steps

    m = r.model
    if m is None or not m.success or probe is None or r.radial_m or not probe.heat_capacity_J_per_m3K:
        return None
    a = probe.radius_m
    st, sdq = power_steps(data.time_s, data.q_W_per_m)
    st, sdq = compress_steps(st[st < t[-1]], sdq[st < t[-1]])
    ages = t[:, None] - st[None, :]
    ages = ages[ages > 0]
    if not ages.size:
        return None
    tau_per_s = m.alpha_m2_per_s / a**2
    aj = 2.0 * (m.k_W_per_mK / m.alpha_m2_per_s) / probe.heat_capacity_J_per_m3K
    table = ResponseTable(float(ages.min()) * tau_per_s, float(ages.max()) * tau_per_s, aj, m.h)
    return superpose(t, st, sdq, table, tau_per_s) / (4.0 * math.pi * m.k_W_per_mK)


def heating_fit(data: RunData, r: SensorResult, probe: ProbeProfile | None = None) -> Figure:
    """ΔT against ln t with the fit behind the reported k (its method and window), and its residuals."""
    t = data.time_s
    dT = _rise(data, r)
    end = r.heating_s or float(t[-1])
    heat = (t > 0) & (t <= end)
    fig, (ax, axr) = _subplots(2, (7, 5.2), sharex=True, gridspec_kw={"height_ratios": [3, 1.3]})
    th = t[heat]
    lt = np.log(th)
    ax.plot(lt, dT[heat], ".", ms=2.5, color="#1f5f8b", label="ΔT (drift removed)")
    label = f"{r.method} fit: k = {r.k_W_per_mK:.4g} W/(m·K)" if r.k_W_per_mK else f"{r.method} fit"
    win = r.window_s
    fit = None
    if r.method == "line" and r.line is not None:
        fit = r.line.slope_K * lt + r.line.intercept_K
        ax.plot(lt, fit, "--", color="#c0392b", lw=0.7)
    elif r.method in ("model", "radial"):
        fit = model_curve(data, r, probe, th)
        if fit is not None:
            ax.plot(lt, fit, "--", color="#c0392b", lw=0.7)
    if fit is not None and win is not None:
        w = (th >= win[0]) & (th <= win[1])
        ax.plot(lt[w], fit[w], "-", color="#c0392b", lw=1.6, label=label)
        axr.plot(lt[w], (dT[heat] - fit)[w] * 1e3, ".", ms=2.5, color="#555")
    if win is not None:
        for edge in win:
            if edge > 0:
                for a in (ax, axr):
                    a.axvline(math.log(edge), color="grey", ls=":", lw=0.8)
    axr.axhline(0.0, color="grey", lw=0.8)
    ax.set_ylabel("ΔT (K)")
    wtext = f", window {win[0]:.0f}–{win[1]:.0f} s" if win else ""
    ax.set_title(f"Sensor {r.name}: rise against ln t ({r.method}{wtext})")
    ax.legend(fontsize=8, loc="upper left")
    axr.set_xlabel("ln(t / s)")
    axr.set_ylabel("residual (mK)")
    fig.tight_layout()
    return fig


def estimate_history(data: RunData, r: SensorResult, probe: ProbeProfile | None) -> Figure | None:
    """The live estimate against time, as the operator saw it (the live rule replayed), with its ±U band."""
    from linerig.daemon.reduction.live import replay

    _, ests = replay(data.time_s, data.temps_C[r.name], data.q_W_per_m, probe, r.name,
                     calibration_factor=r.calibration_factor)
    if not ests:
        return None
    et = np.array([e.t_s for e in ests])
    ek = np.array([e.k_W_per_mK for e in ests])
    eu = np.array([e.k_u_W_per_mK for e in ests])
    fig, ax = _subplots(1, (7, 3.2))
    ax.plot(et, ek, "-", lw=1.2, color="#1f5f8b", label="live estimate")
    ax.fill_between(et, ek - 2 * eu, ek + 2 * eu, alpha=0.2, color="#1f5f8b", label="± U (k = 2)")
    if r.k_W_per_mK:
        ax.axhline(r.k_W_per_mK, color="#c0392b", lw=0.8, ls="--", label=f"reported result ({r.method})")
    if r.stable_at_s is not None:
        ax.axvline(r.stable_at_s, color="green", ls=":", label=f"stable at {r.stable_at_s:.0f} s")
    lo, hi = np.nanpercentile(ek, [5, 100])
    if np.isfinite(lo) and np.isfinite(hi) and hi > lo:
        pad = 0.3 * (hi - lo) + 0.02 * abs(hi)
        ax.set_ylim(lo - pad, hi + pad)
    ax.set_xlabel("t (s)")
    ax.set_ylabel("k (W/(m·K))")
    ax.set_title(f"Sensor {r.name}: estimate against time")
    ax.legend(fontsize=8)
    fig.tight_layout()
    return fig


def cooling(data: RunData, r: SensorResult) -> Figure | None:
    """Recovery: ΔT against ln[t/(t − t_h)], with the late-time line of the recovery fit (Carslaw & Jaeger)."""
    t_h = r.heating_s
    if t_h is None:
        return None
    t = data.time_s
    dT = _rise(data, r)
    rec = t > t_h * 1.0001
    if np.count_nonzero(rec) < 5:
        return None
    x = np.log(t[rec] / (t[rec] - t_h))
    fig, ax = _subplots(1, (7, 3.2))
    ax.plot(x, dT[rec], ".", ms=2.5, color="#1f5f8b", label="ΔT during recovery")
    if r.recovery is not None and r.q_mean_W_per_m:
        k_raw = r.recovery.k_W_per_mK
        xs = np.linspace(0, float(x.max()), 50)
        ax.plot(xs, r.q_mean_W_per_m / (4 * math.pi * k_raw) * xs, "-", color="#c0392b", lw=1.2,
                label=f"q/(4πk)·ln[t/(t−t_h)], k = {k_raw * r.calibration_factor:.4g} W/(m·K)")
        w0, w1 = r.recovery.window_s
        ax.axvspan(math.log(w1 / (w1 - t_h)), math.log(w0 / (w0 - t_h)), color="grey", alpha=0.12,
                   label="recovery window")
    ax.set_xlabel("ln[t / (t − t_h)]")
    ax.set_ylabel("ΔT (K)")
    ax.set_title(f"Sensor {r.name}: cooling after the heater went off")
    ax.legend(fontsize=8)
    fig.tight_layout()
    return fig


def depth_profile(groups: dict[tuple[str, str], Sequence[object]], title: str) -> Figure:
    """Resistivity against depth, one line per borehole, depth increasing downwards, ±U error bars."""
    fig, ax = _subplots(1, (6, 6))
    for (_site, bh), pts in groups.items():
        d = np.array([p.depth_m for p in pts])  # type: ignore[attr-defined]
        rho = np.array([100 * p.resistivity_mK_per_W for p in pts])  # type: ignore[attr-defined]
        u = np.array([100 * (p.resistivity_u_mK_per_W or 0.0) for p in pts])  # type: ignore[attr-defined]
        ax.errorbar(rho, d, xerr=2 * u, fmt="o-", ms=4, capsize=2, lw=1, label=bh)
    ax.invert_yaxis()
    ax.set_xlabel("thermal resistivity (°C·cm/W)")
    ax.set_ylabel("depth below ground (m)")
    ax.set_title(title)
    ax.grid(alpha=0.3)
    ax.legend(title="borehole", fontsize=8)
    fig.tight_layout()
    return fig


def dryout(points: Sequence[object], curves: dict[str, tuple[np.ndarray, np.ndarray]], title: str,
           critical: object | None = None, design: object | None = None) -> Figure:
    """Resistivity against moisture: points, fitted curves, the Annex F tangents and the design point."""
    fig, ax = _subplots(1, (7, 4.5))
    w = np.array([p.moisture_pct for p in points])  # type: ignore[attr-defined]
    rho = np.array([100 / p.k_W_per_mK for p in points])  # type: ignore[attr-defined]
    dens = np.array([p.dry_density_kg_per_m3 for p in points])  # type: ignore[attr-defined]
    for d in np.unique(dens):
        sel = dens == d
        ax.plot(w[sel], rho[sel], "o", ms=5, label=f"measured, ρ_d = {d:.0f} kg/m³")
    for label, (cw, crho) in curves.items():
        ax.plot(cw, 100 * crho, "-", lw=1.2, label=label)
    if critical is not None:
        wc = critical.moisture_pct  # type: ignore[attr-defined]
        xs = np.linspace(0, max(float(w.max()), wc) * 1.05, 50)
        ax.plot(xs, 100 * critical.dry.at(xs), ":", color="grey", lw=1, label="dry and moist tangents")  # type: ignore[attr-defined]
        ax.plot(xs, 100 * critical.moist.at(xs), ":", color="grey", lw=1)  # type: ignore[attr-defined]
        ax.axvline(wc, color="grey", ls="--", lw=0.8, label=f"critical moisture {wc:.1f} % (IEEE 442 Annex F)")
    if design is not None:
        ax.plot([design.moisture_pct], [100 * design.resistivity_mK_per_W], "s", color="black", ms=7,  # type: ignore[attr-defined]
                label="value at the chosen moisture")
    top = float(np.nanmax(rho)) * 1.3
    ax.set_ylim(0, top)
    ax.set_xlim(left=0)
    ax.set_xlabel("moisture content (% of dry mass)")
    ax.set_ylabel("thermal resistivity (°C·cm/W)")
    ax.set_title(title)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7)
    fig.tight_layout()
    return fig


def cylinder(t: np.ndarray, centre_C: np.ndarray, model_C: np.ndarray, title: str) -> Figure:
    fig, (ax, axr) = _subplots(2, (7, 5), sharex=True, gridspec_kw={"height_ratios": [3, 1.2]})
    ax.plot(t, centre_C, ".", ms=2.5, color="#1f5f8b", label="centre temperature")
    ax.plot(t, model_C, "-", color="#c0392b", lw=1.2, label="series solution, fitted")
    axr.plot(t, (centre_C - model_C) * 1e3, ".", ms=2, color="#555")
    axr.axhline(0, color="grey", lw=0.8)
    ax.set_ylabel("T (°C)")
    ax.set_title(title)
    ax.legend(fontsize=8)
    axr.set_xlabel("t (s)")
    axr.set_ylabel("residual (mK)")
    fig.tight_layout()
    return fig


def cycles(cycle_no: Sequence[int], k: Sequence[float], k_u: Sequence[float | None], mean: float,
           r_limit: float, flagged: Sequence[int], title: str) -> Figure:
    fig, ax = _subplots(1, (7, 3.2))
    u = np.array([2 * (x or 0.0) for x in k_u])
    ax.errorbar(cycle_no, k, yerr=u, fmt="o", capsize=3, color="#1f5f8b", label="cycle result ± U")
    ax.axhline(mean, color="#c0392b", lw=1, label="mean")
    ax.axhspan(mean - r_limit / 2, mean + r_limit / 2, color="#c0392b", alpha=0.1, label="mean ± r/2")
    for c in flagged:
        i = list(cycle_no).index(c)
        ax.plot([c], [k[i]], "x", color="black", ms=10)
    ax.set_xticks(list(cycle_no))
    ax.set_xlabel("cycle")
    ax.set_ylabel("k (W/(m·K))")
    ax.set_title(title)
    ax.legend(fontsize=8)
    fig.tight_layout()
    return fig
