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



# One row per sample and sensor, for anyone with an SQLite browser: the temperatures of a sample are a JSON array
# in the order of runs.sensor_names. time_s is from heater-on (null for a run that never heated); q_W_per_m is the
# power as the sample recorded it: runs.q_timing says whether that is the mean over the interval ending at the
# sample ("reading": linerigd) or the power held from it to the next ("held" or null: imports, demo data).
SENSOR_READINGS = """
CREATE VIEW sensor_readings AS
SELECT s.run_id AS run_id, r.site AS site, r.location AS location, r.depth_m AS depth_m, r.sample AS sample,
       r.probe_serial AS probe_serial, r.created_utc AS run_created_utc,
       json_extract(r.sensor_names, '$[' || t.key || ']') AS sensor, s.n AS n, s.phase AS phase,
       s.device_s AS device_s, s.device_s - r.heat_start_device_s AS time_s, t.value AS temperature_C,
       s.heater_on AS heater_on, s.q_W_per_m AS q_W_per_m, r.q_timing AS q_timing
FROM samples AS s JOIN runs AS r ON r.id = s.run_id, json_each(s.temps_C) AS t
"""

# One row per stored result and sensor with the main figures as columns (the JSON in results.data keeps the rest);
# latest is 1 for the newest result of its run and sensor, the one reports and exports use. A live estimate (source
# "live": the running line fit at heater-off) stores no method or resistivity (and, from earlier linerigs, α in
# m²/s); the view gives its resistivity from k and its α in mm²/s, and leaves the method null.
SENSOR_RESULTS = """
CREATE VIEW sensor_results AS
SELECT x.id AS result_id, x.run_id AS run_id, r.site AS site, r.location AS location, r.depth_m AS depth_m,
       r.sample AS sample, r.material AS material, r.probe_serial AS probe_serial,
       r.created_utc AS run_created_utc, x.sensor AS sensor, x.created_utc AS created_utc, x.source AS source,
       x.id = (SELECT max(y.id) FROM results AS y WHERE y.run_id = x.run_id AND y.sensor = x.sensor) AS latest,
       x.method AS method, x.k_W_per_mK AS k_W_per_mK, x.k_u_W_per_mK AS k_u_W_per_mK,
       json_extract(x.data, '$.k_U_W_per_mK') AS k_U_W_per_mK,
       coalesce(json_extract(x.data, '$.resistivity_mK_per_W'), 1.0 / x.k_W_per_mK) AS resistivity_mK_per_W,
       coalesce(json_extract(x.data, '$.resistivity_Ccm_per_W'), 100.0 / x.k_W_per_mK) AS resistivity_Ccm_per_W,
       coalesce(json_extract(x.data, '$.alpha_mm2_per_s'), json_extract(x.data, '$.alpha_m2_per_s') * 1e6)
           AS alpha_mm2_per_s,
       json_extract(x.data, '$.rho_c_MJ_per_m3K') AS rho_c_MJ_per_m3K,
       json_extract(x.data, '$.window_s[0]') AS window_start_s,
       json_extract(x.data, '$.window_s[1]') AS window_end_s,
       json_extract(x.data, '$.stable_at_s') AS stable_at_s,
       json_extract(x.data, '$.heating_s') AS heating_s,
       json_extract(x.data, '$.q_mean_W_per_m') AS q_mean_W_per_m,
       json_extract(x.data, '$.rise_K') AS rise_K,
       json_extract(x.data, '$.calibration_factor') AS calibration_factor,
       (SELECT group_concat(f.value, ';') FROM json_each(x.flags) AS f) AS flags
FROM results AS x LEFT JOIN runs AS r ON r.id = x.run_id
"""


def _v6(db: sqlite_utils.Database) -> None:
    """Views a person can query in any SQLite browser without parsing JSON (docs/store.md). A later migration that
    rebuilds runs, samples or results (sqlite-utils transform) drops and recreates them around it."""
    db.conn.execute(SENSOR_READINGS)
    db.conn.execute(SENSOR_RESULTS)


def _v7(db: sqlite_utils.Database) -> None:
    """Spacing calibrations of dual needles (``workflows/spacing.py``): the effective distance of a radial sensor
    from the heater, found in a medium of known ρc, with its history (rejected ones too)."""
    db["spacing_calibrations"].create({
        "id": int, "probe_serial": str, "sensor": str, "created_utc": str, "run_id": int, "reference": str,
        "reference_rho_c_J_per_m3K": float, "nominal_spacing_m": float, "spacing_m": float, "spacing_u_m": float,
        "accepted": int, "notes": str, "expires_utc": str,
    }, pk="id")
    db["spacing_calibrations"].create_index(["probe_serial"])


def _v8(db: sqlite_utils.Database) -> None:
    """The radius of the sample a lab run's probe sits in (null in the ground): its outer face ends the window."""
    db["runs"].add_column("sample_radius_m", float)


MIGRATIONS: list[Callable[[sqlite_utils.Database], None]] = [_v1, _v2, _v3, _v4, _v5, _v6, _v7, _v8]
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
