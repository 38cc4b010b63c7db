"""Push speed to PostgreSQL: rows per second for a large rig store, and what a second push (nothing to send) costs.

The store is made on the fly (never committed): the daemon's own schema, then runs at 1 Hz with four thermocouples,
their events and results, written straight into the file in big transactions. A real PostgreSQL server is started
as the tests start it (tests/pg_server.py), the push runs as a rig role under row-level security.

Run: .venv/bin/python bench/sync_bench.py [--samples 2000000] [--runs 200]   (--quick: 200 000 samples)
"""

from __future__ import annotations

import argparse
import json
import math
import sqlite3
import sys
import tempfile
import time
from pathlib import Path

import psycopg

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from linerig.daemon.central.local import LocalStore  # noqa: E402
from linerig.daemon.central.push import push  # noqa: E402
from linerig.daemon.central.schema import migrate  # noqa: E402
from linerig.daemon.store.writer import SAMPLE_COLUMNS, Store  # noqa: E402
from tests.pg_server import pg_server  # noqa: E402

SENSORS = ["heater", "tip300", "tip600", "tip900"]


def make_store(path: Path, runs: int, samples: int) -> None:
    """``runs`` ended runs sharing ``samples`` 1 Hz samples, five events and one result each."""
    Store(path).close()  # the schema, as the daemon makes it
    per_run = max(samples // runs, 1)
    conn = sqlite3.connect(str(path), isolation_level=None)
    conn.execute("PRAGMA journal_mode=WAL")
    conn.execute("PRAGMA synchronous=OFF")
    marks = ",".join("?" * len(SAMPLE_COLUMNS))
    for rid in range(1, runs + 1):
        conn.execute("BEGIN")
        conn.execute("INSERT INTO runs (id, created_utc, ended_utc, state, end_reason, kind, probe_serial, "
                     "sensor_names, heater_length_m, site, location, depth_m, heat_start_device_s, q_timing) "
                     "VALUES (?, ?, ?, 'done', 'recovery logged', 'single', 'BENCH-1', ?, 0.1, 'Bench site', "
                     "'BH1', 1.0, 600.0, 'reading')",
                     (rid, f"2031-01-01T00:{rid % 60:02d}:00.000+00:00", "2031-01-01T01:00:00.000+00:00",
                      json.dumps(SENSORS)))
        rows = []
        for n in range(1, per_run + 1):
            t = float(n)
            heating = 600 <= n < 1200
            rise = 0.4 * math.log(max(t - 600, 1.0)) if heating else 0.0
            rows.append((rid, n, n, n * 1000, t, "heating" if heating else "recovering", int(heating), 4.0 if heating
                         else 0.0, 0.1 if heating else 0.0, 12.4, 4.0 if heating else 0.0, 19.5,
                         json.dumps([round(15.0 + rise + 0.001 * (n % 7), 4)] * len(SENSORS)),
                         json.dumps([None] * len(SENSORS))))
        conn.executemany(f"INSERT INTO samples ({','.join(SAMPLE_COLUMNS)}) VALUES ({marks})", rows)
        for kind in ("checking", "settling", "heating", "recovering", "done"):
            conn.execute("INSERT INTO events (run_id, wall_utc, device_s, kind, state, reason) "
                         "VALUES (?, '2031-01-01T00:00:00.000+00:00', 0.0, 'state', ?, 'bench')", (rid, kind))
        conn.execute("INSERT INTO results (run_id, created_utc, sensor, method, k_W_per_mK, k_u_W_per_mK, flags, "
                     "data, source) VALUES (?, '2031-01-01T01:00:00.000+00:00', 'heater', 'line', 1.2, 0.02, '[]', "
                     "?, 'final')", (rid, json.dumps({"k_W_per_mK": 1.2, "k_u_W_per_mK": 0.02, "flags": []})))
        conn.execute("COMMIT")
    conn.close()


def main() -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--samples", type=int, default=2_000_000)
    p.add_argument("--runs", type=int, default=200)
    p.add_argument("--quick", action="store_true", help="200 000 samples in 40 runs")
    args = p.parse_args()
    samples, runs = (200_000, 40) if args.quick else (args.samples, args.runs)
    with tempfile.TemporaryDirectory(prefix="linerig-syncbench-") as tmp:
        path = Path(tmp) / "rig.db"
        t0 = time.perf_counter()
        make_store(path, runs, samples)
        made_s = time.perf_counter() - t0
        size_MB = sum(f.stat().st_size for f in Path(tmp).iterdir()) / 1e6
        with pg_server() as srv:
            with psycopg.connect(srv.url(), autocommit=True) as conn:
                conn.execute("CREATE DATABASE bench")
            with psycopg.connect(srv.url("bench")) as conn:
                migrate(conn)
                conn.execute("CREATE ROLE bench_rig LOGIN IN ROLE linerig_rig")
                conn.commit()
            local = LocalStore(path)
            try:
                with psycopg.connect(srv.url("bench", "bench_rig")) as conn:
                    first = push(local, conn)
                    second = push(local, conn)
            finally:
                local.close()
    print(f"sync bench: a store of {runs} runs, {first.pushed['samples']:,} samples ({size_MB:.0f} MB, made in "
          f"{made_s:.1f} s), pushed to a local PostgreSQL server over its Unix socket, as a rig role under "
          "row-level security")
    print(f"{'push':<28}{'rows':>12}{'seconds':>10}{'rows/s':>12}{'samples/s':>12}")
    for label, s in (("first (everything)", first), ("second (nothing to send)", second)):
        per_sample = s.pushed["samples"] / s.seconds if s.seconds > 0 else 0.0
        print(f"{label:<28}{s.rows:>12,}{s.seconds:>10.2f}{s.rows_per_s:>12,.0f}{per_sample:>12,.0f}")
    return 0 if second.rows == 0 and first.pushed["samples"] == runs * max(samples // runs, 1) else 1


if __name__ == "__main__":
    raise SystemExit(main())
