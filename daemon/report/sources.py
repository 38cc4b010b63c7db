"""Reading what reports, exports and workflows need from the SQLite store (never the schema's owner: no
migrations here), and reducing a run again from its samples when its plots are wanted.

Also the single write these tools make: a calibration row (``record_calibration``).
"""

from __future__ import annotations

import datetime as dt
import json
import math
import sqlite3
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import sqlite_utils

from linerig.daemon.probe import ProbeProfile, stored_profile
from linerig.daemon.reduction.api import RunReduction, reduce_run
from linerig.daemon.reduction.data import ReductionError, RunData
from linerig.daemon.store.queries import run_arrays, run_detail
from linerig.daemon.store.spacings import apply_spacings, spacing_history
from linerig.daemon.workflows.calibration import CalibrationOutcome, CalibrationStatus, calibration_status
from linerig.daemon.workflows.cycles import split_cycles


class SourceError(ValueError):
    """The database or the run asked for is not there; the message says what to give instead."""


def open_db(path: Path | str, *, write: bool = False) -> sqlite_utils.Database:
    """Open an existing linerig database (never creates one: a typo must not give an empty report)."""
    p = Path(path)
    if not p.is_file():
        raise SourceError(f"no database at {p}: give --db PATH (the daemon's file, e.g. from `linerigd --db`)")
    db = sqlite_utils.Database(p)
    try:
        tables = db.table_names()
    except sqlite3.DatabaseError as e:
        raise SourceError(f"{p} is not a linerig database ({e}): give --db PATH of the daemon's file") from None
    if "runs" not in tables:
        raise SourceError(f"{p} is not a linerig database (no runs table)")
    if write and "calibrations" not in db.table_names():
        raise SourceError(f"{p} has no calibrations table: start linerigd once to bring the schema up to date")
    return db


def probe_profiles(db: sqlite_utils.Database) -> dict[str, ProbeProfile]:
    """Probe profiles stored with the probes (rows that do not parse are skipped).

    The column holds the profile TOML, or the flat JSON of the profile's fields that linerigd writes for the
    probes it loads; both are read, so a daemon-made run is reduced again with its probe's geometry.
    """
    out: dict[str, ProbeProfile] = {}
    if "probes" not in db.table_names():
        return out
    for row in db["probes"].rows:
        text = row.get("profile_toml")
        if not text:
            continue
        try:
            out[row["serial"]] = stored_profile(text, f"probe {row['serial']}")
        except (tomllib.TOMLDecodeError, ValueError, TypeError):  # ProbeProfileError is a ValueError
            continue
    return out


def calibration_history(db: sqlite_utils.Database, probe_serial: str) -> list[dict[str, Any]]:
    if "calibrations" not in db.table_names() or not probe_serial:
        return []
    return list(db.query("SELECT * FROM calibrations WHERE probe_serial = ? ORDER BY created_utc, id",
                         [probe_serial]))


def record_calibration(db: sqlite_utils.Database, out: CalibrationOutcome, notes: dict[str, Any]) -> int:
    """Store a calibration (accepted or not: the history keeps failures too) and return its id."""
    row = {
        "probe_serial": out.probe_serial, "run_id": out.run_ids[0] if out.run_ids else None,
        "created_utc": out.created_utc, "reference": out.reference.label,
        "reference_k_W_per_mK": out.reference.k_W_per_mK, "measured_k_W_per_mK": out.measured_k_W_per_mK,
        "factor": out.factor, "factor_u": out.factor_u, "accepted": int(out.accepted),
        "notes": json.dumps({**notes, "reference_source": out.reference.source,
                             "reference_k_u_W_per_mK": out.reference.k_u_W_per_mK,
                             "run_ids": list(out.run_ids), "repeat_cv": out.repeat_cv,
                             "reasons": list(out.reasons), "warnings": list(out.warnings)}),
        "expires_utc": out.expires_utc,
    }
    with db.conn:
        return int(db["calibrations"].insert(row).last_pk)  # type: ignore[arg-type]


@dataclass
class RunRecord:
    """One run as stored, its samples as RunData, its probe and the calibration that applies to it."""

    run_id: int
    detail: dict[str, Any]
    data: RunData | None
    probe: ProbeProfile | None
    calibrations: list[dict[str, Any]] = field(default_factory=list)
    phase: list[str] | None = None

    @property
    def stored_results(self) -> dict[str, dict[str, Any]]:
        return self.detail.get("results") or {}

    def calibration_at_run(self) -> CalibrationStatus:
        """The calibration that was current when the run was made (not today's)."""
        when = self.detail.get("created_utc")
        now = None
        if when:
            try:
                now = dt.datetime.fromisoformat(str(when))
            except ValueError:
                now = None
        before = [c for c in self.calibrations if not now or str(c.get("created_utc") or "") <= now.isoformat()]
        return calibration_status(before, now)


