"""The heater lease and the frame-loss limit as hardware/PROTOCOL.md has them, with real processes.

§6: the host renews every period (lease/4 here) whatever became of the last renewal, so that lost renewals, lost
or late acknowledgements do not end the heating: the daemon faults only when no renewal sent within a whole lease
was acknowledged, the time after which the front end would have switched the heater off had none arrived.
§5: a sequence step of n counts n − 1 lost frames, of every kind; the loss fraction is taken over the front end's
frames, not over its samples.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from linerig.daemon.safety import FrameLossWindow, Limits, check_link
from tests.daemon_harness import Daemon, Sim, reap, wait_for  # noqa: F401  (reap kills what a test started)
from tests.test_reliability_processes import heating

pytestmark = pytest.mark.timeout(180)
LONG = {"baseline_s": 5, "heat_s": 3000, "recover_s": 5, "max_drift_K_per_min": 1.0, "settle_timeout_s": 30}


def test_lost_lease_acknowledgements_are_retried_and_only_a_whole_lease_without_one_trips(tmp_path: Path) -> None:
    sim = Sim(tmp_path, speed=10)
    d = Daemon(tmp_path, sim.frontend)
    try:
        d.wait_link()
        rid, events = heating(d, sim, LONG)
        for lost in (1, 2, 1, 2):  # one lost ack faulted a run before
            # each time on a clear frame-loss window: the lost acks are lost frames too (§5), and enough of them
            # within a few seconds are a burst for that limit
            wait_for(lambda: d.status()["frame_loss"]["lost"] == 0, 30, "the frame-loss window to clear")
            sim.inject("drop_acks", count=lost)
            wait_for(lambda: not _acks_left(sim), 5, "the acks to be dropped")
            d.wait_fresh(10)  # a second of heating at speed 10, five renewals
            assert d.run_state(rid) == "heating" and d.status()["fault"] is None, (lost, d.status()["fault"])
        assert sim.heater_events()[-1]["heater_on"] is True
        # once the losses have left the frame-loss window, none comes back any more
        wait_for(lambda: d.status()["frame_loss"]["lost"] == 0, 30, "the frame-loss window to clear")
        sim.inject("drop_acks", count=10_000)
        ev = events.next(lambda e: e.get("event") == "state" and e["run_id"] == rid and e["state"] != "heating", 10)
        assert ev["state"] == "faulted" and "acknowledged no lease renewal" in ev["reason"], ev
        wait_for(lambda: not sim.state()["heater_on"], 5, "heater off")
    finally:
        sim.inject("drop_acks", on=False)
        d.stop()
        sim.stop()


def _acks_left(sim: Sim) -> int:
    return int(sim.control(op="state").get("acks_to_drop", 0))


def test_three_per_cent_frame_loss_at_one_hertz_does_not_fault_a_run(tmp_path: Path) -> None:
    """At 1× the lease's acknowledgements outnumber the samples five to one: every 33rd frame lost (3 %) read as
    about 15 % when counted against samples alone, and faulted the run within a few seconds."""
    sim = Sim(tmp_path, speed=1)
    d = Daemon(tmp_path, sim.frontend)
    try:
        d.wait_link()
        sim.inject("drop", every=33)
        rid, _ = heating(d, sim, {**LONG, "baseline_s": 3, "heat_s": 90, "settle_timeout_s": 20})
        # the heating outlasts the wait by far: a slow machine must not see the run already recovering
        d.wait_fresh(22, timeout=60)  # more than 130 frames, four of them lost
        st = d.status()
        assert d.run_state(rid) == "heating" and st["fault"] is None, st["fault"]
        assert st["counters"]["lost_frames"] >= 3, st["counters"]  # they were lost, and counted
        loss = st["frame_loss"]
        assert loss["lost"] / (loss["lost"] + loss["frames"]) < 0.05, loss
    finally:
        d.stop()
        sim.stop()


def test_the_loss_fraction_is_over_frames_of_every_kind() -> None:
    """A second at 1 Hz: one sample and five acknowledgements; every 33rd frame lost (3 %)."""
    w = FrameLossWindow(Limits().frame_window)
    good = lost = sent = 0
    for _ in range(120):  # two minutes, one mark per sample
        for _ in range(6):
            sent += 1
            if sent % 33 == 0:
                lost += 1
            else:
                good += 1
        w.add(good, lost)
        assert check_link(w.lost, w.frames, 0.0, Limits()) is None
    assert w.frames >= Limits().frame_window and 0.01 < w.lost / (w.lost + w.frames) < 0.05
    # a burst is still a burst: 8 of the next 30 frames lost
    w.add(good + 22, lost + 8)
    assert "frames were lost or corrupted" in (check_link(w.lost, w.frames, 0.0, Limits()) or "")
