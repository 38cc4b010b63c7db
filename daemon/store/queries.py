"""Reads for the API, exports and offline tools; never writes."""

from __future__ import annotations

import json
from typing import Any

import numpy as np
import sqlite_utils

from linerig.daemon.reduction.alignment import power_held_from_each_sample


def list_runs(db: sqlite_utils.Database, limit: int = 100, site: str | None = None) -> list[dict[str, Any]]:
    where, params = ("WHERE site = ?", [site]) if site else ("", [])
    # the first sensor's latest result rides along, so a list can show k without a request per run
    first = "(SELECT {col} FROM results WHERE results.run_id = runs.id ORDER BY results.id DESC LIMIT 1)"
    sql = (f"SELECT id, created_utc, ended_utc, state, end_reason, site, location, depth_m, sample, material, "
           f"probe_serial, series_id, cycle, {first.format(col='sensor')} AS sensor, "
           f"{first.format(col='k_W_per_mK')} AS k_W_per_mK, {first.format(col='k_u_W_per_mK')} AS k_u_W_per_mK "
           f"FROM runs {where} ORDER BY id DESC LIMIT ?")
    return list(db.query(sql, [*params, limit]))


def run_detail(db: sqlite_utils.Database, run_id: int) -> dict[str, Any] | None:
    rows = list(db.query("SELECT * FROM runs WHERE id = ?", [run_id]))
    if not rows:
        return None
    run = rows[0]
    run["plan"] = json.loads(run.pop("plan_json") or "{}")
    run["events"] = list(db.query(
        "SELECT wall_utc, device_s, kind, state, reason, data FROM events WHERE run_id = ? ORDER BY id", [run_id]))
    results = {}
    for r in db.query("SELECT sensor, data, source FROM results WHERE run_id = ? ORDER BY id", [run_id]):
        results[r["sensor"]] = {**json.loads(r["data"]), "source": r["source"]}
    run["results"] = results
    run["n_samples"] = db.execute("SELECT count(*) FROM samples WHERE run_id = ?", [run_id]).fetchone()[0]
    return run


def series_detail(db: sqlite_utils.Database, series_id: int) -> dict[str, Any] | None:
    rows = list(db.query("SELECT * FROM series WHERE id = ?", [series_id]))
    if not rows:
        return None
    s = rows[0]
    s["plan"] = json.loads(s.pop("plan_json") or "{}")
    s["runs"] = list(db.query("SELECT id, cycle, state, end_reason, heat_start_device_s FROM runs "
                              "WHERE series_id = ? ORDER BY id", [series_id]))
    for run in s["runs"]:
        res = list(db.query("SELECT sensor, k_W_per_mK, k_u_W_per_mK, source FROM results WHERE run_id = ? "
                            "ORDER BY id", [run["id"]]))
        run["results"] = {r["sensor"]: r for r in res}
    s["cycles_done"] = sum(1 for r in s["runs"] if r["state"] == "done")
    return s


def run_arrays(db: sqlite_utils.Database, run_id: int) -> dict[str, Any]:
    """Samples of a run as arrays: time from heater on (baseline negative), the power held from each sample on
    (the reduction's and the CSV's convention: runs recorded by linerigd keep each reading as received, marked
    runs.q_timing = "reading", and are converted by reduction.alignment), temperatures by sensor."""
    run = next(iter(db.query("SELECT heat_start_device_s, sensor_names, q_timing FROM runs WHERE id = ?",
                             [run_id])), None)
    if run is None:
        raise KeyError(f"no run {run_id}")
    rows = list(db.execute(
        "SELECT device_s, q_W_per_m, temps_C, phase FROM samples WHERE run_id = ? ORDER BY n", [run_id]))
    names = json.loads(run["sensor_names"] or "[]")
    t0 = run["heat_start_device_s"] or 0.0
    t = np.array([r[0] for r in rows], dtype=float) - t0
    q = np.array([r[1] or 0.0 for r in rows], dtype=float)
    if run["q_timing"] == "reading":
        q = power_held_from_each_sample(t, q)
    temps = np.array([[np.nan if v is None else v for v in json.loads(r[2])] for r in rows],
                     dtype=float).reshape(len(rows), -1)
    return {"time_s": t, "q_W_per_m": q, "temps_C": {n: temps[:, i] for i, n in enumerate(names)},
            "phase": [r[3] for r in rows]}
