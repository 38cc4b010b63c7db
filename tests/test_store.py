"""The SQLite store: migrations, durability under kill -9, interrupted runs, full and damaged files."""

from __future__ import annotations

import json
import os
import random
import signal
import sqlite3
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest
import sqlite_utils

from linerig.daemon.store.queries import run_arrays, series_detail
from linerig.daemon.store.schema import MIGRATIONS, SCHEMA_VERSION, migrate
from linerig.daemon.store.writer import SAMPLE_COLUMNS, Store, StoreError, to_json

ROOT = Path(__file__).resolve().parent.parent


def sample(run_id: int, n: int, device_s: float, temp: float = 12.0, q: float = 0.0) -> tuple:
    row = {"run_id": run_id, "n": n, "seq": n, "device_ms": int(device_s * 1000), "device_s": device_s,
           "phase": "heating", "heater_on": int(q > 0), "heater_V": 0.0, "heater_A": 0.0, "supply_V": 12.6,
           "q_W_per_m": q, "cj_C": 20.0, "temps_C": json.dumps([temp]), "faults": "[0]"}
    return tuple(row[c] for c in SAMPLE_COLUMNS)


def test_a_new_file_is_at_the_latest_schema_with_the_durability_settings(tmp_path: Path) -> None:
    s = Store(tmp_path / "a.db")
    try:
        assert s.conn.execute("PRAGMA user_version").fetchone()[0] == SCHEMA_VERSION == len(MIGRATIONS)
        assert s.conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
        assert s.conn.execute("PRAGMA synchronous").fetchone()[0] == 2  # FULL
        assert {"runs", "series", "samples", "events", "results", "probes", "calibrations"} <= set(
            s.db.table_names())
        assert "state" in s.db["series"].columns_dict
    finally:
        s.close()


def test_an_older_file_is_migrated_in_place_and_a_newer_one_refused(tmp_path: Path) -> None:
    path = tmp_path / "old.db"
    conn = sqlite3.connect(path, isolation_level=None)
    db = sqlite_utils.Database(conn)
    conn.execute("BEGIN")
    MIGRATIONS[0](db)
    conn.execute("PRAGMA user_version = 1")
    conn.execute("COMMIT")
    db["series"].insert({"id": 7, "kind": "cycles", "name": "old"})
    conn.close()
    s = Store(path)
    try:
        assert s.conn.execute("PRAGMA user_version").fetchone()[0] == SCHEMA_VERSION
        assert list(s.db.query("SELECT id, name, state FROM series")) == [{"id": 7, "name": "old", "state": None}]
    finally:
        s.close()
    conn = sqlite3.connect(path, isolation_level=None)
    conn.execute(f"PRAGMA user_version = {SCHEMA_VERSION + 1}")
    with pytest.raises(RuntimeError, match="newer than this linerig"):
        migrate(sqlite_utils.Database(conn))
    conn.close()


def test_a_failed_migration_leaves_the_file_at_a_whole_version(tmp_path: Path) -> None:
    conn = sqlite3.connect(tmp_path / "m.db", isolation_level=None)
    db = sqlite_utils.Database(conn)

    def broken(d: sqlite_utils.Database) -> None:
        d["half"].create({"id": int}, pk="id")
        raise RuntimeError("power cut in the middle")

    migrate(db)
    with pytest.raises(RuntimeError, match="power cut"):
        migrate(db, [*MIGRATIONS, broken])
    assert conn.execute("PRAGMA user_version").fetchone()[0] == SCHEMA_VERSION
    assert "half" not in db.table_names()  # the DDL rolled back with the version bump


def test_interrupted_runs_and_series_are_closed_with_their_samples(tmp_path: Path) -> None:
    path = tmp_path / "i.db"
    s = Store(path)
    sid = s.create_series({"kind": "cycles", "cycles": 3, "plan_json": "{}"})
    done = s.create_run({"state": "done", "series_id": sid, "cycle": 1, "sensor_names": '["heater"]'})
    rid = s.create_run({"state": "heating", "series_id": sid, "cycle": 2, "sensor_names": '["heater"]',
                        "heat_start_device_s": 10.0, "q_timing": "reading"})
    for n in range(1, 51):
        s.add_sample(sample(rid, n, float(n), 12 + n / 100, 5.0 if n > 10 else 0.0))
    s.flush(wait=True)
    assert s.last_committed == {"run_id": rid, "n": 50}
    s._jobs.put(None)  # stop the writer thread, then no orderly close: as after a crash
    s._thread.join()
    s.conn.close()
    s2 = Store(path)
    try:
        assert s2.close_interrupted_runs() == [rid]
        runs = {r["id"]: r["state"] for r in s2.db.query("SELECT id, state FROM runs")}
        assert runs == {done: "done", rid: "interrupted"}
        assert series_detail(s2.reader, sid)["state"] == "interrupted"
        arr = run_arrays(s2.reader, rid)
        assert len(arr["time_s"]) == 50 and arr["time_s"][0] == -9.0  # time from heater on
        # the first sample to read power is n = 11; that power is held from the sample before it, t = 0
        assert arr["time_s"][9] == 0.0 and arr["q_W_per_m"][9] == 5.0 and arr["q_W_per_m"][8] == 0.0
        # a run written in the reduction's own convention (an import, demo data) is read back unchanged
        other = s2.create_run({"state": "done", "sensor_names": '["heater"]', "heat_start_device_s": 10.0})
        for n in range(1, 21):
            s2.add_sample(sample(other, n, float(n), 12.0, 5.0 if n >= 10 else 0.0))
        s2.flush(wait=True)
        assert list(run_arrays(s2.reader, other)["q_W_per_m"][8:10]) == [0.0, 5.0]
        ev = list(s2.db.query("SELECT state, reason FROM events WHERE run_id = ?", [rid]))
        assert ev[-1]["state"] == "interrupted"
    finally:
        s2.close()


