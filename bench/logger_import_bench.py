"""Logger import benchmark: CPU time and rows per second for a long export in each test dialect.

A day at 1 Hz (86,400 rows, a baseline, a 12-hour heating and its recovery) is written in every dialect of
tests/logger_exports.py and read by ``import_logger`` (decode, layout, columns, numbers, time, heater on), as
`linerig import` does before it writes the run CSV. The figure to watch is rows/s: a field day at 1 Hz should take
a second or two on a Raspberry Pi-class CPU.

Run: .venv/bin/python bench/logger_import_bench.py [--rows N]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))

from logger_exports import DIALECTS, export_text  # noqa: E402

from linerig.daemon.logger_import import import_logger, parse_map  # noqa: E402
from linerig.daemon.reduction.data import RunData  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=86_400)
    n = ap.parse_args().rows
    t = np.arange(n, dtype=float) - 600.0
    heat_s = 0.5 * n
    q = np.where((t >= 0) & (t < heat_s), 10.0, 0.0)
    temps = 12.0 + 0.8 * np.log1p(np.clip(t, 0.0, None)) - 0.8 * np.log1p(np.clip(t - heat_s, 0.0, None))
    data = RunData(t, q, {"probe": temps})
    print(f"{n} rows per export")
    print(f"{'dialect':<100} {'MB':>6} {'CPU s':>7} {'rows/s':>9}")
    for d in DIALECTS:
        raw = export_text(data, d, 100.0).encode(d.encoding)
        mapping = parse_map(d.map_toml.format(length_mm=100.0), "bench map")
        start = time.process_time()
        imported = import_logger(raw, "bench export", mapping)
        cpu = time.process_time() - start
        assert imported.data.time_s.size == n
        print(f"{d.name[:100]:<100} {len(raw) / 1e6:>6.1f} {cpu:>7.2f} {n / cpu:>9.0f}")


if __name__ == "__main__":
    main()
