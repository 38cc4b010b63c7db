"""Spacing calibrations in the store: the history of a probe's radial sensors and the one write a calibration makes.

Read by the daemon (the spacing to apply when a run opens), by reports and re-reductions (the spacing current when
a run was made) and by ``linerig calibrate --spacing``, which also writes the rows (rejected ones too, so the
history shows the probe's whole life).
"""

from __future__ import annotations

import datetime as dt
import json
from typing import Any

import sqlite_utils

from linerig.daemon.probe import ProbeProfile
from linerig.daemon.workflows.spacing import SpacingOutcome, SpacingStatus, spacing_status

TABLE = "spacing_calibrations"


def spacing_history(db: sqlite_utils.Database, probe_serial: str) -> list[dict[str, Any]]:
    """Every spacing calibration of a probe, oldest first (empty for a store from before schema 6)."""
    if TABLE not in db.table_names() or not probe_serial:
        return []
    return list(db.query(f"SELECT * FROM {TABLE} WHERE probe_serial = ? ORDER BY created_utc, id", [probe_serial]))


def spacing_at(history: list[dict[str, Any]], sensor: str, when_utc: str | None) -> SpacingStatus:
    """The spacing calibration that was current at ``when_utc`` (a run's creation; None: now)."""
    now = None
    if when_utc:
        try:
            now = dt.datetime.fromisoformat(when_utc)
        except ValueError:
            now = None
    before = [c for c in history if not now or str(c.get("created_utc") or "") <= now.isoformat()]
    return spacing_status(before, sensor, now)


def record_spacing(db: sqlite_utils.Database, out: SpacingOutcome, notes: dict[str, Any]) -> int:
    """Store a spacing calibration (accepted or not) and return its id."""
    row = {
        "probe_serial": out.probe_serial, "sensor": out.sensor, "created_utc": out.created_utc,
        "run_id": out.run_ids[0] if out.run_ids else None, "reference": out.reference.label,
        "reference_rho_c_J_per_m3K": out.reference.rho_c_J_per_m3K, "nominal_spacing_m": out.nominal_m,
        "spacing_m": out.spacing_m, "spacing_u_m": out.spacing_u_m, "accepted": int(out.accepted),
        "notes": json.dumps({**notes, "reference_source": out.reference.source,
                             "reference_rho_c_u_J_per_m3K": out.reference.rho_c_u_J_per_m3K,
                             "run_ids": list(out.run_ids), "repeat_cv": out.repeat_cv, "reasons": list(out.reasons),
                             "warnings": list(out.warnings)}),
        "expires_utc": out.expires_utc,
    }
    with db.conn:
        return int(db[TABLE].insert(row).last_pk)  # type: ignore[arg-type]


def apply_spacings(probe: ProbeProfile, history: list[dict[str, Any]], when_utc: str | None
                   ) -> tuple[ProbeProfile, list[SpacingStatus]]:
    """The probe with each radial sensor at its calibrated spacing (with its uncertainty) as of ``when_utc``, and
    the calibrations used. Sensors without an accepted calibration keep the profile's nominal spacing."""
    used: list[SpacingStatus] = []
    for s in probe.sensors:
        if s.is_on_heater:
            continue
        st = spacing_at(history, s.name, when_utc)
        if st.spacing_m is None:
            continue
        probe = probe.with_sensor(s.name, st.spacing_m * 1e3, (st.spacing_u_m or 0.0) * 1e3, calibrated=True)
        used.append(st)
    return probe, used
