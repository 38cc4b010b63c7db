"""Heating against recovery: k from the heating, the recovery alone and both jointly, and how often
`heat_cool_disagree` fires, on clean records and on records where heating and recovery really differ.

Clean records come from two independent solvers: the simulator's finite-volume (r, z) model of the default 100 mm
needle (probe heat capacity, contact conductance, axial loss from the heater's ends) and the reduction's own
synthetic records (Blackwell probe model by Laplace inversion, finite-line deficit). Disagreeing records: a zone
next to the probe drying (lower k) while heating, and a power log that read 20 % high for the first minute.

Run: .venv/bin/python bench/recovery_bench.py
"""

from __future__ import annotations

import math
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from linerig.daemon.probe import ProbeProfile, load_probe_profile
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.data import ReductionError, RunData
from linerig.daemon.reduction.synthetic import Medium, make_run
from linerig.daemon.resources import default_probe_path
from linerig.daemon.sim.materials import get_material
from linerig.daemon.sim.physics import RadialModel
from linerig.daemon.sim.records import recorded_run
from linerig.daemon.sim.rig_model import ProbeSpec, SimulatedRig

NEEDLE = load_probe_profile(default_probe_path())
SEEDS = range(5)


def sim_run(material: str, heat_s: float, recover_s: float, seed: int, *, axial: bool = True,
            baseline_s: float = 120.0, q: float = 10.0) -> RunData:
    """The default needle in a simulated medium at 1 Hz: baseline, heating at q, recovery."""
    rig = SimulatedRig(get_material(material), ProbeSpec.default_needle(), seed=seed, axial_loss=axial)
    return recorded_run(rig, baseline_s=baseline_s, heat_s=heat_s, recover_s=recover_s, q_W_per_m=q)


def drying_run(heat_s: float, recover_s: float, seed: int, k_fraction: float = 0.7) -> RunData:
    """Moist sand whose shell within a·(1 + √(t/300 s)) of the probe keeps ``k_fraction`` of its k while heating."""
    sand = get_material("moist-sand")
    a = 0.635e-3
    m = RadialModel(sand.k_W_per_mK, sand.rho_c_J_per_m3K, a, 3.2e6, contact_conductance=3000.0)
    rng = np.random.default_rng(seed)
    t = np.arange(-120.0, heat_s + recover_s + 0.5, 1.0)
    q = np.where((t >= 0) & (t < heat_s), 10.0, 0.0)
    temps = np.empty_like(t)
    for i, ti in enumerate(t):
        temps[i] = 12.0 + m.probe_rise_K() + 0.01 * rng.standard_normal()
        if ti >= 0 and q[i] > 0:
            m.set_conductivity_within(a * (1 + math.sqrt((ti + 1.0) / 300.0)), k_fraction * sand.k_W_per_mK)
        for _ in range(20):
            m.step(q[i], 0.05)
    return RunData(t, q, {"heater": temps})


def startup_misreport(data: RunData) -> RunData:
    """The same record, with the power log 20 % high for the first 60 s of heating (a monitor still settling)."""
    q = data.q_W_per_m.copy()
    q[(data.time_s >= 0) & (data.time_s < 60)] *= 1.2
    return RunData(data.time_s, q, data.temps_C)


def pct(x: float | None, ref: float) -> str:
    return "   —   " if x is None or not math.isfinite(x) else f"{100 * (x / ref - 1):+6.2f}%"


def row(name: str, runs: list[RunData], k_true: float, probe: ProbeProfile) -> None:
    heat, rec, joint, u_rec, flags, windows = [], [], [], [], 0, []
    s = time.perf_counter()
    for d in runs:
        try:
            r = reduce_run(d, probe, stable_rule=False).sensors["heater"]
        except ReductionError as e:
            print(f"{name:40} failed: {e}")
            return
        heat.append(r.k_raw_W_per_mK)
        rec.append(r.recovery.k_W_per_mK if r.recovery else math.nan)
        joint.append(r.joint.k_W_per_mK if r.joint else math.nan)
        u_rec.append(r.recovery.k_u_W_per_mK / r.recovery.k_W_per_mK if r.recovery else math.nan)
        flags += "heat_cool_disagree" in r.flags
        if r.recovery:
            windows.append(r.recovery.window_s)
    el = (time.perf_counter() - s) / len(runs)
    th = float(runs[0].heater_off_s() or 0.0)
    win = (f"{windows[0][0] - th:4.0f}–{windows[0][1] - th:4.0f}" if windows else "   none  ")
    print(f"{name:40} {pct(float(np.mean(heat)), k_true):>8} {pct(float(np.nanmean(rec)), k_true):>8} "
          f"{pct(float(np.nanmean(joint)), k_true):>8} {100 * float(np.nanmean(u_rec)):6.2f}% {win:>10} "
          f"{flags:>3}/{len(runs):<3} {el:5.2f}")


