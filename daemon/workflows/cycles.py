"""Statistics over repeat heating–recovery cycles of one sample.

Cycles on one specimen with the same probe, operator and rig, minutes apart, are repeatability conditions in the
sense of ISO 5725-1. So the spread of their results is the repeatability standard deviation s_r, and the
repeatability limit is r = 2.8·s_r (ISO 5725-6 §4.1.4: the 95 % limit on the difference of two results,
2.8 ≈ 1.96·√2).

Outliers are flagged two ways, and never dropped silently:
- Grubbs' single-outlier test as ISO 5725-2 §7.3.4 applies it: G = max|x − x̄|/s against the critical values of
  its Table 5. G above the 5 % value makes a "straggler"; above the 1 % value, an "outlier". The critical value
  comes from Student's t: G_crit = (n−1)/√n·√(t²/(n−2+t²)), t = t(1 − α/(2n), n−2) (Grubbs 1969,
  Technometrics 11:1–21).
- The robust modified z-score M = 0.6745·(x − median)/MAD, flagged when |M| > 3.5 (Iglewicz & Hoaglin 1993,
  "How to Detect and Handle Outliers", ASQC). It still works when the outlier inflates s.

Repeated heating can drive water away from the needle (ASTM D5334-14 §1.2, error source 1). That shows up as a
drift in k from cycle to cycle, not as scatter, so a straight-line trend is tested as well.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

import numpy as np
from scipy import stats

REPEATABILITY_FACTOR = 2.8          # ISO 5725-6 §4.1.4 (1.96·√2 rounded)
GRUBBS_STRAGGLER_ALPHA = 0.05       # ISO 5725-2 §7.3.4: 5 % -> straggler
GRUBBS_OUTLIER_ALPHA = 0.01         # ISO 5725-2 §7.3.4: 1 % -> outlier
MAD_Z_LIMIT = 3.5                   # Iglewicz & Hoaglin (1993)
MAD_Z_SCALE = 0.6745                # Φ⁻¹(0.75), makes MAD consistent with σ for normal data
TREND_P = 0.05                      # trend across cycles significant at 5 % (common practice, no source)
REEQUILIBRATION_FRACTION = 0.05     # start of a cycle off the first baseline by > 5 % of the rise (no source)


class CycleDataError(ValueError):
    """Not enough cycle results to summarise; the message says what is needed."""


def grubbs_critical(n: int, alpha: float) -> float:
    """Two-sided critical value of Grubbs' single-outlier statistic for n values (ISO 5725-2 Table 5)."""
    if n < 3:
        raise CycleDataError("Grubbs' test needs at least 3 values")
    t = float(stats.t.ppf(1.0 - alpha / (2.0 * n), n - 2))
    return (n - 1) / math.sqrt(n) * math.sqrt(t * t / (n - 2 + t * t))


def grubbs_statistic(x: np.ndarray) -> tuple[float, int]:
    """(G, index of the most extreme value)."""
    x = np.asarray(x, dtype=float)
    s = float(np.std(x, ddof=1))
    dev = np.abs(x - x.mean())
    i = int(np.argmax(dev))
    return (float(dev[i]) / s if s > 0 else 0.0), i


def modified_z(x: np.ndarray) -> np.ndarray:
    """Iglewicz–Hoaglin modified z-scores; zeros when more than half the values are identical (MAD = 0)."""
    x = np.asarray(x, dtype=float)
    med = float(np.median(x))
    mad = float(np.median(np.abs(x - med)))
    if mad == 0:
        return np.zeros_like(x)
    return MAD_Z_SCALE * (x - med) / mad


@dataclass(frozen=True)
class CycleValue:
    """One cycle's result, as the summary needs it."""

    cycle: int
    value: float
    u: float | None = None
    run_id: int | None = None
    start_offset_K: float | None = None   # start temperature minus the first cycle's baseline
    rise_K: float | None = None           # temperature rise of this cycle's heating
    result_flags: tuple[str, ...] = ()    # the reduction's own quality flags for this cycle (drift, ...)


@dataclass(frozen=True)
class CycleSummary:
    """Summary of one quantity (k, usually) over the cycles of a sample."""

    quantity: str
    n: int
    mean: float
    sd: float
    sem: float
    cv: float
    repeatability_limit: float
    minimum: float
    maximum: float
    trend_per_cycle: float
    trend_p: float
    values: tuple[CycleValue, ...]
    grubbs_G: float | None
    grubbs_crit_5: float | None
    grubbs_crit_1: float | None
    mod_z: tuple[float, ...]
    flags_by_cycle: dict[int, tuple[str, ...]] = field(default_factory=dict)
    flags: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, object]:
        d = asdict(self)
        d["values"] = [asdict(v) for v in self.values]
        d["flags_by_cycle"] = {str(k): list(v) for k, v in self.flags_by_cycle.items()}
        for key, v in list(d.items()):
            if isinstance(v, float) and not math.isfinite(v):
                d[key] = None
        return d


