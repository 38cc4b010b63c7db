"""`linerig stop-heating` and `linerig abort` against linerigd and linerig-sim processes.

The commands run in this process through the real entry point (`tui.cli.main`); the daemon and the simulated front
end are separate processes, and the simulator's own heater log says what the heater did.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from linerig.tui.cli import main
from tests.daemon_harness import (
    FAST_PLAN,
    Daemon,
    Sim,
    reap,  # noqa: F401  (kills what a test started)
    wait_for,
)

pytestmark = pytest.mark.timeout(90)
LONG = {**FAST_PLAN, "heat_s": 3000}  # heats until told otherwise


@pytest.fixture
def rig(tmp_path: Path):
    sim = Sim(tmp_path, speed=50)
    daemon = Daemon(tmp_path, sim.frontend)
    daemon.wait_link()
    yield sim, daemon
    daemon.stop()
    sim.stop()


def _cli(capsys: pytest.CaptureFixture[str], d: Daemon, *argv: str) -> tuple[int, str, str]:
    rc = main(["--socket", str(d.socket), *argv])
    out = capsys.readouterr()
    return rc, out.out, out.err


def test_stop_heating_from_the_command_line_ends_heating_and_keeps_the_recovery(rig, capsys) -> None:
    sim, d = rig
    rc, out, err = _cli(capsys, d, "stop-heating")
    assert (rc, out) == (2, "") and "linerig stop-heating: no run is heating" in err
    # a run started without --wait, as an operator would leave it
    rc, out, err = _cli(capsys, d, "start", "--heat-s", "3000", "--recover-s", "20", "--baseline-s", "10",
                        "--max-drift", "0.5", "--settle-timeout-s", "30", "--json")
    assert rc == 0, err
    rid = json.loads(out)["run_id"]
    wait_for(lambda: d.run_state(rid) == "heating" and sim.state()["heater_on"], 15, "heating")
    rc, out, err = _cli(capsys, d, "stop-heating", "--json")
    assert rc == 0, err
    got = json.loads(out)
    assert got["run_id"] == rid and got["state"] in ("heating", "recovering")
    wait_for(lambda: not sim.state()["heater_on"], 5, "heater off")
    # the run went on to its recovery and ended as planned, not aborted
    assert d.wait_state(rid, "done") == "done"
    run = d.request("run", run_id=rid)["run"]
    assert [e["state"] for e in run["events"] if e["kind"] == "state"][-2:] == ["recovering", "done"]
    assert any(e["kind"] == "operator" and "stopped heating" in e["reason"] for e in run["events"])
    assert [e["heater_on"] for e in sim.heater_events()] == [True, False]
    rc, out, err = _cli(capsys, d, "stop-heating")
    assert rc == 2 and "no run is heating" in err


def test_abort_from_the_command_line_turns_the_heater_off_and_keeps_the_reason(rig, capsys) -> None:
    sim, d = rig
    rc, out, err = _cli(capsys, d, "abort", "--json")
    assert (rc, out) == (2, "") and "linerig abort: no run is active" in err
    rid = d.request("start", **LONG)["run_id"]
    wait_for(lambda: sim.state()["heater_on"], 15, "heater on")
    rc, out, err = _cli(capsys, d, "abort", "--reason", "probe met a flint at 0.4 m", "--json")
    assert rc == 0, err
    assert json.loads(out) == {"run_id": rid, "state": "aborted", "end_reason": "probe met a flint at 0.4 m"}
    wait_for(lambda: not sim.state()["heater_on"], 2, "heater off after abort")
    last = sim.heater_events()[-1]
    assert (last["heater_on"], last["reason"]) == (False, "host command")  # switched off by the daemon's command
    assert d.run_state(rid) == "aborted"
    assert d.request("run", run_id=rid)["run"]["end_reason"] == "probe met a flint at 0.4 m"
    # a run aborted in settling (heater never on), plain text and the default reason
    rid2 = d.request("start", **{**LONG, "baseline_s": 3000})["run_id"]
    rc, out, err = _cli(capsys, d, "abort")
    assert rc == 0, err
    assert out.strip() == f"run {rid2} aborted: aborted from the command line"
    rc, _, err = _cli(capsys, d, "abort", "--reason", "x" * 501)
    assert rc == 2 and "keep it to 500" in err
