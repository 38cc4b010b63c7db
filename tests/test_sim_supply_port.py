"""The simulator process offers a SCPI bench supply on a pseudo-terminal; its output heats the simulated probe.

Real parts: `linerig-sim --supply` as its own process, pyserial on the pty, the SCPI driver with constant power
held in software, and the front end's samples read through the front-end driver on the other pty. The check
is the line-source late-time slope q/(4πk) (Carslaw & Jaeger 1959 §10.4) of the simulated medium.
"""

from __future__ import annotations

import asyncio
import json
import math
import subprocess
import sys
from pathlib import Path

import pytest

from linerig.daemon.rig.frontend import FrontEnd, FrontEndHandlers
from linerig.daemon.rig.heater import open_scpi_heater
from linerig.daemon.rig.scpi import SupplyLimits
from linerig.daemon.rig.transport import SerialTransport
from linerig.daemon.sim.materials import get_material

pytestmark = pytest.mark.timeout(60)


async def test_scpi_supply_heats_the_simulated_probe(tmp_path: Path) -> None:
    hlog = tmp_path / "heater.jsonl"
    sim = subprocess.Popen([sys.executable, "-m", "linerig.daemon.sim.main", "glycerol", "--supply", "--speed", "20",
                            "--link-dir", str(tmp_path / "dev"), "--heater-log", str(hlog)],
                           stdout=subprocess.PIPE, text=True)
    try:
        assert sim.stdout is not None
        info = json.loads(sim.stdout.readline())
        samples: list = []
        got = asyncio.Event()

        def on_sample(s: object) -> None:
            samples.append(s)
            got.set()

        fe = FrontEnd(SerialTransport(info["frontend"]), FrontEndHandlers(on_sample=on_sample))
        fe.transport.open()
        reader = asyncio.create_task(fe.read_forever())
        await fe.identify()
        await fe.configure(1.0, "T", "T", 0.1)
        heater = await open_scpi_heater(info["supply"], 0.1, 40.0, SupplyLimits(v_max=20.0, i_max=1.0, p_max_W=5.0))
        await heater.arm(5.0)
        n0 = len(samples)
        while len(samples) < n0 + 200:  # 200 s of simulated heating, the constant-power loop stepping meanwhile
            await heater.keep_alive()
            got.clear()
            await asyncio.wait_for(got.wait(), 2.0)
        held = heater.measured_W_per_m
        assert await heater.off()
        assert held is not None and abs(held / 5.0 - 1) < 0.03
        temps = [s.channels[0].value for s in samples[n0:]]
        times = [s.device_ms / 1000 for s in samples[n0:]]
        # late-time slope of ΔT against ln t between 50 s and 200 s after the supply came on
        t_on = times[0] - 1.0
        (t1, T1), (t2, T2) = (min(zip(times, temps, strict=True), key=lambda p: abs(p[0] - t_on - w))
                              for w in (50.0, 200.0))
        slope = (T2 - T1) / math.log((t2 - t_on) / (t1 - t_on))
        k = get_material("glycerol").k_W_per_mK
        assert abs(slope / (5.0 / (4 * math.pi * k)) - 1) < 0.1
        # the simulator logs the output change on its next tick: poll the log (with a deadline) until it has
        deadline = asyncio.get_running_loop().time() + 3.0
        while True:
            events = [json.loads(line) for line in hlog.read_text().splitlines()]
            scpi = [e["heater_on"] for e in events if e.get("source") == "scpi"]
            if scpi == [True, False] or asyncio.get_running_loop().time() > deadline:
                break
            await asyncio.sleep(0.02)
        assert scpi == [True, False]
        reader.cancel()
        fe.transport.close()
    finally:
        sim.terminate()
        sim.wait(10)
