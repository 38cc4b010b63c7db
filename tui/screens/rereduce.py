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
from linerig.daemon.reduction.data import ReductionError, RunData
from linerig.daemon.reduction.drift import fit_baseline, no_baseline
from linerig.daemon.reduction.linesource import choose_window, fit_window
from linerig.daemon.reduction.live import replay
from linerig.daemon.reduction.superposition import log_time_regressor, power_steps
from linerig.daemon.store.queries import run_arrays

METHODS = {
    "auto": "late-time line, automatic window",
    "window": "late-time line, window you choose",
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


def _regressors(data: RunData, sensor: str) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, list[str]]:
    """Superposition regressors u = X/Q, y = ΔT/Q of the heating phase, and the baseline's flags."""
    i0, i1 = data.heating_span()
    t_all, T_all = data.time_s, data.temps_C[sensor]
    base = (t_all < 0) & np.isfinite(T_all)
    baseline = fit_baseline(t_all[base], T_all[base]) if np.any(base) else no_baseline(float(T_all[i0]))
    t, T, q = t_all[i0:i1], T_all[i0:i1], data.q_W_per_m[i0:i1]
    times, dq = power_steps(t, q)
    X, Q = log_time_regressor(t, times, dq)
    ok = (t > 0) & (Q > 0) & np.isfinite(T)
    t, X, Q, dT = t[ok], X[ok], Q[ok], (T - baseline.at(t))[ok]
    flags = baseline.flags(float(np.nanmax(dT)) if dT.size else 0.0, float(t[-1]) if t.size else 0.0)
    return t, X / Q, dT / Q, Q, flags


def rereduce(data: RunData, sensor: str, method: str, window_s: tuple[float, float] | None = None,
             probe: ProbeProfile | None = None) -> dict[str, Any]:
    """One sensor's result by ``method`` (a key of METHODS), in the ``linerig reduce --json`` shape."""
    if sensor not in data.temps_C:
        raise ReductionError(f"run has no sensor {sensor!r}; it has {', '.join(data.temps_C)}")
    r_m = None
    if probe is not None:
        r_m = probe.sensor_radius_m(sensor) if probe.has_sensor(sensor) else probe.radius_m
    if method == "live":
        red, ests = replay(data.time_s, data.temps_C[sensor], data.q_W_per_m, probe, sensor)
        if not ests:
            raise ReductionError("the live rule never produced an estimate on this run")
        e = ests[-1]
        return _result(e.k_W_per_mK, e.k_u_W_per_mK, e.window_s, e.alpha_m2_per_s, red.stable_at_s,
                       METHODS["live"], list(e.flags))
    t, u, y, Q, base_flags = _regressors(data, sensor)
    if t.size < 3:
        raise ReductionError("fewer than 3 heating samples")
    if method == "window":
        if window_s is None or not 0 < window_s[0] < window_s[1]:
            raise ReductionError("give a window start and end in seconds, start < end")
        t0, t1 = window_s
    elif method == "auto":
        axial_mm = probe.sensor(sensor).axial_mm if probe is not None and probe.has_sensor(sensor) else None
        wc = choose_window(t, u, y, Q, r_m=r_m, probe_C_J_per_m3K=probe.heat_capacity_J_per_m3K if probe else None,
                           length_m=probe.length_m if probe else None,
                           axial_m=axial_mm * 1e-3 if axial_mm is not None else None)
        t0, t1 = wc.t_start, wc.t_end
    else:
        raise ReductionError(f"unknown method {method!r}; known: {', '.join(METHODS)}")
    try:
        fit = fit_window(t, u, y, Q, t0, t1, r_m)
    except ValueError as exc:
        raise ReductionError(str(exc)) from exc
    flags = list(base_flags)
    if fit.short:
        flags.append("window_short")
    if fit.trend:
        flags.append("residual_trend")
    return _result(fit.k_W_per_mK, fit.k_u_stat_W_per_mK, fit.window_s, fit.alpha_m2_per_s, None,
                   METHODS[method], flags)


def _result(k: float, k_u: float, window: tuple[float, float], alpha: float | None, stable_at: float | None,
            method: str, flags: list[str]) -> dict[str, Any]:
    k, k_u = float(k), float(k_u)
    alpha = float(alpha) if alpha else None
    return {"k_W_per_mK": k, "k_u_W_per_mK": k_u, "resistivity_mK_per_W": 1.0 / k if k > 0 else None,
            "alpha_mm2_per_s": alpha * 1e6 if alpha else None, "rho_c_MJ_per_m3K": k / alpha * 1e-6 if alpha else None,
            "window_s": [float(window[0]), float(window[1])], "stable_at_s": stable_at, "method": method,
            "flags": flags}


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
