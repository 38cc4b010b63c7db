"""The whole path as a user drives it: linerigd --simulate as a real process, a run started through the socket.

The simulator is a separate process on a pseudo-terminal, the daemon reads it with pyserial and writes a real
SQLite file; the `linerig start --wait --json` command is the one from the README.
"""

from __future__ import annotations

import itertools
import json
import os
import sqlite3
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path

import pytest
from simulated_daemon import simulated_daemon

from linerig.daemon.sim.materials import DEFAULT_MATERIAL_KEY, get_material
from tests.daemon_harness import _json_request, wait_for

pytestmark = pytest.mark.timeout(120)


@pytest.fixture
def daemon(tmp_path: Path) -> Iterator[dict]:
    with simulated_daemon(tmp_path, 50) as d:
        yield d


# The baseline is long enough for the 5 % bound below to test the pipeline, not the noise. A baseline's fitted slope
# is extrapolated over the heating when it stands out of the noise (|b| > 2u, daemon/reduction/drift.py); with the
# simulator's 10 mK noise, 120 s of baseline and 300 s at 5 W/m, that happens to one run in twenty and then moves k
# by up to -6.5 %: 1.0 % of 1000 simulated noise realisations of this run missed the 5 % bound, 0 of 3000 with 300 s
# (own Monte Carlo of the simulator and reduction, no outside source). Which realisation a run gets depends on
# how long the daemon took to start, so a busy machine kept drawing the same failing ones.
BASELINE_S = "300"


def test_simulated_run_end_to_end(daemon: dict) -> None:
    cmd = [sys.executable, "-m", "linerig.tui.cli", "--socket", str(daemon["socket"]), "start", "--heat-s", "300",
           "--recover-s", "200", "--baseline-s", BASELINE_S, "--wait", "--json"]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=100, env={**os.environ})
    assert done.returncode == 0, done.stderr
    out = json.loads(done.stdout)
    assert out["state"] == "done"
    run_id = out["run_id"]

    con = sqlite3.connect(daemon["db"])
    n_samples, n_heating = con.execute(
        "SELECT count(*), sum(phase = 'heating') FROM samples WHERE run_id = ?", [run_id]).fetchone()
    assert n_samples > 780 and n_heating >= 295  # 1 Hz device rate: baseline + 300 s heating + 200 s recovery
    device_s = [r[0] for r in con.execute("SELECT device_s FROM samples WHERE run_id = ? ORDER BY n", [run_id])]
    assert all(abs(b - a - 1.0) < 1e-6 for a, b in itertools.pairwise(device_s))  # none lost or doubled
    states = [r[0] for r in con.execute(
        "SELECT state FROM events WHERE run_id = ? AND kind = 'state' ORDER BY id", [run_id])]
    assert states == ["checking", "settling", "heating", "recovering", "done"]

    # heater off at the end: the simulator's own log of its heater switch
    events = [json.loads(line) for line in daemon["heater_log"].read_text().splitlines()]
    assert [e["heater_on"] for e in events] == [True, False]
    # time zero is the simulator's own switch-on (it switches at a sample, and the daemon takes the one before the
    # first sample that reports the heater on)
    t0 = con.execute("SELECT heat_start_device_s FROM runs WHERE id = ?", [run_id]).fetchone()[0]
    assert abs(t0 - events[0]["device_t_s"]) < 0.002
    assert con.execute("SELECT max(heater_on) FROM samples WHERE run_id = ? AND phase = 'recovering' "
                       "AND n > (SELECT min(n) + 3 FROM samples WHERE run_id = ? AND phase = 'recovering')",
                       [run_id, run_id]).fetchone()[0] == 0

    # k within 5 % of the simulated material's conductivity (the simulator's input, not a fitted number)
    k_true = get_material(DEFAULT_MATERIAL_KEY).k_W_per_mK
    k = out["results"]["heater"]["k_W_per_mK"]
    assert abs(k - k_true) / k_true < 0.05, (k, k_true)


