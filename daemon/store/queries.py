"""Reads for the API, exports and offline tools; never writes."""

from __future__ import annotations

import json
from typing import Any

import numpy as np
import sqlite_utils


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
    events = list(db.query(
        "SELECT wall_utc, device_s, kind, state, reason, data FROM events WHERE run_id = ? ORDER BY id", [run_id]))
    results = list(db.query("SELECT sensor, data, source FROM results WHERE run_id = ? ORDER BY id", [run_id]))
    n = db.execute("SELECT count(*) FROM samples WHERE run_id = ?", [run_id]).fetchone()[0]
    return assemble_detail(rows[0], events, results, n)


def assemble_detail(run: dict[str, Any], events: list[dict[str, Any]], results: list[dict[str, Any]],
                    n_samples: int) -> dict[str, Any]:
    """A run's row with its plan, events, newest result per sensor and sample count: the shape every reader
    (the API, reports, the central store's readers) hands on."""
    run["plan"] = json.loads(run.pop("plan_json", None) or "{}")
    run["events"] = events
    run["results"] = {r["sensor"]: {**json.loads(r["data"]), "source": r["source"]} for r in results}
    run["n_samples"] = n_samples
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


HEATER_OFF_EVENT = "heater_off"  # events.kind: the front end's own switch-off time, data {"device_s": …}


def calibrations_of(db: sqlite_utils.Database, probe_serial: str) -> list[dict[str, Any]]:
    """A probe's calibration rows, oldest first (empty when the probe has none or the table is missing)."""
    if "calibrations" not in db.table_names() or not probe_serial:
        return []
    return list(db.query("SELECT * FROM calibrations WHERE probe_serial = ? ORDER BY created_utc, id",
                         [probe_serial]))


def heater_off_device_s(db: sqlite_utils.Database, run_id: int) -> float | None:
    """The front end's switch-off time of a run, as linerigd recorded it (None when it sent none)."""
    return heater_off_from_events(list(db.query("SELECT kind, data FROM events WHERE run_id = ? AND kind = ? "
                                                "ORDER BY id", [run_id, HEATER_OFF_EVENT])))


def heater_off_from_events(events: list[dict[str, Any]]) -> float | None:
    """The last switch-off time among a run's events (rows with ``kind`` and JSON ``data``), or None."""
    for e in reversed(events):
        if e.get("kind") != HEATER_OFF_EVENT:
            continue
        data = e.get("data")
        v = (json.loads(data or "{}") if isinstance(data, str) else (data or {})).get("device_s")
        return float(v) if isinstance(v, int | float) else None
    return None


def run_arrays(db: sqlite_utils.Database, run_id: int) -> dict[str, Any]:
    """Samples of a run as arrays: time from heater on (baseline negative), the power held from each sample on
    (the reduction's and the CSV's convention: runs recorded by linerigd keep each reading as received, marked
    runs.q_timing = "reading", and are converted by reduction.alignment with the front end's switch-off time, as
    the daemon's own final reduction did), temperatures by sensor."""
    run = next(iter(db.query("SELECT heat_start_device_s, sensor_names, q_timing FROM runs WHERE id = ?",
                             [run_id])), None)
    if run is None:
        raise KeyError(f"no run {run_id}")
    rows = list(db.execute(
        "SELECT device_s, q_W_per_m, temps_C, phase FROM samples WHERE run_id = ? ORDER BY n", [run_id]))
    return arrays_from_samples(run, rows, heater_off_device_s(db, run_id))


def arrays_from_samples(run: dict[str, Any], rows: list[Any], off: float | None = None) -> dict[str, Any]:
    """``rows`` (device_s, q_W_per_m, temps_C JSON, phase) in order of n, for the run (heat_start_device_s,
    sensor_names, q_timing) they belong to; ``off`` the front end's switch-off time when it sent one."""
    from linerig.daemon.reduction.alignment import power_held_from_each_sample  # the reduction: only when asked

    names = json.loads(run["sensor_names"] or "[]")
    t0 = run["heat_start_device_s"] or 0.0
    t = np.array([r[0] for r in rows], dtype=float) - t0
    q = np.array([r[1] or 0.0 for r in rows], dtype=float)
    if run["q_timing"] == "reading":
        q = power_held_from_each_sample(t, q, heater_off_s=off - t0 if off is not None else None)
    temps = np.array([[np.nan if v is None else v for v in json.loads(r[2])] for r in rows],
                     dtype=float).reshape(len(rows), -1)
    return {"time_s": t, "q_W_per_m": q, "temps_C": {n: temps[:, i] for i, n in enumerate(names)},
            "phase": [r[3] for r in rows]}
