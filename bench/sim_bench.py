"""How fast and how accurate the simulator's physics is.

Prints steps per second of RadialModel (several grid sizes), AxialRadialModel and a whole SimulatedRig
(advance + sample), then the probe-temperature error against Blackwell's (1954) solution (mpmath Talbot
inversion) for several sample intervals. Run: .venv/bin/python bench/sim_bench.py
"""

from __future__ import annotations

import math
import time

import mpmath as mp

from linerig.daemon.sim.materials import get_material
from linerig.daemon.sim.physics import AxialRadialModel, RadialModel
from linerig.daemon.sim.rig_model import ProbeSpec, SimulatedRig


def rate(fn, min_s: float = 0.5) -> float:  # type: ignore[no-untyped-def]
    n, t0 = 0, time.perf_counter()
    while time.perf_counter() - t0 < min_s:
        for _ in range(100):
            fn()
        n += 100
    return n / (time.perf_counter() - t0)


def main() -> None:
    sand = get_material("moist-sand")
    needle = ProbeSpec.default_needle()
    print("steps per second (1 s steps, moist sand, 100 mm needle)")
    for n in (100, 200, 400):
        m = RadialModel(sand.k_W_per_mK, sand.rho_c_J_per_m3K, needle.radius_m, needle.probe_rho_c, 3000.0,
                        n_cells=n)
        r = rate(lambda m=m: m.step(10.0, 1.0))
        print(f"  RadialModel n_cells={n:4d}: {r:9.0f} /s  ({1e6 / r:6.1f} us per step)")
    m2 = AxialRadialModel(sand.k_W_per_mK, sand.rho_c_J_per_m3K, needle.radius_m, needle.probe_rho_c, 0.1, 3000.0)
    r = rate(lambda: m2.step(10.0, 1.0))
    print(f"  AxialRadialModel (default grid): {r:9.0f} /s  ({1e6 / r:6.1f} us per step)")
    rig = SimulatedRig(sand, needle, seed=0)
    rig.set_heater(True, 10.0)

    def tick() -> None:
        rig.advance(0.1)
        rig.sample()

    r = rate(tick)
    print(f"  SimulatedRig advance(0.1 s) + sample(): {r:9.0f} /s  (10 Hz at x100 needs 1000 /s)")

    print("\nprobe rise error vs Blackwell (1954), needle in moist sand, H = 3000 W/(m2 K), q = 10 W/m")
    k, rc, a, prc, H, q = sand.k_W_per_mK, sand.rho_c_J_per_m3K, needle.radius_m, needle.probe_rho_c, 3000.0, 10.0
    alpha, h, kappa = 2 * rc / prc, k / (a * H), k / rc
    mp.mp.dps = 20

    def lap(p: mp.mpf) -> mp.mpf:
        z = mp.sqrt(p)
        k0, k1 = mp.besselk(0, z), mp.besselk(1, z)
        return (2 / p) * (k0 + h * z * k1) / ((p / alpha) * (k0 + h * z * k1) + z * k1)

    times = (5.0, 10.0, 30.0, 100.0, 300.0, 1000.0)
    exact = [float(mp.invertlaplace(lap, kappa * t / a**2, method="talbot")) * q / (4 * math.pi * k) for t in times]
    print("  dt (s) " + "".join(f"{f't={t:g}s':>10s}" for t in times))
    for dt in (0.1, 0.5, 1.0, 2.0):
        m = RadialModel(k, rc, a, prc, H)
        errs = []
        for t, ex in zip(times, exact, strict=True):
            while m.t_s < t - 1e-9:
                m.step(q, min(dt, t - m.t_s))
            errs.append(100 * (m.probe_rise_K() - ex) / ex)
        print(f"  {dt:6.1f} " + "".join(f"{e:+9.3f}%" for e in errs))


if __name__ == "__main__":
    main()
