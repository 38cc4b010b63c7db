"""The one writer of the database: samples batched, events at once, commits at least every second."""

from __future__ import annotations

import json
import sqlite3
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import sqlite_utils

from daemon.store.schema import migrate

FLUSH_INTERVAL_S = 0.25


class StoreError(RuntimeError):
    """The database cannot take writes (disk full, read-only, corrupt)."""


def utc_now() -> str:
    return datetime.now(UTC).isoformat(timespec="milliseconds")


SAMPLE_COLUMNS = ("run_id", "n", "seq", "device_ms", "device_s", "phase", "heater_on", "heater_V", "heater_A",
                  "supply_V", "q_W_per_m", "cj_C", "temps_C", "faults")


class Store:
    def __init__(self, path: Path) -> None:
        self.path = path
        path.parent.mkdir(parents=True, exist_ok=True)
        conn = sqlite3.connect(str(path), isolation_level=None, check_same_thread=False)
        self.db = sqlite_utils.Database(conn)
        conn.execute("PRAGMA journal_mode=WAL")
        conn.execute("PRAGMA synchronous=FULL")
        conn.execute("PRAGMA foreign_keys=ON")
        conn.isolation_level = ""  # back to implicit transactions for `with conn:`
        migrate(self.db)
        self._pending: list[tuple[Any, ...]] = []
        self.failed: str | None = None

    @property
    def conn(self) -> sqlite3.Connection:
        return self.db.conn

    def close(self) -> None:
        try:
            self.flush()
        finally:
            self.conn.close()

    def _write(self, fn: Any) -> Any:
        try:
            with self.conn:
                return fn()
        except sqlite3.Error as exc:
            self.failed = f"database write failed ({self.path}): {exc}"
            raise StoreError(self.failed) from exc

    # -- runs and events ---------------------------------------------------
    def create_run(self, fields: dict[str, Any]) -> int:
        row = {"created_utc": utc_now(), "state": "checking", **fields}
        return int(self._write(lambda: self.db["runs"].insert(row).last_pk))

    def update_run(self, run_id: int, fields: dict[str, Any]) -> None:
        self._write(lambda: self.db["runs"].update(run_id, fields))

    def event(self, run_id: int | None, kind: str, state: str | None, reason: str,
              device_s: float | None = None, data: dict[str, Any] | None = None) -> None:
        """Events are rare and matter: flush pending samples and commit now."""
        row = {"run_id": run_id, "wall_utc": utc_now(), "device_s": device_s, "kind": kind, "state": state,
               "reason": reason, "data": json.dumps(data) if data else None}

        def _do() -> None:
            self._flush_samples()
            self.db["events"].insert(row)

        self._write(_do)

    def add_result(self, run_id: int, sensor: str, result: dict[str, Any], source: str = "live") -> None:
        row = {"run_id": run_id, "created_utc": utc_now(), "sensor": sensor, "method": result.get("method"),
               "k_W_per_mK": result.get("k_W_per_mK"), "k_u_W_per_mK": result.get("k_u_W_per_mK"),
               "flags": json.dumps(result.get("flags", [])), "data": json.dumps(result), "source": source}
        self._write(lambda: self.db["results"].insert(row))

    # -- samples -----------------------------------------------------------
    def add_sample(self, row: tuple[Any, ...]) -> None:
        self._pending.append(row)

    def _flush_samples(self) -> None:
        if self._pending:
            rows, self._pending = self._pending, []
            marks = ",".join("?" * len(SAMPLE_COLUMNS))
            self.conn.executemany(f"INSERT OR IGNORE INTO samples ({','.join(SAMPLE_COLUMNS)}) VALUES ({marks})", rows)

    def flush(self) -> None:
        if self._pending:
            self._write(self._flush_samples)

    @property
    def pending(self) -> int:
        return len(self._pending)

    def close_interrupted_runs(self) -> list[int]:
        """Runs left open by a crash or power cut are closed as interrupted; their samples stay."""
        open_ids = [r["id"] for r in self.db.query(
            "SELECT id FROM runs WHERE state NOT IN ('done', 'aborted', 'faulted', 'interrupted')")]
        for rid in open_ids:
            self.update_run(rid, {"state": "interrupted", "ended_utc": utc_now(),
                                  "end_reason": "daemon stopped during the run"})
            self.event(rid, "state", "interrupted", "closed at daemon start: the previous daemon stopped mid-run")
        return open_ids
