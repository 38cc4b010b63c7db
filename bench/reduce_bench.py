"""Reduction benchmark: error of each method on synthetic probe records, live cost, fit time, stable_at_s.

Records come from the cylinder-probe model (Blackwell 1954) with heat capacity, contact resistance, noise,
drift, a sagging supply, a finite sample (boundary held at the initial temperature) and a short heater
(finite-line deficit). Methods: auto (the default), the late-time line, the full probe model, and a plain
fixed-window fit (ΔT − mean baseline against ln t over the last 70 % of the heating, mean power) for comparison.

Run: .venv/bin/python bench/reduce_bench.py
"""

from __future__ import annotations

import math
import statistics
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from linerig.daemon.probe import ProbeProfile
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.data import ReductionError, RunData
from linerig.daemon.reduction.live import LiveReducer, replay
from linerig.daemon.reduction.synthetic import Medium, make_run

HEAT_S = 1000.0
DT_S = 0.5  # 2,000 heating samples
SOIL = Medium(1.2, 2.4e6)

CASES: list[tuple[str, Medium, dict[str, float], float]] = [
    # name, medium, make_run options, heater length (mm) for the profile
    ("heat capacity only", SOIL, {}, 1e5),
    ("contact h = 1", SOIL, {"h": 1.0}, 1e5),
    ("noise 10 mK", SOIL, {"noise_K": 0.01}, 1e5),
    ("drift 0.5 K/h", SOIL, {"drift_K_per_h": 0.5, "noise_K": 0.003}, 1e5),
    ("supply sag 10 %", SOIL, {"sag_fraction": 0.10, "noise_K": 0.003}, 1e5),
    ("finite sample R 30 mm", SOIL, {"outer_radius_m": 0.030, "noise_K": 0.003}, 1e5),
    ("short heater 60 mm", SOIL, {"length_m": 0.060, "noise_K": 0.003}, 60.0),
    ("water (gelled)", Medium(0.6065, 4.169e6), {"noise_K": 0.003}, 1e5),
    ("dry sand", Medium(0.30, 1.3e6), {"noise_K": 0.003, "q_W_per_m": 1.5}, 1e5),
    ("everything", SOIL, {"h": 0.5, "noise_K": 0.006, "drift_K_per_h": 0.3, "sag_fraction": 0.08}, 1e5),
]


def plain_fixed_window(data: RunData, start_frac: float = 0.3) -> float:
    t, q, T = data.time_s, data.q_W_per_m, data.temps_C["heater"]
    base = float(np.mean(T[t < 0])) if np.any(t < 0) else float(T[0])
    sel = (t >= start_frac * HEAT_S) & (t < HEAT_S)
    slope = np.polyfit(np.log(t[sel]), T[sel] - base, 1)[0]
    return float(np.mean(q[sel])) / (4 * math.pi * slope)


def live_cost_us(data: RunData, probe: ProbeProfile) -> float:
    red = LiveReducer(probe)
    costs = []
    for t, T, q in zip(data.time_s, data.temps_C["heater"], data.q_W_per_m, strict=True):
        if t > HEAT_S:
            break
        s = time.perf_counter()
        red.add(float(t), float(T), float(q))
        costs.append(time.perf_counter() - s)
    return statistics.median(costs[-500:]) * 1e6


def pct(x: float | None, ref: float) -> str:
    return "   —   " if x is None or not math.isfinite(x) else f"{100 * (x / ref - 1):+6.2f}%"


def main() -> int:
    rng = np.random.default_rng(20240501)
    print(f"heating {HEAT_S:.0f} s at {DT_S} s steps ({int(HEAT_S / DT_S)} heating samples), probe a = 0.635 mm, "
          "ρc_probe = 2.5 MJ/(m³·K)")
    hdr = (f"{'case':24} {'auto':>8} {'line':>8} {'model':>8} {'fixed':>8} {'U(k=2)':>7} {'method':>6} "
           f"{'live µs':>8} {'fit s':>6} {'stable/t_h':>10} {'Δk@stable':>9}  flags")
    print(hdr)
    print("-" * len(hdr))
    fit_times, live_costs = [], []
    for name, medium, opts, length_mm in CASES:
        data = make_run(medium, heat_s=HEAT_S, dt_s=DT_S, baseline_s=300.0, rng=rng, **opts)  # type: ignore[arg-type]
        probe = ProbeProfile(name="bench needle", radius_mm=0.635, heater_length_mm=length_mm,
                             heat_capacity_MJ_per_m3K=2.5)
        k = medium.k_W_per_mK
        s = time.perf_counter()
        try:
            auto = reduce_run(data, probe).sensors["heater"]
        except ReductionError as e:
            print(f"{name:24} failed: {e}")
            continue
        fit_s = time.perf_counter() - s
        fit_times.append(fit_s)
        k_line = auto.line.k_W_per_mK if auto.line else None
        k_model = auto.model.k_W_per_mK if auto.model and auto.model.success else None
        cost = live_cost_us(data, probe)
        live_costs.append(cost)
        _, ests = replay(data.time_s, data.temps_C["heater"], data.q_W_per_m, probe)
        stable = next((e for e in ests if e.stable), None)
        frac = f"{stable.t_s / HEAT_S:10.2f}" if stable else f"{'never':>10}"
        dk = pct(stable.k_W_per_mK, ests[-1].k_W_per_mK) if stable else "   —   "
        print(f"{name:24} {pct(auto.k_W_per_mK, k):>8} {pct(k_line, k):>8} {pct(k_model, k):>8} "
              f"{pct(plain_fixed_window(data), k):>8} {100 * (auto.k_U_W_per_mK or 0) / k:6.2f}% "
              f"{auto.method:>6} {cost:8.0f} {fit_s:6.2f} {frac} {dk:>9}  {','.join(auto.flags) or 'ok'}")
    print("-" * len(hdr))
    print(f"live update cost at 2,000 samples: median {statistics.median(live_costs):.0f} µs (aim ≤ 1000 µs)")
    print(f"full offline reduction (incl. probe-model fit and live replay): "
          f"median {statistics.median(fit_times):.2f} s, max {max(fit_times):.2f} s (aim ≤ 0.5 s)")
    print("errors are (estimate / true − 1); U(k=2) is the reported expanded uncertainty of the auto result; "
          "Δk@stable compares the live value at stable_at_s with the full-duration live value")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
