"""CSV and JSON exports of samples and results (this module is about files: it returns their text)."""

from __future__ import annotations

import contextlib
import csv
import io
import json
import math
from collections.abc import Sequence
from dataclasses import asdict
from typing import Any

import sqlite_utils

from linerig.daemon.probe import ProbeProfile
from linerig.daemon.runcsv import CAL_FACTOR, CAL_FACTOR_U, CAL_SOURCE, PROBE_PROFILE, PROBE_SERIAL, write_run_csv
from linerig.daemon.workflows.profiles import sensor_depth_m

from .sources import RunRecord

RESULT_COLUMNS = (
    "run_id", "site", "location", "tip_depth_m", "sensor_depth_m", "sample", "material", "moisture_pct",
    "dry_density_kg_per_m3",
    "probe_serial", "created_utc", "series_id", "cycle", "sensor", "k_W_per_mK", "k_u_W_per_mK",
    "resistivity_mK_per_W", "resistivity_Ccm_per_W", "alpha_mm2_per_s", "rho_c_MJ_per_m3K", "window_start_s",
    "window_end_s", "stable_at_s", "method", "calibration_factor", "flags",
)
META_KEYS = ("id", "created_utc", "ended_utc", "state", "end_reason", "kind", "probe_serial", "frontend_model",
             "frontend_serial", "frontend_firmware", "sensor_names",
             "heater_length_m", "site", "location", "depth_m", "sample", "material", "moisture_pct",
             "dry_density_kg_per_m3", "sample_radius_m", "notes", "operator", "series_id", "cycle", "plan",
             "n_samples")


def _clean(v: Any) -> Any:
    if isinstance(v, float) and not math.isfinite(v):
        return None
    if isinstance(v, dict):
        return {k: _clean(x) for k, x in v.items()}
    if isinstance(v, list | tuple):
        return [_clean(x) for x in v]
    return v


def result_rows(runs: Sequence[dict[str, Any]], probes: dict[str, ProbeProfile] | None = None
                ) -> list[dict[str, Any]]:
    """One row per run and sensor (runs as from ``run_detail``: metadata plus ``results``); the depth twice, the
    run's probe-tip depth and the sensor's own (tip depth minus the sensor's distance from the tip)."""
    rows = []
    for r in runs:
        probe = (probes or {}).get(str(r.get("probe_serial") or ""))
        tip = r.get("depth_m")
        for sensor, res in (r.get("results") or {}).items():
            win = res.get("window_s") or [None, None]
            k = res.get("k_W_per_mK")
            rows.append({
                "run_id": r.get("id"), "site": r.get("site"), "location": r.get("location"),
                "tip_depth_m": tip,
                "sensor_depth_m": sensor_depth_m(float(tip), probe, sensor) if tip is not None else None,
                "sample": r.get("sample"), "material": r.get("material"),
                "moisture_pct": r.get("moisture_pct"), "dry_density_kg_per_m3": r.get("dry_density_kg_per_m3"),
                "probe_serial": r.get("probe_serial"), "created_utc": r.get("created_utc"),
                "series_id": r.get("series_id"), "cycle": r.get("cycle"), "sensor": sensor, "k_W_per_mK": k,
                "k_u_W_per_mK": res.get("k_u_W_per_mK"),
                "resistivity_mK_per_W": res.get("resistivity_mK_per_W") or (1 / k if k else None),
                "resistivity_Ccm_per_W": res.get("resistivity_Ccm_per_W") or (100 / k if k else None),
                "alpha_mm2_per_s": res.get("alpha_mm2_per_s"), "rho_c_MJ_per_m3K": res.get("rho_c_MJ_per_m3K"),
                "window_start_s": win[0], "window_end_s": win[1], "stable_at_s": res.get("stable_at_s"),
                "method": res.get("method"), "calibration_factor": res.get("calibration_factor"),
                "flags": ";".join(res.get("flags") or []),
            })
    return rows


def results_csv(runs: Sequence[dict[str, Any]], probes: dict[str, ProbeProfile] | None = None) -> str:
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=RESULT_COLUMNS, lineterminator="\n")
    w.writeheader()
    for row in result_rows(runs, probes):
        w.writerow({k: ("" if v is None else v) for k, v in _clean(row).items()})
    return buf.getvalue()


