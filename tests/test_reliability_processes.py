"""Killing, freezing and unplugging with real processes: the lease turns the heater off, nothing re-arms,
and nothing committed is lost. (The bench repeats the SIGKILL case 30 times or more.)"""

from __future__ import annotations

import signal
import sqlite3
import time
from pathlib import Path

import pytest

from tests.daemon_harness import (
    FAST_PLAN,
    Daemon,
    Sim,
    reap,  # noqa: F401  (kills what a test started)
    samples_committed,
    wait_for,
)

pytestmark = pytest.mark.timeout(120)
LEASE_S = 0.8  # daemon.safety.Limits().lease_s
SLACK_S = 0.25  # the simulator's 10 ms tick, and scheduling on a loaded test machine
LONG = {**FAST_PLAN, "heat_s": 3000}


def heating(d: Daemon, sim: Sim, plan: dict | None = None) -> tuple[int, object]:
    events = d.subscribe()
    rid = int(d.request("start", **(plan or LONG))["run_id"])
    events.next(lambda e: e.get("event") == "heater_on" and e["run_id"] == rid, 20)
    return rid, events


@pytest.mark.parametrize("attempt", range(3))
def test_sigkill_mid_heating(tmp_path: Path, attempt: int) -> None:
    # the third attempt runs the real front-end firmware (hardware/firmware) on the simulated board
    sim = Sim(tmp_path, speed=20 + 15 * attempt, extra=("--firmware",) if attempt == 2 else ())
    d = Daemon(tmp_path, sim.frontend)
    try:
        d.wait_link()
        rid, events = heating(d, sim)
        # let a few commits happen, then remember the last one the daemon reported
        mark = events.next(lambda e: e.get("event") == "committed" and e.get("run_id") == rid and e["n"] > 20, 20)
        last = mark["n"]
        for _ in range(attempt):  # later attempts kill further into the run
            last = events.next(lambda e: e.get("event") == "committed" and e.get("run_id") == rid, 5)["n"]
        killed_at = d.kill()
        off = wait_for(lambda: [e for e in sim.heater_events() if not e["heater_on"]], 3, "heater off")[-1]
        assert off["reason"] == "lease expired", off
        assert off["wall"] - killed_at <= LEASE_S + SLACK_S, off["wall"] - killed_at  # well within 1 s
        count, top = samples_committed(d.db, rid)
        assert top >= last and count == top  # every acknowledged sample is there, with no hole
        con = sqlite3.connect(d.db)
        assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        con.close()
        # restart: safe state, run closed as interrupted, heater never re-armed
        d2 = Daemon(tmp_path, sim.frontend)
        try:
            st = d2.wait_link()
            assert not st["heater_armed"] and st["run"] is None
            run = d2.request("run", run_id=rid)["run"]
            assert run["state"] == "interrupted" and run["n_samples"] == count
            d2.wait_fresh(5)
            assert not sim.state()["heater_on"]
            assert [e["heater_on"] for e in sim.heater_events()] == [True, False]
        finally:
            d2.stop()
    finally:
        sim.stop()


def test_sigstop_freezes_the_daemon_the_lease_ends_heating_and_sigcont_finds_it_off(tmp_path: Path) -> None:
    sim = Sim(tmp_path, speed=20)
    d = Daemon(tmp_path, sim.frontend)
    try:
        d.wait_link()
        rid, _ = heating(d, sim)
        stopped_at = time.time()
        d.signal(signal.SIGSTOP)
        off = wait_for(lambda: [e for e in sim.heater_events() if not e["heater_on"]], 3, "heater off")[-1]
        assert off["reason"] == "lease expired" and off["wall"] - stopped_at <= LEASE_S + SLACK_S
        d.signal(signal.SIGCONT)
        assert d.wait_state(rid, "faulted") == "faulted"
        run = d.request("run", run_id=rid)["run"]
        assert run["end_reason"], run
        d.wait_fresh(5)
        assert not sim.state()["heater_on"] and not d.status()["heater_armed"]
        assert [e["heater_on"] for e in sim.heater_events()] == [True, False]  # no re-arm after waking
    finally:
        d.stop()
        sim.stop()


def test_unplug_mid_run_faults_and_replug_reconnects_without_rearming(tmp_path: Path) -> None:
    sim = Sim(tmp_path, speed=50)
    d = Daemon(tmp_path, sim.frontend)
    try:
        d.wait_link()
        rid, events = heating(d, sim)
        t0 = sim.inject("unplug")
        ev = events.next(lambda e: e.get("event") == "state" and e["run_id"] == rid and e["state"] == "faulted", 5)
        assert "front end lost" in ev["reason"] or "no data" in ev["reason"], ev
        off = wait_for(lambda: [e for e in sim.heater_events() if not e["heater_on"]], 3, "heater off")[-1]
        assert off["wall"] - t0 <= LEASE_S + SLACK_S
        assert not d.status()["link_up"]
        sim.inject("replug")
        events.next(lambda e: e.get("event") == "link" and e["up"], 10)
        d.wait_fresh(5)
        assert not sim.state()["heater_on"] and [e["heater_on"] for e in sim.heater_events()] == [True, False]
        # the rig is usable again, by an explicit new run only
        rid2 = int(d.request("start", **FAST_PLAN)["run_id"])
        assert d.wait_state(rid2, "done", 30) == "done"
    finally:
        d.stop()
        sim.stop()


def test_a_few_bad_frames_are_counted_and_tolerated(tmp_path: Path) -> None:
    sim = Sim(tmp_path, speed=50)
    d = Daemon(tmp_path, sim.frontend)
    try:
        d.wait_link()
        sim.inject("drop", fraction=0.02)
        sim.inject("corrupt", fraction=0.02)
        sim.inject("duplicate", fraction=0.1)
        sim.inject("garbage", bytes=40)
        rid = int(d.request("start", **FAST_PLAN)["run_id"])
        assert d.wait_state(rid, {"done", "faulted"}, 30) == "done"
        c = d.status()["counters"]
        assert c["duplicates"] > 0 and c["bad_frames"] > 0 and c["lost_frames"] > 0 and c["skipped_bytes"] > 0
        con = sqlite3.connect(d.db)
        seqs = [r[0] for r in con.execute("SELECT seq FROM samples WHERE run_id = ? ORDER BY n", [rid])]
        assert len(seqs) == len(set(seqs))  # a duplicated frame is stored once
    finally:
        d.stop()
        sim.stop()


def test_a_front_end_reset_mid_heating_is_a_fault_and_it_stays_off(tmp_path: Path) -> None:
    sim = Sim(tmp_path, speed=20)
    d = Daemon(tmp_path, sim.frontend)
    try:
        d.wait_link()
        rid, events = heating(d, sim)
        sim.inject("reset")
        ev = events.next(lambda e: e.get("event") == "state" and e["run_id"] == rid and e["state"] == "faulted", 5)
        assert "front end restarted" in ev["reason"]
        d.wait_fresh(5)  # reconfigured after the reset: samples flow again
        assert not sim.state()["heater_on"]
        assert [e["heater_on"] for e in sim.heater_events()] == [True, False]
    finally:
        d.stop()
        sim.stop()