def test_repeat_cycles_are_followed_to_the_end_of_the_series(daemon: dict) -> None:
    cmd = [sys.executable, "-m", "linerig.tui.cli", "--socket", str(daemon["socket"]), "start", "--heat-s", "120",
           "--recover-s", "120", "--baseline-s", "60", "--cycles", "2", "--wait", "--json"]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=100)
    assert done.returncode == 0, done.stderr
    out = json.loads(done.stdout)
    assert out["state"] == "done" and [r["state"] for r in out["runs"]] == ["done", "done"]
    con = sqlite3.connect(daemon["db"])
    cycles = con.execute("SELECT cycle FROM runs WHERE series_id = ? ORDER BY id", [out["series_id"]]).fetchall()
    assert [c[0] for c in cycles] == [1, 2]
    # each cycle reduced on its own: the first to the simulated material's conductivity (its input, not a fitted
    # number); a later one starts on ground still cooling from the one before (its residual is not modelled,
    # DEVELOPERS.md), so it must either read within 5 % too or say why it may not (drift, recovery disagreeing)
    k_true = get_material(DEFAULT_MATERIAL_KEY).k_W_per_mK
    res = [r["results"]["heater"] for r in out["runs"]]
    assert abs(res[0]["k_W_per_mK"] / k_true - 1) < 0.05, res[0]
    for r in res[1:]:
        ok = abs(r["k_W_per_mK"] / k_true - 1) < 0.05
        assert ok or {"drift", "not_settled", "heat_cool_disagree"} & set(r["flags"]), (r["k_W_per_mK"], r["flags"])
    # the heater went on and off once per cycle
    events = [json.loads(line)["heater_on"] for line in daemon["heater_log"].read_text().splitlines()]
    assert events == [True, False, True, False]


def test_time_zero_is_the_firmwares_own_switch_on(tmp_path: Path) -> None:
    """The simulator hosting the real firmware switches the heater on when the command arrives, between samples,
    as hardware does; the daemon's time zero must be that instant (the firmware's reply says it), or k is biased."""
    hlog = tmp_path / "heater.jsonl"
    sim = subprocess.Popen([sys.executable, "-m", "linerig.daemon.sim.main", "--firmware", "--speed", "100",
                            "--link-dir", str(tmp_path / "dev"), "--heater-log", str(hlog)],
                           stdout=subprocess.PIPE, text=True)
    assert sim.stdout is not None
    info = json.loads(sim.stdout.readline())
    sock, db = tmp_path / "d.sock", tmp_path / "runs.db"
    daemon = subprocess.Popen([sys.executable, "-m", "linerig.daemon.main", "--frontend", info["frontend"], "--socket",
                               str(sock), "--db", str(db)], stdout=subprocess.PIPE, stderr=subprocess.DEVNULL,
                              text=True)
    try:
        assert daemon.stdout is not None and json.loads(daemon.stdout.readline()).get("ready")
        assert info["firmware"] == "micropython"  # its own process, as on a board
        # the firmware's process boots after the simulator's start-up line: wait for the link as an operator would
        wait_for(lambda: _json_request(sock, {"op": "status"}).get("link_up"), 20, "the front end link")
        cmd = [sys.executable, "-m", "linerig.tui.cli", "--socket", str(sock), "start", "--heat-s", "300",
               "--recover-s", "200", "--baseline-s", BASELINE_S, "--wait", "--json"]
        done = subprocess.run(cmd, capture_output=True, text=True, timeout=100)
        assert done.returncode == 0, done.stderr
        out = json.loads(done.stdout)
        on = next(json.loads(line) for line in hlog.read_text().splitlines() if json.loads(line)["heater_on"])
        t0 = sqlite3.connect(db).execute("SELECT heat_start_device_s FROM runs WHERE id = ?",
                                         [out["run_id"]]).fetchone()[0]
        assert abs(t0 - on["device_t_s"]) < 0.002  # to the firmware's millisecond
        k_true = get_material(DEFAULT_MATERIAL_KEY).k_W_per_mK
        assert abs(out["results"]["heater"]["k_W_per_mK"] / k_true - 1) < 0.05
    finally:
        for proc in (daemon, sim):
            proc.terminate()
            try:
                proc.wait(10)
            except subprocess.TimeoutExpired:
                proc.kill()