def run_meta(r: dict[str, Any]) -> dict[str, Any]:
    """A run's metadata for JSON: what the store keeps as JSON text (sensor names) becomes a real JSON value."""
    out = {k: r.get(k) for k in META_KEYS if k in r}
    if isinstance(out.get("sensor_names"), str):
        with contextlib.suppress(ValueError):
            out["sensor_names"] = json.loads(out["sensor_names"])
    return out


def results_json(runs: Sequence[dict[str, Any]]) -> str:
    out = [{**run_meta(r), "results": r.get("results") or {}} for r in runs]
    return json.dumps(_clean({"runs": out}), indent=2, allow_nan=False)


def _event(e: dict[str, Any]) -> dict[str, Any]:
    data = e.get("data")
    if isinstance(data, str):
        with contextlib.suppress(ValueError):
            data = json.loads(data)
    return {**e, "data": data}


def samples_run_csv(rec: RunRecord) -> str:
    """The run CSV format (time_s, q_W_per_m, T_<sensor>_C), so ``linerig reduce`` reads it back.

    The header carries what the stored result was reduced with: the probe (serial and profile) and the probe
    factor with its standard uncertainty, so the file reduces to the stored result on its own.
    """
    if rec.data is None:
        raise ValueError(f"run {rec.run_id} has no samples")
    d = rec.detail
    comments = [f"linerig run {rec.run_id}"]
    comments += [f"{k}: {d[k]}" for k in ("site", "location", "depth_m", "sample", "material", "moisture_pct",
                                          "dry_density_kg_per_m3", "sample_radius_m", PROBE_SERIAL, "created_utc")
                 if d.get(k) not in (None, "")]
    cal = rec.applied_calibration()
    comments += [f"{CAL_FACTOR}: {cal.factor!r}", f"{CAL_FACTOR_U}: {cal.factor_u!r}",
                 f"{CAL_SOURCE}: {' '.join(cal.source.split())}"]
    if rec.probe is not None:
        comments.append(f"{PROBE_PROFILE}: {json.dumps(asdict(rec.probe), allow_nan=False)}")
    buf = io.StringIO()
    write_run_csv(rec.data, buf, comments)
    return buf.getvalue()


def samples_raw_csv(db: sqlite_utils.Database, rec: RunRecord) -> str:
    """Every stored sample column, temperatures spread into T_<sensor>_C, time from heater on added."""
    names = json.loads(rec.detail.get("sensor_names") or "[]")
    t0 = rec.detail.get("heat_start_device_s") or 0.0
    cols = ["n", "seq", "device_ms", "device_s", "time_s", "phase", "heater_on", "heater_V", "heater_A", "supply_V",
            "q_W_per_m", "cj_C", *[f"T_{n}_C" for n in names], "faults"]
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(cols)
    for s in db.query("SELECT * FROM samples WHERE run_id = ? ORDER BY n", [rec.run_id]):
        temps = json.loads(s.get("temps_C") or "[]")
        row = [s.get("n"), s.get("seq"), s.get("device_ms"), s.get("device_s"),
               (s["device_s"] - t0) if s.get("device_s") is not None else None, s.get("phase"), s.get("heater_on"),
               s.get("heater_V"), s.get("heater_A"), s.get("supply_V"), s.get("q_W_per_m"), s.get("cj_C"),
               *[temps[i] if i < len(temps) else None for i in range(len(names))], s.get("faults") or ""]
        w.writerow(["" if v is None else v for v in row])
    return buf.getvalue()


def run_json(rec: RunRecord) -> str:
    """Metadata, events, stored results and the samples as arrays, in one document."""
    d = rec.detail
    doc: dict[str, Any] = {"run": run_meta(d), "events": [_event(e) for e in d.get("events") or []],
                           "results": rec.stored_results}
    if rec.data is not None:
        doc["samples"] = {"time_s": rec.data.time_s.tolist(), "q_W_per_m": rec.data.q_W_per_m.tolist(),
                          "temps_C": {k: v.tolist() for k, v in rec.data.temps_C.items()},
                          "phase": rec.phase}
    return json.dumps(_clean(doc), indent=2, allow_nan=False)
