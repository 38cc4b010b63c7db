"""Rig stores for the central-store tests, and the checks that a server holds exactly what a rig's file holds.

The stores are the daemon's own SQLite files: the invented example site (examples/examplemoor.py), built once per
session, and copies of it given a new identity, as a second rig's file would have (its own uuid and name).
"""

from __future__ import annotations

import contextlib
import importlib.util
import io
import json
import shutil
import sqlite3
import subprocess
import sys
import uuid
from pathlib import Path
from types import ModuleType
from typing import Any

import numpy as np
import psycopg

ROOT = Path(__file__).resolve().parent.parent
SITE = "Examplemoor substation"
CLI = [sys.executable, "-m", "linerig.tui.cli"]


def examplemoor() -> ModuleType:
    spec = importlib.util.spec_from_file_location("examplemoor", ROOT / "examples" / "examplemoor.py")
    assert spec and spec.loader
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def as_other_rig(src: Path, dst: Path, rig: str) -> Path:
    """A copy of a rig's file that is another rig's file: its own store uuid and rig name."""
    shutil.copyfile(src, dst)
    con = sqlite3.connect(dst)
    with con:
        con.execute("UPDATE store_identity SET store_uuid = ?, rig = ?", [str(uuid.uuid4()), rig])
    con.close()
    return dst


def identity(db: Path) -> tuple[str, str]:
    con = sqlite3.connect(db)
    try:
        store, rig = con.execute("SELECT store_uuid, rig FROM store_identity").fetchone()
    finally:
        con.close()
    return str(store), str(rig)


def add_runs(db: Path, n: int, seed: int, meta: dict[str, Any] | None = None) -> list[int]:
    """``n`` more ended runs of the example needle, with samples, events and a final result, by the daemon's store."""
    from linerig.daemon.store.writer import Store

    ex = examplemoor()
    rng = np.random.default_rng(seed)
    store = Store(db)
    try:
        return [ex._store_run(store, ex._run(0.9 + 0.1 * i, 2.5e6, ex.NEEDLE, rng), ex.NEEDLE,
                              {"site": SITE, "location": "BH9", "depth_m": 1.0 + 0.5 * i, **(meta or {})})
                for i in range(n)]
    finally:
        store.close()


def cli(*argv: str) -> subprocess.CompletedProcess[str]:
    """A `linerig` command run in this process (its exit code, what it printed): the tests that kill a push or run
    two at once start real processes instead."""
    from linerig.tui.cli import main

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            code = main(list(argv))
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else 2
    return subprocess.CompletedProcess(list(argv), code, out.getvalue(), err.getvalue())


def sync(db: Path, url: str, *extra: str) -> subprocess.CompletedProcess[str]:
    return cli("sync", "--db", str(db), "--to", url, *extra)


def synced(db: Path, url: str, *extra: str) -> dict[str, Any]:
    done = sync(db, url, "--json", *extra)
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout)


LOCAL_SAMPLES = ("SELECT run_id, n, seq, device_ms, device_s, phase, heater_on, heater_V, heater_A, supply_V, "
                 "q_W_per_m, cj_C, temps_C, faults FROM samples WHERE run_id IN ({}) ORDER BY run_id, n")
SERVER_SAMPLES = ("SELECT run_id, n, seq, device_ms, device_s, phase, heater_on, heater_v, heater_a, supply_v, "
                  "q_w_per_m, cj_c, temps_c, faults FROM linerig.samples WHERE store = %s ORDER BY run_id, n")


def closed_runs(db: Path) -> list[int]:
    con = sqlite3.connect(db)
    try:
        return [r[0] for r in con.execute("SELECT id FROM runs WHERE state NOT IN "
                                          "('checking', 'settling', 'heating', 'recovering') ORDER BY id")]
    finally:
        con.close()


