"""Every safety limit tripped by a fault injected into the simulated rig, with real processes.

Each trip must turn the heater off within one sample period of the sample that showed the breach: the
simulator logs the device time at which its heater switched off, and the breaching sample is the last one
the daemon stored for the run (samples are stored before the supervisor acts on them). Device time in the
simulator advances only at sample instants, so "off at device time ≤ breach + one period" means at most
one more sample went out with the heater on. Speed 10 gives the daemon 100 ms of wall time per period.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Iterator
from pathlib import Path

import pytest

from tests.daemon_harness import Daemon, Sim, wait_for, write_config

pytestmark = pytest.mark.timeout(120)

SPEED = 10.0
PERIOD_S = 1.0  # device seconds between samples (rate 1 Hz)
PLAN = {"baseline_s": 5, "heat_s": 600, "recover_s": 5, "max_drift_K_per_min": 1.0, "settle_timeout_s": 20}

CONFIG_A = """
[limits]
max_rise_K = 4.0        # a probe that loses contact overheats past this
min_supply_V = 11.9     # the simulated battery reads about 11.6 V when nearly flat
stale_after_s = 0.5     # below the 0.8 s lease, so silence is caught as stale data first
"""


class Rig:
    def __init__(self, tmp: Path, config: str, speed: float = SPEED, sim_extra: tuple[str, ...] = ()) -> None:
        self.sim = Sim(tmp, speed=speed, extra=sim_extra)
        self.daemon = Daemon(tmp, self.sim.frontend, config=write_config(tmp / "rig.toml", config))
        self.daemon.wait_link()
        self.events = self.daemon.subscribe()

    def heat(self, **plan: object) -> int:
        """Start a run and return once the front end reports the heater on."""
        rid = int(self.daemon.request("start", **{**PLAN, **plan})["run_id"])
        ev = self.events.next(lambda e: e.get("run_id") == rid and (e.get("event") == "heater_on" or (
            e.get("event") == "state" and e["state"] in ("faulted", "aborted"))), 20)
        assert ev["event"] == "heater_on", f"run {rid} {ev.get('state')}: {ev.get('reason')}"
        return rid

    def faulted(self, rid: int, timeout: float = 10) -> str:
        ev = self.events.next(lambda e: e.get("event") == "state" and e["run_id"] == rid
                              and e["state"] in ("faulted", "aborted", "recovering", "done"), timeout)
        assert ev["state"] == "faulted", ev
        return str(ev["reason"])

    def assert_off_within_one_period(self, rid: int, by: str = "host command") -> None:
        """``by``: the simulator's reason for the switch-off (the daemon's command, or the firmware's own trip)."""
        wait_for(lambda: not self.sim.state()["heater_on"], 2, "heater off")
        off = self.sim.heater_events()[-1]
        assert off["heater_on"] is False and off["reason"].startswith(by), off
        con = sqlite3.connect(f"file:{self.daemon.db}?mode=ro", uri=True)
        breach_s = con.execute("SELECT device_s FROM samples WHERE run_id = ? ORDER BY n DESC LIMIT 1",
                               [rid]).fetchone()[0]
        con.close()
        assert off["device_t_s"] - breach_s <= PERIOD_S + 1e-6, (off, breach_s)

    def close(self) -> None:
        self.events.close()
        self.daemon.stop()
        self.sim.stop()


@pytest.fixture(scope="module")
def rig_a(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Rig]:
    rig = Rig(tmp_path_factory.mktemp("limits-a"), CONFIG_A)
    yield rig
    rig.close()


@pytest.fixture(scope="module")
def rig_fw(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Rig]:
    """The same rig with the real firmware on the simulated board (its own MicroPython process)."""
    rig = Rig(tmp_path_factory.mktemp("limits-fw"), CONFIG_A, sim_extra=("--firmware",))
    assert rig.sim.info["firmware"] == "micropython"
    yield rig
    rig.close()


PHYSICAL_FAULTS = [
    ("overpower", {"factor": 1.5}, "heater power"),
    ("heater_short", {}, "heater shorted"),
    ("heater_open", {}, "heater draws no current"),
    ("open_tc:heater", {}, "report a fault (open thermocouple?)"),
    ("battery_low", {}, "supply voltage"),
    ("poor_contact", {}, "temperature rise"),
]
# what the firmware's own hard limits call the same faults (PROTOCOL.md §7.1), when they act first
FIRMWARE_CODES = {"overpower": "OVERPOWER", "heater_short": "HEATER_SHORT", "heater_open": "HEATER_OPEN",
                  "open_tc:heater": "TC_OPEN", "battery_low": "SUPPLY_LOW", "poor_contact": "OVERTEMP"}


@pytest.mark.parametrize(("fault", "kw", "words"), PHYSICAL_FAULTS)
def test_a_physical_fault_trips_its_limit_within_one_sample(rig_a: Rig, fault: str, kw: dict, words: str) -> None:
    rid = rig_a.heat()
    rig_a.sim.inject(fault, True, **kw)
    try:
        reason = rig_a.faulted(rid)
        assert words in reason, reason
        rig_a.assert_off_within_one_period(rid)
        st = rig_a.daemon.status()
        assert st["fault"] == reason and not st["heater_armed"]
    finally:
        rig_a.sim.inject(fault, False)


