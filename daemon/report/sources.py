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
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Protocol

import numpy as np
import sqlite_utils

from linerig.daemon.probe import ProbeProfile, stored_profile
from linerig.daemon.reduction.api import RunReduction, reduce_run
from linerig.daemon.reduction.data import ReductionError, RunData
from linerig.daemon.store.queries import calibrations_of, run_arrays, run_detail
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
    if "probes" not in db.table_names():
        return {}
    return profiles_from_rows(db["probes"].rows)


def profiles_from_rows(rows: Iterable[dict[str, Any]]) -> dict[str, ProbeProfile]:
    """Probe rows (serial, profile_toml) as profiles by serial; a later row for a serial wins."""
    out: dict[str, ProbeProfile] = {}
    for row in rows:
        text = row.get("profile_toml")
        if not text:
            continue
        try:
            out[row["serial"]] = stored_profile(text, f"probe {row['serial']}")
        except (tomllib.TOMLDecodeError, ValueError, TypeError):  # ProbeProfileError is a ValueError
            continue
    return out


def calibration_history(db: sqlite_utils.Database, probe_serial: str) -> list[dict[str, Any]]:
    return calibrations_of(db, probe_serial)


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


@dataclass(frozen=True)
class AppliedCalibration:
    """The probe factor a run's results carry, its standard uncertainty, and in words where it comes from."""

    factor: float
    factor_u: float
    source: str


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

    def applied_calibration(self) -> AppliedCalibration:
        """The factor the run's stored results carry (with its u), else the calibration current at the run."""
        st = self.calibration_at_run()
        stored = next(iter(self.stored_results.values()), None)
        if stored and stored.get("calibration_factor"):
            f = float(stored["calibration_factor"])
            fu = stored.get("calibration_factor_u")
            if fu is None:  # stored before results carried the factor's u: the calibration's own, if it is it
                fu = st.factor_u if st.factor is not None and abs(st.factor - f) <= 1e-12 else 0.0
            return AppliedCalibration(f, float(fu or 0.0), "the factor applied to the stored result")
        if st.factor:
            return AppliedCalibration(st.factor, st.factor_u or 0.0,
                                      f"calibration {st.calibration_id} current at the run: {st.message}")
        return AppliedCalibration(1.0, 0.0, st.message)


def load_run(db: sqlite_utils.Database, run_id: int) -> RunRecord:
    detail = run_detail(db, run_id)
    if detail is None:
        raise SourceError(f"no run {run_id} in the database (list runs with `linerig export --list`)")
    arr = run_arrays(db, run_id) if detail.get("n_samples") else None
    serial = str(detail.get("probe_serial") or "")
    probe = probe_profiles(db).get(serial)
    if probe is not None:  # a dual needle's radial sensors at the spacing calibrated when the run was made
        probe, _ = apply_spacings(probe, spacing_history(db, serial), detail.get("created_utc"))
    return record_of(detail, arr, probe, calibration_history(db, serial))


def record_of(detail: dict[str, Any], arr: dict[str, Any] | None, probe: ProbeProfile | None,
              calibrations: list[dict[str, Any]]) -> RunRecord:
    """A run's detail and sample arrays (``store.queries`` shapes) as a RunRecord."""
    data = phase = None
    if arr is not None:
        try:
            data = RunData(arr["time_s"], arr["q_W_per_m"], dict(arr["temps_C"]))
        except ReductionError:
            data = None
        phase = list(arr["phase"])
    radius = finite(detail.get("sample_radius_m"))
    if probe is not None and radius:
        probe = probe.in_sample(radius)  # checked against this probe when the run started
    return RunRecord(int(detail["id"]), detail, data, probe, calibrations, phase)


def reduce_record(rec: RunRecord, **kwargs: Any) -> RunReduction:
    """Reduce the run's samples again (same code as the daemon) with the calibration its result was given."""
    if rec.data is None:
        raise SourceError(f"run {rec.run_id} has no samples to reduce")
    cal = rec.applied_calibration()
    kwargs.setdefault("calibration_factor", cal.factor)
    kwargs.setdefault("calibration_factor_u", cal.factor_u)
    rd, w = finite(rec.detail.get("dry_density_kg_per_m3")), finite(rec.detail.get("moisture_pct"))
    if rd and w is not None:
        kwargs.setdefault("bulk_density_kg_per_m3", rd * (1.0 + w / 100.0))
    return mark_ended_early(reduce_run(rec.data, rec.probe, **kwargs), rec.detail.get("state"))


ENDED_EARLY = ("aborted", "faulted")   # final states whose result rests on a shortened record (flag of that name)


def mark_ended_early(red: RunReduction, state: Any) -> RunReduction:
    """An aborted or faulted run's result says so in its flags, wherever it is reduced."""
    if state in ENDED_EARLY:
        for r in red.sensors.values():
            if state not in r.flags:
                r.flags.append(str(state))
    return red


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


class RunSource(Protocol):
    """Where the site-wide tools (``report --site``, ``profile``) read runs: one rig's file, or the central
    database of every rig (``daemon.central.read.CentralRuns``, whose rows also carry ``rig``)."""

    where: str

    def site_runs(self, site: str, borehole: str | None = None) -> list[dict[str, Any]]: ...

    def list_sites(self) -> list[dict[str, Any]]: ...

    def probe_profiles(self) -> dict[str, ProbeProfile]: ...

    def calibration_history(self, probe_serial: str) -> list[dict[str, Any]]: ...

    def load_run(self, run: dict[str, Any]) -> RunRecord: ...


class LocalRuns:
    """A RunSource over one rig's SQLite file."""

    def __init__(self, path: Path | str) -> None:
        self.db = open_db(path)
        self.where = str(path)

    def site_runs(self, site: str, borehole: str | None = None) -> list[dict[str, Any]]:
        return site_runs(self.db, site, borehole)

    def list_sites(self) -> list[dict[str, Any]]:
        return list_sites(self.db)

    def probe_profiles(self) -> dict[str, ProbeProfile]:
        return probe_profiles(self.db)

    def calibration_history(self, probe_serial: str) -> list[dict[str, Any]]:
        return calibration_history(self.db, probe_serial)

    def load_run(self, run: dict[str, Any]) -> RunRecord:
        return load_run(self.db, int(run["id"]))


def finite(v: Any) -> float | None:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def as_list(a: np.ndarray) -> list[float | None]:
    return [float(x) if math.isfinite(x) else None for x in np.asarray(a, dtype=float)]