def local_snapshot(db: Path, runs: list[int] | None = None) -> dict[str, Any]:
    """What a push of this file must put on the server: ended runs with every sample, their events and results,
    and every calibration, as tuples of values."""
    runs = closed_runs(db) if runs is None else runs
    con = sqlite3.connect(db)
    try:
        marks = ",".join(str(int(r)) for r in runs) or "NULL"
        return {
            "runs": [tuple(r) for r in con.execute(f"SELECT id, state, site, location, depth_m, created_utc "
                                                   f"FROM runs WHERE id IN ({marks}) ORDER BY id")],
            "samples": [tuple(r) for r in con.execute(LOCAL_SAMPLES.format(marks))],
            "events": [tuple(r) for r in con.execute(f"SELECT id, run_id, kind, state, reason FROM events "
                                                     f"WHERE run_id IS NULL OR run_id IN ({marks}) ORDER BY id")],
            "results": [tuple(r) for r in con.execute(f"SELECT id, run_id, sensor, k_W_per_mK, data, source "
                                                      f"FROM results WHERE run_id IN ({marks}) ORDER BY id")],
            "calibrations": [tuple(r) for r in con.execute("SELECT id, probe_serial, factor, notes FROM calibrations "
                                                           "ORDER BY id")],
            "spacing_calibrations": [tuple(r) for r in con.execute(
                "SELECT id, probe_serial, sensor, spacing_m, accepted FROM spacing_calibrations ORDER BY id")],
        }
    finally:
        con.close()


def server_snapshot(url: str, store: str) -> dict[str, Any]:
    with psycopg.connect(url) as conn:
        def q(sql: str) -> list[tuple[Any, ...]]:
            return [tuple(r) for r in conn.execute(sql, (store,)).fetchall()]

        return {
            "runs": q("SELECT id, state, site, location, depth_m, created_utc FROM linerig.runs WHERE store = %s "
                      "ORDER BY id"),
            "samples": q(SERVER_SAMPLES),
            "events": q("SELECT id, run_id, kind, state, reason FROM linerig.events WHERE store = %s ORDER BY id"),
            "results": q("SELECT id, run_id, sensor, k_w_per_mk, data, source FROM linerig.results WHERE store = %s "
                         "ORDER BY id"),
            "calibrations": q("SELECT id, probe_serial, factor, notes FROM linerig.calibrations WHERE store = %s "
                              "ORDER BY id"),
            "spacing_calibrations": q("SELECT id, probe_serial, sensor, spacing_m, accepted "
                                      "FROM linerig.spacing_calibrations WHERE store = %s ORDER BY id"),
        }


def whole_runs_only(url: str, store: str, db: Path) -> set[int]:
    """The runs the server holds of this store; each must be whole (every sample the rig has), and nothing of a run
    it lacks (no sample, event or result) may be there. Returns the run ids."""
    con = sqlite3.connect(db)
    try:
        local = dict(con.execute("SELECT run_id, count(*) FROM samples GROUP BY run_id").fetchall())
    finally:
        con.close()
    with psycopg.connect(url) as conn:
        runs = {r[0] for r in conn.execute("SELECT id FROM linerig.runs WHERE store = %s", (store,))}
        counts = dict(conn.execute("SELECT run_id, count(*) FROM linerig.samples WHERE store = %s GROUP BY run_id",
                                   (store,)).fetchall())
        stray = [t for t in ("events", "results") if conn.execute(
            f"SELECT count(*) FROM linerig.{t} x WHERE store = %s AND run_id IS NOT NULL AND NOT EXISTS "
            "(SELECT 1 FROM linerig.runs r WHERE r.store = x.store AND r.id = x.run_id)", (store,)).fetchone()[0]]
    assert not stray, f"rows without their run in {stray}"
    assert set(counts) <= runs, f"samples of runs the server lacks: {set(counts) - runs}"
    for run in runs:
        assert counts.get(run, 0) == local.get(run, 0), (run, counts.get(run), local.get(run))
    return runs


def end_orphaned_pushes(url: str) -> None:
    """A killed `linerig sync` leaves its server session until the server notices; end it and wait until it has
    gone (pg_terminate_backend with a timeout waits), as the server would do by itself a moment later."""
    with psycopg.connect(url, autocommit=True) as conn:
        for (done,) in conn.execute("SELECT pg_terminate_backend(pid, 20000) FROM pg_stat_activity "
                                    "WHERE datname = current_database() AND application_name = 'linerig-sync'"):
            assert done
