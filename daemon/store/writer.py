"""The one writer of the database: samples batched, events at once, commits at least every second.

Durability rules (see systemd/README.md for the storage advice that goes with them):
- WAL with ``synchronous=FULL``: a commit that returned survives a process kill and, on storage that
  honours flushes, a power cut. Samples are committed in batches every FLUSH_INTERVAL_S; an event
  commits at once together with every sample before it.
- A sample counts as logged only once its batch has committed (``last_committed``); the API publishes
  that mark so a client can tell what a crash could still take away (nothing older).
- Writes happen in one thread of the store's own (see Store), so a slow fsync on an SD card holds up the
  log, never the control loop.
- ``quick_check`` at open; a damaged file is moved aside, never overwritten, and a new one started.
- The first failed write (disk full, read-only, I/O error) latches ``failed``: every later write raises
  StoreError at once, the service turns the heater off, and reads keep working for the status API.
"""

from __future__ import annotations

import contextlib
import json
import logging
import math
import os
import queue
import sqlite3
import threading
import time
from collections.abc import Callable, Iterator
from datetime import UTC, datetime
from pathlib import Path
from typing import Any, TypeVar

import sqlite_utils

from linerig.daemon.store.schema import migrate, record_rig_name

log = logging.getLogger("linerigd.store")

FLUSH_INTERVAL_S = 0.25
JOURNAL_SIZE_LIMIT = 4 * 1024 * 1024  # a checkpointed WAL is truncated back to this
T = TypeVar("T")


class StoreError(RuntimeError):
    """The database cannot take writes (disk full, read-only, corrupt)."""


def _plain(value: Any) -> Any:
    """JSON-safe copy: numpy scalars to Python, NaN and infinities to null."""
    if hasattr(value, "item") and not isinstance(value, list | tuple | dict):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple | set):
        return [_plain(v) for v in value]
    return value


def to_json(value: Any) -> str:
    return json.dumps(_plain(value), allow_nan=False, default=str)


def utc_now() -> str:
    return datetime.now(UTC).isoformat(timespec="milliseconds")


SAMPLE_COLUMNS = ("run_id", "n", "seq", "device_ms", "device_s", "phase", "heater_on", "heater_V", "heater_A",
                  "supply_V", "q_W_per_m", "cj_C", "temps_C", "faults")
_INSERT_SAMPLES = (f"INSERT OR IGNORE INTO samples ({','.join(SAMPLE_COLUMNS)}) "
                   f"VALUES ({','.join('?' * len(SAMPLE_COLUMNS))})")
OPEN_RUN_STATES = ("checking", "settling", "heating", "recovering")


def _connect(path: Path) -> sqlite3.Connection:
    conn = sqlite3.connect(str(path), isolation_level=None, check_same_thread=False)
    conn.execute("PRAGMA busy_timeout=5000")
    return conn


def quick_check(path: Path) -> str:
    """'ok' or SQLite's first complaint about the file."""
    conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    try:
        return str(conn.execute("PRAGMA quick_check").fetchone()[0])
    except sqlite3.DatabaseError as exc:
        return str(exc)
    finally:
        conn.close()


