"""The database layout, as numbered migrations applied at start-up.

``PRAGMA user_version`` holds the number of the last migration applied; each
migration runs in one transaction with the version bump, so a crash leaves the
file at a whole version.
"""

from __future__ import annotations

import socket
import sqlite3
import uuid
from collections.abc import Callable
from datetime import UTC, datetime

import sqlite_utils


def _v1(db: sqlite_utils.Database) -> None:
    db["runs"].create({
        "id": int, "created_utc": str, "ended_utc": str, "state": str, "end_reason": str,
        "kind": str, "probe_serial": str, "sensor_names": str, "heater_length_m": float,
        "site": str, "location": str, "depth_m": float, "sample": str, "material": str,
        "moisture_pct": float, "dry_density_kg_per_m3": float, "notes": str, "operator": str,
        "plan_json": str, "heat_start_device_s": float, "heat_end_device_s": float,
        "frontend_boot_id": str, "series_id": int, "cycle": int,
    }, pk="id")
    db["series"].create({
        "id": int, "kind": str, "name": str, "site": str, "created_utc": str, "data": str,
    }, pk="id")
    db["samples"].create({
        "run_id": int, "n": int, "seq": int, "device_ms": int, "device_s": float, "phase": str,
        "heater_on": int, "heater_V": float, "heater_A": float, "supply_V": float, "q_W_per_m": float,
        "cj_C": float, "temps_C": str, "faults": str,
    }, pk=("run_id", "n"), foreign_keys=[("run_id", "runs", "id")])
    db["events"].create({
        "id": int, "run_id": int, "wall_utc": str, "device_s": float, "kind": str, "state": str,
        "reason": str, "data": str,
    }, pk="id")
    db["events"].create_index(["run_id"])
    db["results"].create({
        "id": int, "run_id": int, "created_utc": str, "sensor": str, "method": str, "k_W_per_mK": float,
        "k_u_W_per_mK": float, "flags": str, "data": str, "source": str,
    }, pk="id")
    db["results"].create_index(["run_id"])
    db["probes"].create({
        "serial": str, "name": str, "kind": str, "profile_toml": str, "added_utc": str,
    }, pk="serial")
    db["calibrations"].create({
        "id": int, "probe_serial": str, "run_id": int, "created_utc": str, "reference": str,
        "reference_k_W_per_mK": float, "measured_k_W_per_mK": float, "factor": float, "factor_u": float,
        "accepted": int, "notes": str, "expires_utc": str,
    }, pk="id")
    db["qualifications"].create({
        "id": int, "probe_serial": str, "created_utc": str, "criteria_toml": str, "results": str,
        "passed": int, "notes": str,
    }, pk="id")


def _v2(db: sqlite_utils.Database) -> None:
    """Series carry their plan and outcome, so a series can be resumed at a cycle boundary."""
    for name, kind in (("state", str), ("cycles", int), ("plan_json", str), ("probe_serial", str),
                       ("ended_utc", str), ("end_reason", str)):
        db["series"].add_column(name, kind)
    db["runs"].create_index(["series_id"])
    db["runs"].create_index(["state"])


def _v3(db: sqlite_utils.Database) -> None:
    """How a run's samples time their power: "reading" (each sample's own heater reading, which describes the
    interval ending at it: linerigd) or null/"held" (the power held from the sample on, as CSV files and the
    reduction have it: imports and invented demo data)."""
    db["runs"].add_column("q_timing", str)


def _v4(db: sqlite_utils.Database) -> None:
    """Which front end made a run (model, serial and firmware from its identity frame), for the test report."""
    for name in ("frontend_model", "frontend_serial", "frontend_firmware"):
        db["runs"].add_column(name, str)


def _v5(db: sqlite_utils.Database) -> None:
    """Who this file is, for a central copy (daemon/central/): a uuid made once, so rows pushed from two files never
    share a key even when a damaged file is replaced and ids start again at 1, and the rig's name, generated here
    and replaced by [sync] rig when the configuration gives one."""
    store = uuid.uuid4()
    host = "".join(c if c.isalnum() or c in "-_." else "-" for c in socket.gethostname()) or "rig"
    db["store_identity"].create({"store_uuid": str, "rig": str, "hostname": str, "created_utc": str},
                                pk="store_uuid")
    db["store_identity"].insert({"store_uuid": str(store), "rig": f"{host}-{store.hex[:6]}", "hostname": host,
                                 "created_utc": datetime.now(UTC).isoformat(timespec="milliseconds")})


def record_rig_name(conn: sqlite3.Connection, name: str) -> None:
    """Name the rig in its file: the daemon from [sync] rig, `linerig sync --rig` from the command line."""
    conn.execute("UPDATE store_identity SET rig = ?", [name])


def _v6(db: sqlite_utils.Database) -> None:
    """Spacing calibrations of dual needles (``workflows/spacing.py``): the effective distance of a radial sensor
    from the heater, found in a medium of known ρc, with its history (rejected ones too)."""
    db["spacing_calibrations"].create({
        "id": int, "probe_serial": str, "sensor": str, "created_utc": str, "run_id": int, "reference": str,
        "reference_rho_c_J_per_m3K": float, "nominal_spacing_m": float, "spacing_m": float, "spacing_u_m": float,
        "accepted": int, "notes": str, "expires_utc": str,
    }, pk="id")
    db["spacing_calibrations"].create_index(["probe_serial"])


MIGRATIONS: list[Callable[[sqlite_utils.Database], None]] = [_v1, _v2, _v3, _v4, _v5, _v6]
SCHEMA_VERSION = len(MIGRATIONS)


def current_version(conn: sqlite3.Connection) -> int:
    return int(conn.execute("PRAGMA user_version").fetchone()[0])


def migrate(db: sqlite_utils.Database,
            migrations: list[Callable[[sqlite_utils.Database], None]] | None = None) -> int:
    """Bring the file up to the last migration; refuse a file from a newer linerig."""
    steps = MIGRATIONS if migrations is None else migrations
    conn = db.conn
    have = current_version(conn)
    if have > len(steps):
        raise RuntimeError(f"database schema {have} is newer than this linerig ({len(steps)}); upgrade linerig")
    for number in range(have, len(steps)):
        conn.execute("BEGIN IMMEDIATE")  # DDL is transactional in SQLite: a crash leaves a whole version
        try:
            steps[number](db)
            conn.execute(f"PRAGMA user_version = {number + 1}")
        except BaseException:
            conn.execute("ROLLBACK")
            raise
        conn.execute("COMMIT")
    return len(steps)