def main() -> int:
    long_probe = ProbeProfile(name="long needle", radius_mm=0.635, heater_length_mm=1e5,
                              heat_capacity_MJ_per_m3K=3.2)
    short_probe = ProbeProfile(name="60 mm needle", radius_mm=0.635, heater_length_mm=60.0,
                               heat_capacity_MJ_per_m3K=3.2)
    sand = get_material("moist-sand")
    ks = sand.k_W_per_mK
    h_sand = ks / (0.635e-3 * 3000.0)
    print("k errors are (mean estimate / true − 1) over the seeds; u(rec) is the recovery's relative standard "
          "uncertainty; window is the recovery window in s after the heater went off (first seed)")
    hdr = (f"{'case':40} {'heating':>8} {'recovery':>8} {'joint':>8} {'u(rec)':>7} {'window':>10} "
           f"{'flag':>7} {'s/run':>5}")
    print(hdr)
    print("-" * len(hdr))
    print("clean records (the flag should not fire)")
    for heat_s in (300.0, 600.0):
        runs = [sim_run("moist-sand", heat_s, heat_s, seed) for seed in SEEDS]
        row(f"sim needle moist sand {heat_s:.0f}+{heat_s:.0f} s", runs, ks, NEEDLE)
    for key in ("saturated-sand", "moist-clay", "dry-sand"):
        runs = [sim_run(key, 300.0, 300.0, seed) for seed in SEEDS]
        row(f"sim needle {key} 300+300 s", runs, get_material(key).k_W_per_mK, NEEDLE)
    rng = np.random.default_rng(7)
    for name, medium, probe, length, heat_s in (
            ("synthetic long needle soil", Medium(1.2, 2.4e6), long_probe, None, 600.0),
            ("synthetic 60 mm needle soil", Medium(1.2, 2.4e6), short_probe, 0.060, 600.0),
            ("synthetic long needle water", Medium(0.6065, 4.169e6), long_probe, None, 600.0),
            ("synthetic 100 mm needle sand", Medium(ks, sand.rho_c_J_per_m3K), NEEDLE, 0.100, 300.0)):
        runs = [make_run(medium, q_W_per_m=10.0 if medium.k_W_per_mK > 1 else 5.0, probe_C=3.2e6,
                         h=medium.k_W_per_mK / (0.635e-3 * 3000.0), heat_s=heat_s, recover_s=heat_s,
                         baseline_s=120.0, noise_K=0.01, length_m=length, rng=rng) for _ in SEEDS]
        row(f"{name} {heat_s:.0f}+{heat_s:.0f} s", runs, medium.k_W_per_mK, probe)
    print("heating and recovery really differ (the flag should fire)")
    runs = [drying_run(300.0, 300.0, seed) for seed in SEEDS]
    row("drying shell at 70 % k 300+300 s", runs, ks, long_probe)
    runs = [drying_run(300.0, 300.0, seed, k_fraction=0.85) for seed in SEEDS]
    row("drying shell at 85 % k 300+300 s", runs, ks, long_probe)
    runs = [startup_misreport(make_run(Medium(ks, sand.rho_c_J_per_m3K), q_W_per_m=10.0, probe_C=3.2e6, h=h_sand,
                                       heat_s=300.0, recover_s=300.0, baseline_s=120.0, noise_K=0.01, rng=rng))
            for _ in SEEDS]
    row("power log +20 % in first 60 s", runs, ks, long_probe)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
