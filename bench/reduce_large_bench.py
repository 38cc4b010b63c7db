"""Large run CSVs: time and peak memory of `linerig reduce`'s work for 1 M and 10 M rows.

Each record is generated on the fly into a temporary folder (never committed): a line source (Carslaw & Jaeger
1959 §10.4, ΔT = q/(4πk)·E1(r²/4αt), recovery by superposition) in a made-up wet clay, sampled every 0.1 s
with 5 mK of temperature noise and 0.3 % of power-meter noise on every row, as a long logger export would be.
Each size runs in a fresh process so its peak RSS is its own. The time is split three ways so it shows who
owes what: reading the CSV, the reduction without the live verdict (``stable_rule=False``), and the verdict
(the per-sample replay of the live reducer that fills ``stable_at_s``).

Target (issue 19): 10 M rows in under 60 s and under 1 GB.

Run: .venv/bin/python bench/reduce_large_bench.py [--rows 1e6 1e7] [--verdict-rows 5e3 2e4]
"""

from __future__ import annotations

import argparse
import json
import math
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

K_TRUE = 1.6  # W/(m·K), invented wet clay
RHO_C = 2.9e6  # J/(m³·K)
RADIUS_M = 0.635e-3
Q_W_PER_M = 20.0
DT_S = 0.1
T0_C = 12.0


