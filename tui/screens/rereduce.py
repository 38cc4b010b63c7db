"""Re-reduce a stored run with another window or method, and write a run out as files.

The reduction itself is the daemon's (``daemon.reduction``); this only prepares the run's samples, calls it
and puts the answer in the JSON shape of ``linerig reduce --json``. Everything here is CPU or file work, so
the UI calls it through ``asyncio.to_thread``.
"""

from __future__ import annotations

import csv
import json
import math
import sqlite3
from pathlib import Path
from typing import Any

import numpy as np
import sqlite_utils

from linerig.daemon.probe import ProbeProfile
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.data import ReductionError, RunData
from linerig.daemon.reduction.live import replay
from linerig.daemon.store.queries import run_arrays

METHODS = {   # the reduction's own methods (reduce_run), and the live rule replayed
    "auto": "automatic, as the daemon chooses",
    "line": "late-time line",
    "model": "probe model over the heating",
    "radial": "radial sensor: k and α from its response",
    "live": "the live rule, replayed",
}


class SamplesUnavailable(RuntimeError):
    """Neither the daemon nor a readable database could give this run's samples; the message says why."""


def run_data_from_arrays(arrays: dict[str, Any]) -> RunData:
    """A ``RunData`` from the JSON shape {time_s, q_W_per_m, temps_C: {sensor: [...]}} (None = missing)."""
    temps = {name: np.array([math.nan if v is None else v for v in vals], dtype=float)
             for name, vals in (arrays.get("temps_C") or {}).items()}
    return RunData(np.asarray(arrays["time_s"], dtype=float), np.asarray(arrays["q_W_per_m"], dtype=float), temps)


def read_samples_from_db(db_path: Path, run_id: int, created_utc: str | None) -> RunData:
    """Read-only fallback: the run's samples straight from the daemon's SQLite file (WAL readers never block it),
    with power moved to the interval it was delivered in, as the daemon's own ``samples`` reply has it.

    ``created_utc`` guards against reading the same run number from another database.
    """
    if not db_path.is_file():
        raise SamplesUnavailable(f"no database at {db_path}")
    con = sqlite3.connect(f"file:{db_path}?mode=ro", uri=True, timeout=2.0)
    try:
        row = con.execute("SELECT created_utc FROM runs WHERE id = ?", [run_id]).fetchone()
        if row is None or (created_utc and row[0] != created_utc):
            raise SamplesUnavailable(f"run {run_id} in {db_path} is not the run the daemon reported")
        arr = run_arrays(sqlite_utils.Database(con), run_id)
    except (sqlite3.Error, KeyError) as exc:
        raise SamplesUnavailable(f"cannot read {db_path}: {exc}") from exc
    finally:
        con.close()
    return RunData(arr["time_s"], arr["q_W_per_m"], dict(arr["temps_C"]))


def rereduce(data: RunData, sensor: str, method: str, window_s: tuple[float, float] | None = None,
             probe: ProbeProfile | None = None, calibration_factor: float = 1.0) -> dict[str, Any]:
    """One sensor's result by ``method`` (a key of METHODS) and, when given, the window: the same call and the
    same JSON as ``linerig reduce --json``, so the screen shows the numbers the reports and the CLI show."""
    if sensor not in data.temps_C:
        raise ReductionError(f"run has no sensor {sensor!r}; it has {', '.join(data.temps_C)}")
    if method not in METHODS:
        raise ReductionError(f"unknown method {method!r}; known: {', '.join(METHODS)}")
    if method == "live":
        red, ests = replay(data.time_s, data.temps_C[sensor], data.q_W_per_m, probe, sensor,
                           calibration_factor=calibration_factor)
        if not ests:
            raise ReductionError("the live rule never produced an estimate on this run")
        e = ests[-1]
        k = float(e.k_W_per_mK)
        alpha = float(e.alpha_m2_per_s) if e.alpha_m2_per_s else None
        return {"k_W_per_mK": k, "k_u_W_per_mK": float(e.k_u_W_per_mK),
                "resistivity_mK_per_W": 1.0 / k if k > 0 else None,
                "alpha_mm2_per_s": alpha * 1e6 if alpha else None,
                "rho_c_MJ_per_m3K": k / alpha * 1e-6 if alpha else None,
                "window_s": [float(e.window_s[0]), float(e.window_s[1])], "stable_at_s": red.stable_at_s,
                "method": "live", "flags": list(e.flags)}
    red_run = reduce_run(data, probe, method=method, window_s=window_s, sensors=[sensor],
                         calibration_factor=calibration_factor)
    return red_run.sensors[sensor].to_json()


def export_run(detail: dict[str, Any], data: RunData | None, folder: Path,
               extra: dict[str, Any] | None = None) -> list[Path]:
    """Write run-<id>.json (everything the daemon reported, plus ``extra``) and, with samples, run-<id>.csv.

    The CSV uses the input format of ``linerig reduce``: time_s, q_W_per_m, T_<sensor>_C, '#' comments.
    """
    folder.mkdir(parents=True, exist_ok=True)
    rid = detail.get("id", "x")
    out = [folder / f"run-{rid}.json"]
    out[0].write_text(json.dumps({**detail, **(extra or {})}, indent=2, default=str) + "\n")
    if data is not None:
        path = folder / f"run-{rid}.csv"
        with path.open("w", newline="") as fh:
            fh.write(f"# linerig run {rid}; site {detail.get('site') or '-'}; sample {detail.get('sample') or '-'}\n")
            w = csv.writer(fh)
            names = list(data.temps_C)
            w.writerow(["time_s", "q_W_per_m", *[f"T_{n}_C" for n in names]])
            for i, t in enumerate(data.time_s):
                w.writerow([f"{t:.3f}", f"{data.q_W_per_m[i]:.5g}",
                            *["" if not math.isfinite(data.temps_C[n][i]) else f"{data.temps_C[n][i]:.5f}"
                              for n in names]])
        out.append(path)
    return out
