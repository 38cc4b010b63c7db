"""Qualifications in the SQLite store (table ``qualifications``: one row per qualification of a probe serial)."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import sqlite_utils

from linerig.daemon.store.writer import Store

from .result import Qualification


class QualificationNotFound(KeyError):
    """No qualification with that id; ``linerig qualify list`` shows the stored ones."""


def open_store(path: Path) -> Store:
    """The database at ``path``, created and migrated if needed (the daemon's own schema)."""
    return Store(path)


SIMULATED_PREFIX = "simulated:"   # a simulated unit's key: never a real serial's history


def qualification_key(q: Qualification) -> str:
    """The serial a qualification is stored under: a simulated one never under the real probe's serial."""
    serial = q.profile.serial or q.profile.name
    return SIMULATED_PREFIX + serial if q.simulated else serial


def save_qualification(db: sqlite_utils.Database, q: Qualification) -> int:
    """Insert one row and return its id; the criteria are kept as TOML beside the results they judged."""
    row = {"probe_serial": qualification_key(q), "created_utc": q.created_utc,
           "criteria_toml": q.config.text, "results": json.dumps(q.to_json(), allow_nan=False),
           "passed": int(q.passed), "notes": q.notes}
    with db.conn:
        return int(db["qualifications"].insert(row).last_pk)


def list_qualifications(db: sqlite_utils.Database, probe_serial: str | None = None, limit: int = 100
                        ) -> list[dict[str, Any]]:
    where, params = ("WHERE probe_serial = ?", [probe_serial]) if probe_serial else ("", [])
    rows = db.query(f"SELECT id, probe_serial, created_utc, passed, notes, results FROM qualifications {where} "
                    "ORDER BY id DESC LIMIT ?", [*params, limit])
    out = []
    for r in rows:
        res = json.loads(r.pop("results") or "{}")
        r["passed"] = bool(r["passed"])
        r["simulated"] = bool(res.get("simulated"))
        r["failed"] = sorted({c["id"] for c in res.get("criteria", [])
                              if c["status"] in ("fail", "not_measured") and c.get("required", True)})
        out.append(r)
    return out


def load_qualification(db: sqlite_utils.Database, qual_id: int) -> dict[str, Any]:
    """The stored row with ``results`` parsed (the JSON of ``Qualification.to_json``)."""
    rows = list(db.query("SELECT * FROM qualifications WHERE id = ?", [qual_id]))
    if not rows:
        raise QualificationNotFound(f"no qualification {qual_id}; `linerig qualify list` shows the stored ones")
    row = rows[0]
    row["results"] = json.loads(row["results"] or "{}")
    row["passed"] = bool(row["passed"])
    return row