WRITER = textwrap.dedent("""
    import sys, json
    from pathlib import Path
    from linerig.daemon.store.writer import Store, SAMPLE_COLUMNS
    s = Store(Path(sys.argv[1]))
    rid = s.create_run({"state": "heating", "sensor_names": '["heater"]'})
    n = 0
    while True:
        for _ in range(50):
            n += 1
            s.add_sample((rid, n, n, n, float(n), "heating", 1, 4.4, 0.11, 12.6, 5.0, 20.0, "[12.0]", "[0]"))
        s.flush(wait=True)
        print(s.last_committed["n"], flush=True)  # acknowledged only once the batch has committed
""")


@pytest.mark.parametrize("seed", range(3))
def test_kill_9_loses_nothing_acknowledged(tmp_path: Path, seed: int) -> None:
    # the harness of hardware-reliability.md §4.6: a writer acknowledges after COMMIT; kill -9 at a random
    # moment; every acknowledged row must be there with no hole, and the file must pass integrity_check
    path = tmp_path / "k.db"
    proc = subprocess.Popen([sys.executable, "-c", WRITER, str(path)], stdout=subprocess.PIPE, text=True, cwd=ROOT)
    assert proc.stdout is not None
    acks = random.Random(seed).randrange(5, 40)
    last = 0
    for _ in range(acks):
        last = int(proc.stdout.readline())
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    con = sqlite3.connect(path)
    assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    count, top = con.execute("SELECT count(*), max(n) FROM samples").fetchone()
    assert top >= last and count == top
    con.close()


def test_a_full_database_latches_failed_and_reads_go_on(tmp_path: Path) -> None:
    # PRAGMA max_page_count makes SQLite answer SQLITE_FULL exactly as a full disk does, without root
    s = Store(tmp_path / "full.db", max_size_MB=0.1)
    try:
        rid = s.create_run({"state": "heating", "sensor_names": '["heater"]'})
        with pytest.raises(StoreError, match="database or disk is full"):
            for n in range(1, 5000):
                s.add_sample(sample(rid, n, float(n)))
                if n % 50 == 0:
                    s.flush(wait=True)
        assert s.failed and "full" in s.failed
        with pytest.raises(StoreError):
            s.event(rid, "state", "faulted", "anything")  # latched: no further write is tried
        s.add_sample(sample(rid, 9999, 9999.0))
        assert s.pending == 0  # nothing piles up in memory after the failure
        committed = s.reader.execute("SELECT count(*) FROM samples").fetchone()[0]
        assert committed > 0 and committed % 50 == 0  # the batches that made it are whole
    finally:
        s.close()


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes to a read-only file anyway; the full-disk case covers "
                                              "the same path (SQLITE_FULL/READONLY → StoreError)")
def test_a_read_only_database_latches_failed(tmp_path: Path) -> None:
    path = tmp_path / "ro.db"
    Store(path).close()
    s = Store(path)
    try:
        path.chmod(0o444)
        for side in (Path(str(path) + "-wal"), Path(str(path) + "-shm")):
            if side.exists():
                side.chmod(0o444)
        with pytest.raises(StoreError):
            s.create_run({"state": "checking"})
    finally:
        path.chmod(0o644)
        s.close()


def test_a_damaged_file_is_moved_aside_never_overwritten(tmp_path: Path) -> None:
    path = tmp_path / "bad.db"
    Store(path).close()
    raw = bytearray(path.read_bytes())
    raw[4096:8192] = b"\xa5" * 4096  # scribble over the second page
    path.write_bytes(bytes(raw))
    s = Store(path)
    try:
        assert s.moved_aside is not None and s.moved_aside.read_bytes() == bytes(raw)
        ev = list(s.db.query("SELECT kind, reason FROM events"))
        assert ev[0]["kind"] == "store" and str(s.moved_aside) in ev[0]["reason"]
        assert s.create_run({"state": "checking"}) == 1
    finally:
        s.close()


def test_json_stored_is_strict() -> None:
    import numpy as np

    text = to_json({"stable": np.bool_(True), "k": np.float64(1.5), "u": float("nan"), "w": (1, float("inf"))})
    assert json.loads(text) == {"stable": True, "k": 1.5, "u": None, "w": [1, None]}
