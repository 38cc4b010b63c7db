"""A database that stops taking writes mid-heating: heater off, a clear fault, and status still served.

A full disk is emulated honestly and without root by `[daemon] max_database_MB`, which the store turns into
PRAGMA max_page_count: SQLite then answers SQLITE_FULL ("database or disk is full") exactly as on a full card.
"""

from __future__ import annotations

import sqlite3
from pathlib import Path

import pytest

from linerig.daemon.store.writer import Store
from tests.daemon_harness import (
    Daemon,
    Sim,
    reap,  # noqa: F401  (kills what a test started)
    wait_for,
    write_config,
)

pytestmark = pytest.mark.timeout(90)


def test_database_full_mid_heating(tmp_path: Path) -> None:
    db = tmp_path / "runs.db"
    Store(db).close()  # the file as a fresh daemon leaves it; the cap is set just above it
    pages = sqlite3.connect(db).execute("PRAGMA page_count").fetchone()[0]
    cap_MB = (pages + 14) * 4096 / 1e6  # room for the run record, its events and a few hundred samples
    cfg = write_config(tmp_path / "rig.toml", f"[devices]\nrate_hz = 10\n[daemon]\nmax_database_MB = {cap_MB}\n")
    sim = Sim(tmp_path, speed=20)
    d = Daemon(tmp_path, sim.frontend, config=cfg, db=db)
    try:
        d.wait_link()
        events = d.subscribe()
        rid = d.request("start", baseline_s=2, heat_s=600, recover_s=5, max_drift_K_per_min=2.0)["run_id"]
        events.next(lambda e: e.get("event") == "heater_on", 20)
        fault = events.next(lambda e: e.get("event") == "fault", 30)
        assert "database or disk is full" in fault["reason"] and "heater is off" in fault["reason"]
        wait_for(lambda: not sim.state()["heater_on"], 2, "heater off")
        assert sim.heater_events()[-1]["reason"] == "host command"  # the daemon's own OFF, not the lease
        st = d.status()  # still served
        assert st["store_failed"] and "full" in st["store_failed"] and not st["heater_armed"]
        assert st["run"]["state"] == "faulted"
        with pytest.raises(AssertionError, match="the database cannot take writes"):
            d.request("start", baseline_s=2)
        assert d.request("runs")["runs"][0]["id"] == rid  # reads still work
    finally:
        d.stop()
        sim.stop()
