"""The whole path with a SCPI bench supply as the heater's power source: `linerigd --simulate --supply`.

Real parts: the daemon and the simulator as separate processes, pyserial on both pseudo-terminals (front end
for the thermocouple samples, SCPI supply for the heater), constant power held by the daemon in software, a
real SQLite file, and the `linerig start --wait --json` command a user types.
"""

from __future__ import annotations

import json
import sqlite3
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path

import pytest
from simulated_daemon import simulated_daemon

from linerig.daemon.sim.materials import DEFAULT_MATERIAL_KEY, get_material

pytestmark = pytest.mark.timeout(120)


@pytest.fixture
def daemon(tmp_path: Path) -> Iterator[dict]:
    # 25×, not 100×: constant power is held in software, a step every quarter second of wall time; at 100× that is
    # one correction per 25 simulated seconds, coarser than any real rig and enough to bend the record.
    with simulated_daemon(tmp_path, 25, "--supply") as d:
        yield d


def test_run_heated_through_the_scpi_supply(daemon: dict) -> None:
    cmd = [sys.executable, "-m", "linerig.tui.cli", "--socket", str(daemon["socket"]), "start", "--heat-s", "300",
           "--recover-s", "100", "--baseline-s", "120", "--wait", "--json"]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=100)
    assert done.returncode == 0, done.stderr
    out = json.loads(done.stdout)
    assert out["state"] == "done", out
    run_id = out["run_id"]

    con = sqlite3.connect(daemon["db"])
    states = [r[0] for r in con.execute(
        "SELECT state FROM events WHERE run_id = ? AND kind = 'state' ORDER BY id", [run_id])]
    assert states == ["checking", "settling", "heating", "recovering", "done"]
    plan_q = json.loads(con.execute("SELECT plan_json FROM runs WHERE id = ?", [run_id]).fetchone()[0])[
        "power_W_per_m"]
    # the power recorded while heating is the supply's readback, held at the plan's power by the daemon's loop
    q_median = con.execute("SELECT q_W_per_m FROM samples WHERE run_id = ? AND phase = 'heating' AND heater_on = 1 "
                           "ORDER BY q_W_per_m LIMIT 1 OFFSET (SELECT count(*) / 2 FROM samples WHERE run_id = ? "
                           "AND phase = 'heating' AND heater_on = 1)", [run_id, run_id]).fetchone()[0]
    assert abs(q_median / plan_q - 1) < 0.03, (q_median, plan_q)

    # the simulator's own log of its heater switches: the supply's output on, then off; the front end's never
    events = [json.loads(line) for line in daemon["heater_log"].read_text().splitlines()]
    assert [e["heater_on"] for e in events if e.get("source") == "scpi"] == [True, False]
    assert [e for e in events if e.get("source") != "scpi"] == []

    # k within 5 % of the simulated material's conductivity (the simulator's input, not a fitted number)
    k_true = get_material(DEFAULT_MATERIAL_KEY).k_W_per_mK
    k = out["results"]["heater"]["k_W_per_mK"]
    assert abs(k - k_true) / k_true < 0.05, (k, k_true)