@pytest.mark.parametrize(("fault", "kw", "words"), PHYSICAL_FAULTS)
def test_with_the_firmware_either_layer_trips_within_one_sample(rig_fw: Rig, fault: str, kw: dict,
                                                                 words: str) -> None:
    """The firmware's hard limits may act before the daemon's: either is detection. The firmware's trip
    reaches the daemon as its F frame (``front end reports CODE``) and switches the heater off by itself."""
    rid = rig_fw.heat()
    rig_fw.sim.inject(fault, True, **kw)
    try:
        reason = rig_fw.faulted(rid)
        code = FIRMWARE_CODES[fault]
        by_firmware = reason.startswith(f"front end reports {code}:")
        assert by_firmware or words in reason, reason
        rig_fw.assert_off_within_one_period(rid, by=f"fault {code}:" if by_firmware else "host command")
        assert not rig_fw.daemon.status()["heater_armed"]
    finally:
        rig_fw.sim.inject(fault, False)


def test_frame_loss_burst_trips(rig_a: Rig) -> None:
    rid = rig_a.heat()
    rig_a.sim.inject("corrupt", True, fraction=0.5)
    try:
        reason = rig_a.faulted(rid)
        assert "frames were lost or corrupted" in reason, reason
        wait_for(lambda: not rig_a.sim.state()["heater_on"], 2, "heater off")
        assert rig_a.sim.heater_events()[-1]["reason"] == "host command"
    finally:
        rig_a.sim.inject("corrupt", False)


def test_silence_is_stale_data(rig_a: Rig) -> None:
    rid = rig_a.heat()
    t0 = rig_a.sim.inject("silence", True)
    try:
        reason = rig_a.faulted(rid)
        assert reason.startswith("no data from the front end for"), reason
        wait_for(lambda: not rig_a.sim.state()["heater_on"], 2, "heater off")
        off = rig_a.sim.heater_events()[-1]
        # a silent front end still hears commands: the daemon's OFF gets there before the lease runs out
        assert off["reason"] == "host command" and off["wall"] - t0 < 0.5 + 0.3, off
    finally:
        rig_a.sim.inject("silence", False)
    rig_a.daemon.wait_fresh()


def test_no_heating_without_passing_prechecks(rig_a: Rig) -> None:
    rig_a.sim.inject("open_tc:heater", True)
    try:
        rid = int(rig_a.daemon.request("start", **PLAN)["run_id"])
        ev = rig_a.events.next(lambda e: e.get("event") == "state" and e["run_id"] == rid
                               and e["state"] != "checking", 10)
        assert ev["state"] == "faulted" and ev["reason"].startswith("pre-check failed: channel 0 reports fault")
        heater = [e for e in rig_a.sim.heater_events() if e["heater_on"]]
        runs_heated = sqlite3.connect(rig_a.daemon.db).execute(
            "SELECT count(*) FROM samples WHERE run_id = ? AND heater_on = 1", [rid]).fetchone()[0]
        assert runs_heated == 0 and not rig_a.sim.state()["heater_on"]
        assert all(e["wall"] < ev.get("wall", float("inf")) for e in heater)
    finally:
        rig_a.sim.inject("open_tc:heater", False)


def test_absolute_probe_temperature(tmp_path: Path) -> None:
    rig = Rig(tmp_path, "[limits]\nmax_probe_C = 18\nprecheck_margin_K = 3\n")
    try:
        rid = rig.heat(power_W_per_m=30, heat_s=300)  # about 9 K of rise in the first seconds of heating
        reason = rig.faulted(rid)
        assert reason.startswith("probe temperature") and "above the limit 18.0 °C" in reason, reason
        rig.assert_off_within_one_period(rid)
    finally:
        rig.close()


def test_heating_time_by_the_daemons_own_clock_when_the_front_ends_clock_stops(tmp_path: Path) -> None:
    # speed 4: the 2 s of planned heating last 0.5 s of wall time, time enough to stop the clock within them
    rig = Rig(tmp_path, "[limits]\nmax_heating_s = 2\n[run]\nheat_s = 2\n", speed=4)
    try:
        with pytest.raises(AssertionError, match="heating time 600 s is above the limit 2 s"):
            rig.daemon.request("start", **PLAN)  # the plan must sit inside the limits
        rid = rig.heat(heat_s=2)
        rig.sim.inject("clock_stuck", True)  # device time stops: the plan's 2 s would never end
        reason = rig.faulted(rid, timeout=10)
        assert "by the daemon's clock is above the limit 2 s" in reason, reason
        wait_for(lambda: not rig.sim.state()["heater_on"], 2, "heater off")
        assert rig.sim.heater_events()[-1]["reason"] == "host command"
    finally:
        rig.close()

