"""Grid and time-step convergence of chosen records: prints how far the stored (scale 1) solution is from a finer one.

    .venv/bin/python -m tests.reference.convergence ln-moist-sand-600s dn-pulse-moist-sand

For each record: the solution at half resolution (space and time), the stored resolution, and double resolution
in space, then in time; the table gives the differences at a few times, the largest over the record and the
largest relative error of the log-slope during heating. The record's stored `model_error` is the Richardson
estimate (scale 1 − scale ½)/3; the "1 − 2" column is the direct measurement it should match. Slow (the double
resolution costs about 8×); not a test.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

if __name__ == "__main__" and not __package__:
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
    __package__ = "tests.reference"

import numpy as np

from .build import solve
from .catalogue import CATALOGUE


def _on(t: np.ndarray, v: np.ndarray, tt: np.ndarray) -> np.ndarray:
    idx = np.searchsorted(np.round(t, 9), np.round(tt, 9))
    assert np.allclose(t[idx], tt)
    return v[idx]


def study(name: str) -> None:
    p = CATALOGUE[name]
    runs = {}
    for label, kw in (("half", {"scale": 0.5, "coarse_time": True}), ("base", {}), ("2x space", {"scale": 2.0})):
        t0 = time.perf_counter()
        sol, names, ncell = solve(p, **kw)
        runs[label] = sol
        print(f"{name} {label}: {ncell} cells, {sol.n_steps} steps, {time.perf_counter() - t0:.1f} s", flush=True)
    q = dict(p)
    q["time"] = {**p["time"], "ratio": p["time"]["ratio"] / 2, "first_units": max(1, p["time"]["first_units"] // 2),
                 "max_s": p["time"]["max_s"] / 2}
    t0 = time.perf_counter()
    runs["2x time"] = solve(q)[0]
    print(f"{name} 2x time: {runs['2x time'].n_steps} steps, {time.perf_counter() - t0:.1f} s", flush=True)
    common = runs["half"].t_s[runs["half"].t_s > 0]
    th = float(p["t_heat_s"])
    for i, s in enumerate(names):
        v = {k: _on(r.t_s, r.values[:, i], common) for k, r in runs.items()}
        peak = float(np.max(np.abs(v["base"])))
        print(f"  sensor {s}: peak ΔT {peak:.4f} K")
        picks = [x for x in (1.0, 10.0, 0.5 * th, th, p["t_end_s"]) if x >= common[0]]
        print("    t (s)      base ΔT     half−base   base−2xspace  base−2xtime  Richardson (half−base)/3")
        for x in picks:
            j = int(np.argmin(np.abs(common - x)))
            print(f"    {common[j]:8.1f} {v['base'][j]:11.5f} {v['half'][j] - v['base'][j]:+12.2e} "
                  f"{v['base'][j] - v['2x space'][j]:+12.2e} {v['base'][j] - v['2x time'][j]:+12.2e} "
                  f"{(v['half'][j] - v['base'][j]) / 3:+12.2e}")
        d_space = np.max(np.abs(v["base"] - v["2x space"]))
        d_time = np.max(np.abs(v["base"] - v["2x time"]))
        rich = np.max(np.abs(v["half"] - v["base"])) / 3
        print(f"    max over record: base−2xspace {d_space:.2e} K, base−2xtime {d_time:.2e} K, Richardson {rich:.2e} K"
              f" ({d_space / peak:.2%} / {d_time / peak:.2%} / {rich / peak:.2%} of the peak)")
        if th >= 60:
            w = (common >= 0.1 * th) & (common <= th)
            lt = np.log(common[w])
            sb = np.gradient(v["base"][w], lt)
            e_space = np.max(np.abs(np.gradient(v["base"][w] - v["2x space"][w], lt) / sb))
            e_time = np.max(np.abs(np.gradient(v["base"][w] - v["2x time"][w], lt) / sb))
            print(f"    log-slope during heating (0.1–1 t_heat): base−2xspace {e_space:.2e}, base−2xtime {e_time:.2e}"
                  " (relative)")


if __name__ == "__main__":
    for n in sys.argv[1:] or ["ln-moist-sand-600s"]:
        study(n)