def _fixed(values: np.ndarray, decimals: int, int_digits: int) -> np.ndarray:
    """Fixed-width decimal text of each value as an (n, width) byte array: sign, zero-padded digits, point."""
    scaled = np.rint(np.abs(values) * 10**decimals).astype(np.int64)
    width = 1 + int_digits + 1 + decimals
    out = np.empty((values.size, width), dtype=np.uint8)
    out[:, 0] = np.where(values < 0, ord("-"), ord("+"))
    pos = width - 1
    for d in range(decimals + int_digits):
        if d == decimals:
            out[:, pos] = ord(".")
            pos -= 1
        out[:, pos] = ord("0") + (scaled // 10**d) % 10
        pos -= 1
    return out


def write_record(path: Path, rows: int, seed: int = 19) -> None:
    """Baseline 10 %, heating 60 %, recovery 30 % of the rows, written in blocks so memory stays small."""
    from scipy.special import exp1

    rng = np.random.default_rng(seed)
    alpha = K_TRUE / RHO_C
    n_base = rows // 10
    t_heat = 0.6 * rows * DT_S
    block = 1_000_000
    with path.open("wb") as fh:
        fh.write(b"# invented long record, Ostwick clay pit, borehole C2 (reduce_large_bench)\n")
        fh.write(b"time_s,q_W_per_m,T_heater_C\n")
        for start in range(0, rows, block):
            i = np.arange(start, min(start + block, rows))
            t = (i - n_base) * DT_S
            on = (t >= 0) & (t < t_heat)
            with np.errstate(divide="ignore", invalid="ignore"):
                arg = RADIUS_M**2 / (4 * alpha * np.where(t > 0, t, 1.0))
                rise = np.where(t > 0, exp1(arg), 0.0)
                after = t > t_heat
                arg2 = RADIUS_M**2 / (4 * alpha * np.where(after, t - t_heat, 1.0))
                rise = rise - np.where(after, exp1(arg2), 0.0)
            temp = T0_C + Q_W_PER_M / (4 * np.pi * K_TRUE) * rise + 0.005 * rng.standard_normal(i.size)
            q = np.where(on, Q_W_PER_M * (1 + 0.003 * rng.standard_normal(i.size)), 0.0)
            cols = [_fixed(t, 1, 7), _fixed(q, 4, 3), _fixed(temp, 5, 3)]
            comma = np.full((i.size, 1), ord(","), dtype=np.uint8)
            nl = np.full((i.size, 1), ord("\n"), dtype=np.uint8)
            fh.write(np.hstack([cols[0], comma, cols[1], comma, cols[2], nl]).tobytes())


def _cpu_s() -> float:
    r = resource.getrusage(resource.RUSAGE_SELF)
    return r.ru_utime + r.ru_stime


def measure(path: Path, verdict: bool) -> dict[str, float]:
    """Run in a child process: read, reduce without the verdict, then the verdict alone; peak RSS after each.

    Wall and CPU seconds both: on a shared machine the CPU time is the figure that does not depend on the load.
    """
    from linerig.daemon.reduction.api import reduce_run
    from linerig.daemon.reduction.live import replay
    from linerig.daemon.runcsv import read_run_csv

    out: dict[str, float] = {}
    w, c = time.perf_counter(), _cpu_s()
    data = read_run_csv(path)
    out |= {"read_s": time.perf_counter() - w, "read_cpu_s": _cpu_s() - c, "read_MB": _peak_MB()}
    w, c = time.perf_counter(), _cpu_s()
    red = reduce_run(data, None, stable_rule=False)
    out |= {"reduce_s": time.perf_counter() - w, "reduce_cpu_s": _cpu_s() - c, "reduce_MB": _peak_MB(),
            "k": red.sensors["heater"].k_W_per_mK or float("nan")}
    if verdict:
        w, c = time.perf_counter(), _cpu_s()
        replay(data.time_s, data.temps_C["heater"], data.q_W_per_m)
        out |= {"verdict_s": time.perf_counter() - w, "verdict_cpu_s": _cpu_s() - c, "verdict_MB": _peak_MB()}
    return out


def _peak_MB() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def _run_child(path: Path, verdict: bool) -> dict[str, float] | str:
    cmd = [sys.executable, __file__, "--child", str(path), *(["--verdict"] if verdict else [])]
    res = subprocess.run(cmd, capture_output=True, text=True, check=False)
    if res.returncode != 0:
        return (res.stderr.strip().splitlines() or ["no output"])[-1]
    return dict(json.loads(res.stdout))


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=float, nargs="+", default=[1e6, 1e7])
    ap.add_argument("--verdict-rows", type=float, nargs="*", default=[5e3, 2e4],
                    help="sizes at which the live verdict is replayed too; its cost at the larger sizes is projected "
                         "from these (with a measured power it grows faster than the rows: see the exponent)")
    ap.add_argument("--child", type=Path, help=argparse.SUPPRESS)
    ap.add_argument("--verdict", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        print(json.dumps(measure(args.child, args.verdict)))
        return 0
    print(f"line source in wet clay, k = {K_TRUE} W/(m·K), q = {Q_W_PER_M} W/m with 0.3 % meter noise, rows every "
          f"{DT_S} s; target: 10 M rows in < 60 s and < 1 GB")
    print("each stage: wall s / CPU s (CPU does not depend on the machine's load); peak RSS of the process after "
          "the stage; ~ marks a projection")
    hdr = (f"{'rows':>10} {'file MB':>8} {'read s':>11} {'reduce s':>11} {'verdict s':>15} {'total s':>13} "
           f"{'peak MB':>9} {'w/o verdict':>11} {'k':>7}")
    print(hdr)
    print("-" * len(hdr))
    measured: list[tuple[int, float, float]] = []  # rows, verdict CPU s, verdict extra MB
    sizes = sorted({*(int(r) for r in args.verdict_rows), *(int(r) for r in args.rows)})
    with tempfile.TemporaryDirectory(prefix="linerig-bench-") as tmp:
        for rows in sizes:
            path = Path(tmp) / f"run_{rows}.csv"
            write_record(path, rows)
            size_MB = path.stat().st_size / 1e6
            verdict = rows in {int(r) for r in args.verdict_rows}
            r = _run_child(path, verdict)
            path.unlink()
            if isinstance(r, str):
                print(f"{rows:>10} failed: {r}")
                continue
            v_cpu_txt, v_cpu, v_MB, mark = "not run", 0.0, r["reduce_MB"], ""
            if verdict:
                v_cpu, v_MB = r["verdict_cpu_s"], r["verdict_MB"]
                measured.append((rows, v_cpu, max(v_MB - r["reduce_MB"], 1.0)))
                v_cpu_txt = f"{r['verdict_s']:.1f}/{v_cpu:.1f}"
            elif len(measured) >= 2:
                (n0, c0, m0), (n1, c1, m1) = measured[-2], measured[-1]
                p_t = math.log(c1 / c0) / math.log(n1 / n0)
                p_m = math.log(m1 / m0) / math.log(n1 / n0)
                v_cpu = c1 * (rows / n1) ** p_t
                v_MB = r["reduce_MB"] + m1 * (rows / n1) ** p_m
                v_cpu_txt, mark = f"~{v_cpu:.0f} (n^{p_t:.1f})", "~"
            total_cpu = r["read_cpu_s"] + r["reduce_cpu_s"] + v_cpu
            print(f"{rows:>10} {size_MB:>8.0f} {r['read_s']:>5.1f}/{r['read_cpu_s']:<5.1f} "
                  f"{r['reduce_s']:>5.1f}/{r['reduce_cpu_s']:<5.1f} {v_cpu_txt:>15} "
                  f"{mark + f'{total_cpu:.0f}':>6} cpu s {mark + f'{v_MB:.0f}':>9} {r['reduce_MB']:>11.0f} "
                  f"{r['k']:>7.4f}")
    print("total = CPU s of read + reduce + verdict; 'w/o verdict' is the peak after read and reduce alone, what "
          "this reader and the reduction owe (the verdict's replay is rewritten under issue 12)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