def summarise_cycles(values: list[CycleValue], quantity: str = "k_W_per_mK") -> CycleSummary:
    """Mean, s_r, r = 2.8·s_r, outlier and trend flags over cycle results (needs ≥ 2 cycles)."""
    vals = [v for v in values if v.value is not None and math.isfinite(v.value)]
    if len(vals) < 2:
        raise CycleDataError(f"{len(vals)} usable cycle result(s): a summary needs at least 2 "
                             "(run more cycles, or check that each cycle was reduced)")
    vals.sort(key=lambda v: v.cycle)
    x = np.array([v.value for v in vals], dtype=float)
    n = x.size
    mean = float(x.mean())
    sd = float(np.std(x, ddof=1))
    per_cycle: dict[int, list[str]] = {v.cycle: list(v.result_flags) for v in vals}
    flags: list[str] = ["cycle_result_flagged"] if any(v.result_flags for v in vals) else []

    g = g5 = g1 = None
    if n >= 3:
        g, i = grubbs_statistic(x)
        g5 = grubbs_critical(n, GRUBBS_STRAGGLER_ALPHA)
        g1 = grubbs_critical(n, GRUBBS_OUTLIER_ALPHA)
        if g > g1:
            per_cycle[vals[i].cycle].append("grubbs_outlier")
            flags.append("outlier")
        elif g > g5:
            per_cycle[vals[i].cycle].append("grubbs_straggler")
            flags.append("straggler")
    mz = modified_z(x)
    for v, m in zip(vals, mz, strict=True):
        if abs(m) > MAD_Z_LIMIT:
            per_cycle[v.cycle].append("mad_outlier")
            if "outlier" not in flags:
                flags.append("outlier")

    cyc = np.array([v.cycle for v in vals], dtype=float)
    slope, p = 0.0, 1.0
    if n >= 3 and np.ptp(cyc) > 0:
        lr = stats.linregress(cyc, x)
        slope, p = float(lr.slope), float(lr.pvalue)
        if p < TREND_P:
            flags.append("trend_across_cycles")

    first_rise = next((v.rise_K for v in vals if v.rise_K), None)
    for v in vals[1:]:
        if (v.start_offset_K is not None and first_rise
                and abs(v.start_offset_K) > REEQUILIBRATION_FRACTION * first_rise):
            per_cycle[v.cycle].append("not_reequilibrated")
            if "not_reequilibrated" not in flags:
                flags.append("not_reequilibrated")

    return CycleSummary(
        quantity=quantity, n=n, mean=mean, sd=sd, sem=sd / math.sqrt(n), cv=sd / abs(mean) if mean else math.inf,
        repeatability_limit=REPEATABILITY_FACTOR * sd, minimum=float(x.min()), maximum=float(x.max()),
        trend_per_cycle=slope, trend_p=p, values=tuple(vals), grubbs_G=g, grubbs_crit_5=g5, grubbs_crit_1=g1,
        mod_z=tuple(float(m) for m in mz), flags_by_cycle={c: tuple(f) for c, f in per_cycle.items() if f},
        flags=tuple(flags))


def heating_blocks(q_W_per_m: np.ndarray) -> list[tuple[int, int]]:
    """Index ranges [i0, i1) of consecutive samples with the heater on (q > 0)."""
    on = np.asarray(q_W_per_m, dtype=float) > 0
    edges = np.diff(on.astype(int), prepend=0, append=0)
    starts = np.nonzero(edges == 1)[0]
    ends = np.nonzero(edges == -1)[0]
    return [(int(a), int(b)) for a, b in zip(starts, ends, strict=True)]


def split_cycles(time_s: np.ndarray, q_W_per_m: np.ndarray, phase: list[str] | None = None,
                 baseline_fraction: float = 1.0 / 3.0) -> list[tuple[int, int, int]]:
    """Cut a multi-cycle record into cycles: (i_baseline_start, i_heater_on, i_end) per cycle.

    The baseline of a cycle is its "settling" samples when phases were recorded; otherwise the last
    ``baseline_fraction`` of the gap since the previous heater-off (the earlier part of the gap is that cycle's
    recovery, which must not be read as baseline). A cycle ends where the next cycle's baseline starts.
    """
    t = np.asarray(time_s, dtype=float)
    blocks = heating_blocks(q_W_per_m)
    if not blocks:
        return []
    starts: list[int] = []
    for j, (h0, _h1) in enumerate(blocks):
        prev_end = blocks[j - 1][1] if j else 0
        if phase is not None:
            b = h0
            while b > prev_end and phase[b - 1] in ("settling", "checking"):
                b -= 1
            if b == h0 and j == 0:
                b = 0
        elif j == 0:
            b = 0
        else:
            t_from = t[h0] - baseline_fraction * (t[h0] - t[prev_end])
            b = int(np.searchsorted(t, t_from, side="left"))
            b = min(max(b, prev_end), h0)
        starts.append(b)
    out = []
    for j, (h0, _h1) in enumerate(blocks):
        end = starts[j + 1] if j + 1 < len(blocks) else t.size
        out.append((starts[j], h0, end))
    return out