class Store:
    """The database, written by one thread of its own so that fsync never stalls the control loop.

    Sample batches go to the writer thread without waiting (``flush``); the thread commits them in order and
    reports each commit through ``on_commit`` and a failure through ``on_failure`` (called in the writer
    thread: hand them to the event loop with call_soon_threadsafe). Rare writes (runs, events, results) wait
    for their own commit, which also commits every sample queued before them.
    """

    def __init__(self, path: Path, max_size_MB: float | None = None) -> None:
        self.path = path
        path.parent.mkdir(parents=True, exist_ok=True)
        self.moved_aside: Path | None = None
        if path.exists() and path.stat().st_size > 0:
            verdict = quick_check(path)
            if verdict != "ok":
                self.moved_aside = path.with_name(f"{path.name}.damaged-{time.strftime('%Y%m%dT%H%M%S')}")
                log.error("database %s failed its check (%s); moved aside to %s", path, verdict, self.moved_aside)
                for suffix in ("", "-wal", "-shm"):
                    src = Path(str(path) + suffix)
                    if src.exists():
                        os.replace(src, Path(str(self.moved_aside) + suffix))
        conn = _connect(path)
        self.db = sqlite_utils.Database(conn)
        conn.execute("PRAGMA journal_mode=WAL")
        conn.execute("PRAGMA synchronous=FULL")
        conn.execute("PRAGMA foreign_keys=ON")
        conn.execute(f"PRAGMA journal_size_limit={JOURNAL_SIZE_LIMIT}")
        migrate(self.db)
        if max_size_MB is not None:
            page = int(conn.execute("PRAGMA page_size").fetchone()[0])
            conn.execute(f"PRAGMA max_page_count={max(int(max_size_MB * 1e6 / page), 1)}")
        self._reader_conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True, check_same_thread=False)
        self._reader_conn.execute("PRAGMA busy_timeout=2000")
        self.reader = sqlite_utils.Database(self._reader_conn)
        self._pending: list[tuple[Any, ...]] = []
        self.failed: str | None = None
        self.last_committed: dict[str, int] | None = None
        self.on_commit: Callable[[dict[str, int]], None] = lambda mark: None
        self.on_failure: Callable[[str], None] = lambda why: None
        self._jobs: queue.Queue[_Job | None] = queue.Queue()
        self._thread = threading.Thread(target=self._work, name="linerigd-store", daemon=True)
        self._thread.start()
        if self.moved_aside is not None:
            self.event(None, "store", None, f"the previous database failed its check and was moved to "
                                            f"{self.moved_aside}; this is a new file")

    @property
    def conn(self) -> sqlite3.Connection:
        return self.db.conn

    def close(self) -> None:
        try:
            with contextlib.suppress(StoreError):
                self.flush(wait=True)
        finally:
            self._jobs.put(None)
            self._thread.join(30)
            if self.failed is None:
                with contextlib.suppress(sqlite3.Error):
                    self.conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
            self._reader_conn.close()
            self.conn.close()

    # -- the writer thread -------------------------------------------------
    def _work(self) -> None:
        while (job := self._jobs.get()) is not None:
            job.run(self)

    @contextlib.contextmanager
    def _tx_raw(self) -> Iterator[None]:
        self.conn.execute("BEGIN IMMEDIATE")
        try:
            yield
        except BaseException:
            with contextlib.suppress(sqlite3.Error):
                self.conn.execute("ROLLBACK")
            raise
        self.conn.execute("COMMIT")

    def _commit(self, rows: list[tuple[Any, ...]], fn: Callable[[], T] | None) -> T | None:
        """In the writer thread: one transaction with the rows, then fn. Raises StoreError."""
        if self.failed is not None:
            raise StoreError(self.failed)
        try:
            with self._tx_raw():
                if rows:
                    self.conn.executemany(_INSERT_SAMPLES, rows)
                result = fn() if fn is not None else None
        except sqlite3.Error as exc:
            self.failed = f"database write failed ({self.path}): {exc}"
            log.error("%s", self.failed)
            self.on_failure(self.failed)
            raise StoreError(self.failed) from exc
        if rows:
            self.last_committed = mark = {"run_id": rows[-1][0], "n": rows[-1][1]}
            self.on_commit(mark)
        return result

    def _write(self, fn: Callable[[], T]) -> T:
        """Commit every queued sample and then ``fn``, and wait for it: for rare writes."""
        if self.failed is not None:
            raise StoreError(self.failed)
        rows, self._pending = self._pending, []
        job = _Job(rows, fn, threading.Event())
        self._jobs.put(job)
        assert job.done is not None
        job.done.wait()
        if job.error is not None:
            raise job.error
        return job.result  # type: ignore[return-value]

    # -- runs, series and events -------------------------------------------
    def create_run(self, fields: dict[str, Any]) -> int:
        row = {"created_utc": utc_now(), "state": "checking", **fields}
        return int(self._write(lambda: self.db["runs"].insert(row).last_pk))

    def update_run(self, run_id: int, fields: dict[str, Any]) -> None:
        self._write(lambda: self.db["runs"].update(run_id, fields))

    def create_series(self, fields: dict[str, Any]) -> int:
        row = {"created_utc": utc_now(), "state": "running", **fields}
        return int(self._write(lambda: self.db["series"].insert(row).last_pk))

    def update_series(self, series_id: int, fields: dict[str, Any]) -> None:
        self._write(lambda: self.db["series"].update(series_id, fields))

    def event(self, run_id: int | None, kind: str, state: str | None, reason: str,
              device_s: float | None = None, data: dict[str, Any] | None = None) -> None:
        """Events are rare and matter: committed at once, with every sample before them."""
        row = {"run_id": run_id, "wall_utc": utc_now(), "device_s": device_s, "kind": kind, "state": state,
               "reason": reason, "data": to_json(data) if data else None}
        self._write(lambda: self.db["events"].insert(row))

    def add_result(self, run_id: int, sensor: str, result: dict[str, Any], source: str = "live") -> None:
        row = {"run_id": run_id, "created_utc": utc_now(), "sensor": sensor, "method": result.get("method"),
               "k_W_per_mK": result.get("k_W_per_mK"), "k_u_W_per_mK": result.get("k_u_W_per_mK"),
               "flags": to_json(result.get("flags", [])), "data": to_json(result), "source": source}
        self._write(lambda: self.db["results"].insert(row))

    def upsert_probe(self, serial: str, name: str, kind: str, profile_toml: str) -> None:
        row = {"serial": serial, "name": name, "kind": kind, "profile_toml": profile_toml, "added_utc": utc_now()}

        def _do() -> None:
            old = list(self.db.query("SELECT profile_toml FROM probes WHERE serial = ?", [serial]))
            if not old:
                self.db["probes"].insert(row)
            elif old[0]["profile_toml"] != profile_toml:
                self.db["probes"].update(serial, {"name": name, "kind": kind, "profile_toml": profile_toml})

        self._write(_do)

    def set_rig_name(self, name: str) -> None:
        """The rig's name for the central store ([sync] rig), recorded in the file so every sync uses it."""
        row = self.reader.execute("SELECT rig FROM store_identity").fetchone()
        if row is None or row[0] != name:
            self._write(lambda: record_rig_name(self.conn, name))

    # -- samples -----------------------------------------------------------
    def add_sample(self, row: tuple[Any, ...]) -> None:
        if self.failed is None:
            self._pending.append(row)

    def flush(self, wait: bool = False) -> bool:
        """Hand pending samples to the writer thread; True when there were some. ``wait``: until committed
        (raising StoreError if the commit failed)."""
        if not self._pending:
            return False
        if self.failed is not None:
            self._pending.clear()
            raise StoreError(self.failed)
        rows, self._pending = self._pending, []
        job = _Job(rows, None, threading.Event() if wait else None)
        self._jobs.put(job)
        if job.done is not None:
            job.done.wait()
            if job.error is not None:
                raise job.error
        return True

    @property
    def pending(self) -> int:
        return len(self._pending)

    @property
    def backlog(self) -> int:
        """Batches handed to the writer thread and not yet committed."""
        return self._jobs.qsize()

    def checkpoint(self) -> None:
        """Fold the WAL back into the file and truncate it (at the end of a run, when nothing waits)."""
        if self.failed is None:
            self._jobs.put(_Job([], None, None, checkpoint=True))  # after everything queued before it

    def close_interrupted_runs(self) -> list[int]:
        """Runs left open by a crash or power cut are closed as interrupted; their samples stay."""
        marks = ",".join("?" * len(OPEN_RUN_STATES))
        open_ids = [r["id"] for r in self.reader.query(f"SELECT id FROM runs WHERE state IN ({marks})",
                                                         list(OPEN_RUN_STATES))]
        for rid in open_ids:
            self.update_run(rid, {"state": "interrupted", "ended_utc": utc_now(),
                                  "end_reason": "daemon stopped during the run"})
            self.event(rid, "state", "interrupted", "closed at daemon start: the previous daemon stopped mid-run")
        series = [r["id"] for r in self.reader.query("SELECT id FROM series WHERE state = 'running'")]
        for sid in series:
            self.update_series(sid, {"state": "interrupted", "ended_utc": utc_now(),
                                     "end_reason": "daemon stopped during the series; resume it at a cycle "
                                                   "boundary with the resume request"})
        return open_ids


class _Job:
    """One unit of work for the writer thread."""

    def __init__(self, rows: list[tuple[Any, ...]], fn: Callable[[], Any] | None,
                 done: threading.Event | None, checkpoint: bool = False) -> None:
        self.rows = rows
        self.fn = fn
        self.done = done
        self.checkpoint = checkpoint
        self.result: Any = None
        self.error: StoreError | None = None

    def run(self, store: Store) -> None:
        try:
            if self.checkpoint:
                with contextlib.suppress(sqlite3.Error):
                    store.conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
            else:
                self.result = store._commit(self.rows, self.fn)
        except StoreError as exc:
            self.error = exc
        except Exception as exc:  # a bug in a write: reported to the waiter, never kills the thread
            self.error = StoreError(f"database write failed ({store.path}): {type(exc).__name__}: {exc}")
        finally:
            if self.done is not None:
                self.done.set()
