"""Run metadata outside physical bounds is refused by linerigd (a real process on linerig-sim), naming the key.

The bounds themselves are explained beside ``METADATA_RANGES`` in daemon/run_keeper.py.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from linerig.daemon.run_keeper import METADATA_RANGES
from linerig.tui.cli import main
from tests.daemon_harness import (
    FAST_PLAN,
    Daemon,
    Sim,
    reap,  # noqa: F401  (kills what a test started)
)

pytestmark = pytest.mark.timeout(90)
LONG = {**FAST_PLAN, "heat_s": 3000}


@pytest.fixture
def daemon(tmp_path: Path):
    sim = Sim(tmp_path, speed=50)
    d = Daemon(tmp_path, sim.frontend)
    d.wait_link()  # a start is checked for a live front end before its metadata
    yield d
    d.stop()
    sim.stop()


def test_run_metadata_outside_physical_bounds_is_refused_naming_the_key(daemon: Daemon, capsys) -> None:
    d = daemon
    bad = [({"moisture_pct": -3}, "metadata moisture_pct must be a gravimetric water content from 0 to 2000 %"),
           ({"moisture_pct": 2500}, "got 2500"),
           ({"dry_density_kg_per_m3": 0}, "metadata dry_density_kg_per_m3 must be a dry density from 10 to 3000"),
           ({"dry_density_kg_per_m3": -1650}, "got -1650"),
           ({"dry_density_kg_per_m3": 1.65}, "that looks like g/cm³: 1.65 g/cm³ is 1650 kg/m³"),
           ({"dry_density_kg_per_m3": 5200}, "got 5200"),  # magnetite's solid density (from memory)
           ({"depth_m": -0.5}, "metadata depth_m must be a depth of the probe tip below ground from 0 to 1000 m"),
           ({"depth_m": 1500}, "got 1500"),  # millimetres typed as metres
           ({"sample_radius_m": 25.4}, "metadata sample_radius_m must be the radius of the sample around the probe "
                                       "from 0.002 to 10 m"),  # millimetres again
           ({"sample_radius_m": 0}, "got 0")]
    for meta, words in bad:
        reply = d.raw(op="start", **LONG, metadata={"site": "Copse End", **meta})
        assert not reply["ok"] and words in reply["error"], (meta, reply)
    assert d.request("runs")["runs"] == []  # nothing was started or stored
    # the same refusal through `linerig start`, exit 2 as for any refusal
    rc = main(["--socket", str(d.socket), "start", "--meta", "moisture_pct=-3"])
    err = capsys.readouterr().err
    assert rc == 2 and "moisture_pct" in err and "0 to 2000" in err
    # both ends of each range are accepted and stored as given (0 % moisture: an oven-dried sample; 0 m: the surface)
    for end in (0, 1):
        edge = {k: METADATA_RANGES[k][end] for k in METADATA_RANGES}
        rid = d.request("start", **LONG, metadata=edge)["run_id"]
        d.request("abort")
        run = d.request("run", run_id=rid)["run"]
        assert {k: run[k] for k in edge} == edge