def load_run(db: sqlite_utils.Database, run_id: int) -> RunRecord:
    detail = run_detail(db, run_id)
    if detail is None:
        raise SourceError(f"no run {run_id} in the database (list runs with `linerig export --list`)")
    data = phase = None
    if detail.get("n_samples"):
        arr = run_arrays(db, run_id)
        temps = {k: v for k, v in arr["temps_C"].items()}
        try:
            data = RunData(arr["time_s"], arr["q_W_per_m"], temps)
        except ReductionError:
            data = None
        phase = list(arr["phase"])
    probe = probe_profiles(db).get(str(detail.get("probe_serial") or ""))
    if probe is not None:  # a dual needle's radial sensors at the spacing calibrated when the run was made
        probe, _ = apply_spacings(probe, spacing_history(db, str(detail.get("probe_serial") or "")),
                                  detail.get("created_utc"))
    return RunRecord(run_id, detail, data, probe, calibration_history(db, str(detail.get("probe_serial") or "")),
                     phase)


def reduce_record(rec: RunRecord, **kwargs: Any) -> RunReduction:
    """Reduce the run's samples again (same code as the daemon) with the calibration current at the run."""
    if rec.data is None:
        raise SourceError(f"run {rec.run_id} has no samples to reduce")
    st = rec.calibration_at_run()
    f, fu = (st.factor or 1.0), (st.factor_u or 0.0)
    stored = next(iter(rec.stored_results.values()), None)
    if stored and stored.get("calibration_factor") and abs(float(stored["calibration_factor"]) - f) > 1e-12:
        f, fu = float(stored["calibration_factor"]), 0.0  # what the daemon applied wins; its u is not stored
    kwargs.setdefault("calibration_factor", f)
    kwargs.setdefault("calibration_factor_u", fu)
    rd, w = finite(rec.detail.get("dry_density_kg_per_m3")), finite(rec.detail.get("moisture_pct"))
    if rd and w is not None:
        kwargs.setdefault("bulk_density_kg_per_m3", rd * (1.0 + w / 100.0))
    return reduce_run(rec.data, rec.probe, **kwargs)


def cycle_data(rec: RunRecord) -> list[tuple[int, RunData]]:
    """Split a multi-cycle run into per-cycle records, each with time from its own heater-on."""
    if rec.data is None:
        return []
    d = rec.data
    out = []
    for i, (b, h, e) in enumerate(split_cycles(d.time_s, d.q_W_per_m, rec.phase), start=1):
        t0 = float(d.time_s[h])
        sl = slice(b, e)
        out.append((i, RunData(d.time_s[sl] - t0, d.q_W_per_m[sl], {k: v[sl] for k, v in d.temps_C.items()})))
    return out


def site_runs(db: sqlite_utils.Database, site: str, borehole: str | None = None) -> list[dict[str, Any]]:
    """Runs of a site (and borehole) with their stored results, oldest first."""
    sql = "SELECT id FROM runs WHERE site = ?"
    params: list[Any] = [site]
    if borehole:
        sql += " AND location = ?"
        params.append(borehole)
    ids = [r["id"] for r in db.query(sql + " ORDER BY id", params)]
    return [d for d in (run_detail(db, i) for i in ids) if d is not None]


def series_runs(db: sqlite_utils.Database, series_id: int) -> list[dict[str, Any]]:
    ids = [r["id"] for r in db.query("SELECT id FROM runs WHERE series_id = ? ORDER BY cycle, id", [series_id])]
    return [d for d in (run_detail(db, i) for i in ids) if d is not None]


def list_sites(db: sqlite_utils.Database) -> list[dict[str, Any]]:
    return list(db.query("SELECT site, count(*) AS runs, count(DISTINCT location) AS boreholes FROM runs "
                         "WHERE site IS NOT NULL AND site != '' GROUP BY site ORDER BY site"))


def finite(v: Any) -> float | None:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def as_list(a: np.ndarray) -> list[float | None]:
    return [float(x) if math.isfinite(x) else None for x in np.asarray(a, dtype=float)]
