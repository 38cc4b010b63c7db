"""The qualification's live path: `linerigd --simulate` as a real process, driven through its socket.

The daemon's simulator holds one medium (gelled water here) at a fixed temperature, so this checks the plumbing
and the numbers the live path produces (noise, offsets, the heater, k and the probe model in the medium), not a
full verdict: a second medium and a bath at another temperature would need a person.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from linerig.daemon.qualify.config import load_config
from linerig.daemon.qualify.liverig import DaemonQualificationRig
from linerig.daemon.qualify.procedure import run_async
from linerig.daemon.qualify.requests import AskNumber
from linerig.daemon.service import load_default_probe
from linerig.daemon.sim.materials import get_material
from linerig.tui.client import Client

pytestmark = [pytest.mark.timeout(120), pytest.mark.slow]

SETTINGS = {
    "procedure": {"bath_temperatures_C": [12.0, 12.5], "bath_log_s": 20.0, "heater_check_s": 20.0,
                  "heater_check_W_per_m": 2.0, "repeats": 2, "baseline_s": 120.0, "heat_s": 600.0,
                  "settle_timeout_s": 400.0},
    "reference": [{"name": "agar-gel", "k_W_per_mK": 0.598, "k_u_W_per_mK": 0.01, "rho_c_MJ_per_m3K": 4.177,
                   "power_W_per_m": 8.0, "calibration_medium": "agar-water"}],
}


class BenchOperator:
    """The simulated bath sits at 12 °C whatever the set point: that is what the reference thermometer reads."""

    def __init__(self) -> None:
        self.instructions: list[str] = []

    def ask_number(self, request: AskNumber) -> float:
        return {"insulation_MOhm": 800.0, "bath_C": 12.0}[request.key]

    def instruct(self, text: str) -> None:
        self.instructions.append(text)


@pytest.fixture
def daemon(tmp_path: Path):
    sock, db = tmp_path / "d.sock", tmp_path / "runs.db"
    proc = subprocess.Popen([sys.executable, "-m", "linerig.daemon.main", "--simulate", "agar-gel", "--speed", "100",
                             "--socket", str(sock), "--db", str(db)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    assert proc.stdout is not None
    ready = json.loads(proc.stdout.readline() or "{}")
    assert ready.get("ready"), proc.stderr.read() if proc.poll() is not None else "daemon did not report ready"
    yield sock
    proc.terminate()
    try:
        proc.wait(10)
    except subprocess.TimeoutExpired:
        proc.kill()


async def test_live_daemon_path(daemon: Path) -> None:
    profile = load_default_probe()
    config = load_config(overrides=SETTINGS)
    op = BenchOperator()
    async with Client(daemon) as client:
        rig = DaemonQualificationRig(client, profile, op, "heater",
                                     max_drift_K_per_min=config.procedure.max_drift_K_per_min,
                                     settle_timeout_s=config.procedure.settle_timeout_s)
        await rig.check()
        m = await run_async(profile, config, rig, op)
    assert len(op.instructions) == 2 + 2          # two baths, two insertions
    assert m.insulation_MOhm == 800.0
    ch = m.channels["heater"]
    assert ch.noise_mK < 20.0
    # the first bath only: the simulated "bath" is one unstirred medium, still a little warm from the first
    # heater check when the second logging starts
    assert abs(ch.baths[0].offset_K) < 0.05
    # the default needle's heater: 40 Ω with no temperature coefficient; one bath temperature gives no TCR
    assert [p.R_ohm for p in m.resistance_points] == pytest.approx([40.0, 40.0], rel=0.005)
    assert m.heater is None and "at least 5 K apart" in m.errors["heater"]
    first = m.runs[0]                              # the second insertion starts on the first one's cooling tail
    k_true = get_material("agar-gel").k_W_per_mK
    assert first.k_raw_W_per_mK == pytest.approx(k_true, rel=0.03)
    assert first.probe is not None
    assert first.probe.probe_rho_c_J_per_m3K == pytest.approx(3.2e6, rel=0.15)
    assert m.drift is not None and abs(m.drift.rate_rel_per_h) < 0.005
