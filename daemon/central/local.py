"""A rig's SQLite store as a push sees it: read-only, in short reads, so the daemon's writer never waits on us.

A file from an older linerig is first brought up to date by the same migrations the daemon runs (that needs write
access to it); everything else is read through a ``mode=ro`` connection, one query at a time: WAL lets the daemon
go on committing, and no long read transaction holds its checkpoints back.
"""

from __future__ import annotations

import queue
import sqlite3
import threading
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any, TypeVar

import sqlite_utils

from linerig.daemon.central.errors import LocalStoreError
from linerig.daemon.store.schema import SCHEMA_VERSION, current_version, migrate

# what a push carries, in the order it pushes; any other table in the file is named in the summary as not carried
CARRIED_TABLES = ("probes", "series", "runs", "samples", "events", "results", "calibrations", "qualifications",
                  "spacing_calibrations")
LOCAL_ONLY_TABLES = ("store_identity",)  # the identity travels as the central stores row
T = TypeVar("T")


@dataclass(frozen=True)
class Identity:
    store_uuid: str
    rig: str
    hostname: str | None
    created_utc: str | None


class LocalStore:
    def __init__(self, path: Path) -> None:
        self.path = path
        if not path.is_file():
            raise LocalStoreError(f"no database at {path}: give --db PATH (the daemon's file, e.g. from "
                                  "`linerigd --db` or [daemon] database in rig.toml)")
        self.migrated_from: int | None = None
        self._bring_up_to_date()
        self.conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True, check_same_thread=False)
        self.conn.execute("PRAGMA busy_timeout=5000")
        self.identity = self._identity()

    def close(self) -> None:
        self.conn.close()

    def _bring_up_to_date(self) -> None:
        try:
            conn = sqlite3.connect(f"file:{self.path}?mode=ro", uri=True)
            try:
                tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
                have = current_version(conn)
            finally:
                conn.close()
        except sqlite3.DatabaseError as exc:
            raise LocalStoreError(f"{self.path} is not a linerig database ({exc})") from None
        if "runs" not in tables:
            raise LocalStoreError(f"{self.path} is not a linerig database (no runs table)")
        if have > SCHEMA_VERSION:
            raise LocalStoreError(f"{self.path} has schema {have}, newer than this linerig ({SCHEMA_VERSION}): "
                                  "upgrade linerig")
        if have == SCHEMA_VERSION:
            return
        try:
            conn = sqlite3.connect(str(self.path), isolation_level=None)
            conn.execute("PRAGMA busy_timeout=5000")
            try:
                migrate(sqlite_utils.Database(conn))
            finally:
                conn.close()
        except sqlite3.Error as exc:
            raise LocalStoreError(f"{self.path} has schema {have} and must be brought up to {SCHEMA_VERSION} "
                                  f"before a push, which needs write access ({exc}): start linerigd on it once, "
                                  "or run the sync as the file's owner") from None
        self.migrated_from = have

    def _identity(self) -> Identity:
        row = self.conn.execute("SELECT store_uuid, rig, hostname, created_utc FROM store_identity").fetchone()
        if row is None or not row[0]:
            raise LocalStoreError(f"{self.path}: its identity row is missing (table store_identity); the file was "
                                  "edited by hand: restore it from a backup")
        return Identity(str(row[0]), str(row[1] or ""), row[2], row[3])

    def schema_version(self) -> int:
        return current_version(self.conn)

    def tables(self) -> list[str]:
        return [r[0] for r in self.conn.execute(
            "SELECT name FROM sqlite_master WHERE type = 'table' AND name NOT LIKE 'sqlite_%' ORDER BY name")]

    def not_carried(self) -> list[str]:
        return [t for t in self.tables() if t not in CARRIED_TABLES and t not in LOCAL_ONLY_TABLES]

    def columns(self, table: str) -> list[str]:
        return [r[1] for r in self.conn.execute(f"PRAGMA table_info({table})")]

    def rows(self, table: str, columns: list[str], where: str = "", params: tuple[Any, ...] = ()
             ) -> list[tuple[Any, ...]]:
        cols = ", ".join(f'"{c}"' for c in columns)
        return self.conn.execute(f"SELECT {cols} FROM {table} {where}", params).fetchall()

    def sample_counts(self) -> dict[int, int]:
        return {int(r[0]): int(r[1]) for r in self.conn.execute(
            "SELECT run_id, count(*) FROM samples GROUP BY run_id")}

    def sample_chunks(self, run_id: int, columns: list[str], chunk: int) -> Iterator[list[tuple[Any, ...]]]:
        """A run's samples in order of n, ``chunk`` rows per read (each read its own short transaction)."""
        cols = ", ".join(f'"{c}"' for c in columns)
        after = None
        while True:
            if after is None:
                rows = self.conn.execute(f"SELECT {cols}, n FROM samples WHERE run_id = ? ORDER BY n LIMIT ?",
                                         (run_id, chunk)).fetchall()
            else:
                rows = self.conn.execute(f"SELECT {cols}, n FROM samples WHERE run_id = ? AND n > ? ORDER BY n "
                                         "LIMIT ?", (run_id, after, chunk)).fetchall()
            if not rows:
                return
            after = rows[-1][-1]
            yield [r[:-1] for r in rows]
            if len(rows) < chunk:
                return


class _Failed:
    def __init__(self, exc: BaseException) -> None:
        self.exc = exc


_END = object()


def read_ahead(source: Iterator[T], depth: int = 2) -> Iterator[T]:
    """``source`` read by a thread of its own, up to ``depth`` items ahead: SQLite reads the next chunk of samples
    while the server inserts this one (both let go of the GIL while they wait). Stops the thread when the consumer
    stops early."""
    box: queue.Queue[Any] = queue.Queue(depth)
    stop = threading.Event()

    def put(item: Any) -> bool:
        while not stop.is_set():
            try:
                box.put(item, timeout=0.2)
                return True
            except queue.Full:
                continue
        return False

    def work() -> None:
        try:
            for item in source:
                if not put(item):
                    return
            put(_END)
        except BaseException as exc:  # handed to the consumer, raised there
            put(_Failed(exc))

    thread = threading.Thread(target=work, name="linerig-sync-read", daemon=True)
    thread.start()
    try:
        while (item := box.get()) is not _END:
            if isinstance(item, _Failed):
                raise item.exc
            yield item
    finally:
        stop.set()
        thread.join()
