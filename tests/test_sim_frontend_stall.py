"""A host that falls behind must not change what the simulated front end measures.

On a loaded machine the simulator's loop runs late and then catches up, sending many samples at once. Whatever
the wall clock did, every sample must be the rig stepped one sample period at a time, with the heater switched at
exactly the device instant the simulator logs; and that instant must be the last sample before the first one
reporting the heater on, which is the time zero the daemon takes from a front end that does not report its own.
The check is against the rig itself replayed sample by sample: exact agreement, no tolerance, no sleeps.
"""

from __future__ import annotations

import itertools
from typing import Any

from linerig.daemon.rig import messages as m
from linerig.daemon.rig.framing import FrameDecoder, encode_frame
from linerig.daemon.sim.frontend_sim import FrontEndEmulator
from linerig.daemon.sim.materials import DEFAULT_MATERIAL_KEY, get_material
from linerig.daemon.sim.rig_model import ProbeSpec, SimulatedRig

SPEED = 50.0  # the end-to-end tests' time scale: one wall second is 50 samples at 1 Hz
SEED = 7
POWER_W_PER_M = 5.0
ON_AFTER, OFF_AFTER, TOTAL = 30, 90, 150  # samples
TICK_S = 0.013  # the server loop's turn, 0.65 samples: commands land between samples, as they do from a real host


def _rig() -> SimulatedRig:
    return SimulatedRig(get_material(DEFAULT_MATERIAL_KEY), ProbeSpec.default_needle(), seed=SEED)


def _drive(ticks: list[float]) -> tuple[list[m.Sample], list[dict[str, Any]], int]:
    """Run the emulator through the wall instants ``ticks`` as the simulator's server loop does (what arrived is
    received, then the device ticks), with a host that answers what it read at the next turn: configure, arm
    after ON_AFTER samples, renew the lease while armed, switch off after OFF_AFTER. Returns the samples, the
    simulator's heater log and the most samples one tick delivered."""
    events: list[dict[str, Any]] = []
    fe = FrontEndEmulator(_rig(), speed=SPEED, seed=SEED, log_heater=events.append)
    decoder = FrameDecoder()
    pending: list[bytes] = [encode_frame(m.CMD_CONFIGURE, 1, ["1", "T", "T", "100"])]
    seq, armed, samples, burst = 1, False, [], 0

    def command(kind: str, *fields: str) -> None:
        nonlocal seq
        seq += 1
        pending.append(encode_frame(kind, seq, list(fields)))

    for wall in ticks:
        for frame in pending:
            fe.receive(frame, wall)
        pending.clear()
        before = len(samples)
        for frame in decoder.feed(b"".join(fe.tick(wall))):
            msg = m.parse_message(frame)
            if isinstance(msg, m.Sample):
                samples.append(msg)
        burst = max(burst, len(samples) - before)
        if len(samples) >= TOTAL:
            break
        if len(samples) >= OFF_AFTER and armed:
            command(m.CMD_OFF)
            armed = False
        elif len(samples) >= ON_AFTER and not armed and not events:
            command(m.CMD_POWER, f"{POWER_W_PER_M:.4f}", "1000")
            armed = True
        elif armed:
            command(m.CMD_LEASE, "1000")
    return samples, events, burst


def _replay(samples: list[m.Sample], events: list[dict[str, Any]]) -> list[list[str]]:
    """The same rig stepped one second per sample, the heater switched at the logged device times."""
    rig = _rig()
    switch = {round(e["device_t_s"] * 1000): e for e in events}
    out = []
    for s in samples:
        e = switch.get(round(rig.t_s * 1000))
        if e is not None:
            rig.set_heater(e["heater_on"], e["power_W_per_m"])
        rig.advance(s.device_ms / 1000 - rig.t_s)
        r = rig.sample()
        chans = tuple(m.ChannelValue(c.temp_C, c.fault_bits) for c in r.channels)
        out.append(m.sample_fields(m.Sample(0, round(r.t_s * 1000), r.cj_C, r.heater_V, r.heater_A, r.supply_V,
                                            r.heater_on, chans)))
    return out


def _check(ticks: list[float]) -> int:
    samples, events, burst = _drive(ticks)
    assert len(samples) >= TOTAL
    assert [e["heater_on"] for e in events] == [True, False]
    ms = [s.device_ms for s in samples]
    assert all(b - a == 1000 for a, b in itertools.pairwise(ms))  # none dropped, none repeated
    # this front end reports no switch instant, so it must switch at a sample, where the daemon puts time zero
    assert {round(e["device_t_s"] * 1000) for e in events} <= set(ms)
    assert [m.sample_fields(s) for s in samples] == _replay(samples, events)
    first_on = next(i for i, s in enumerate(samples) if s.heater_on)
    assert samples[first_on - 1].device_ms == round(events[0]["device_t_s"] * 1000)
    last_on = max(i for i, s in enumerate(samples) if s.heater_on)
    assert samples[last_on].device_ms == round(events[1]["device_t_s"] * 1000)
    return burst


def test_samples_are_the_rig_stepped_per_sample_on_a_smooth_host() -> None:
    assert _check([TICK_S * i for i in range(1, 400)]) <= 1


def test_samples_are_the_rig_stepped_per_sample_on_a_host_that_stalls() -> None:
    """Stalls of 0.3-0.6 s (15-30 samples at 50x) around the switch-on and the switch-off, each shorter than the
    1 s lease so the heater stays on; the commands then arrive after a burst, as from a daemon that fell behind."""
    stalls = [(0.40, 0.95), (1.00, 1.30), (1.70, 2.30)]
    ticks = [w for w in (TICK_S * i for i in range(1, 400)) if not any(a < w < b for a, b in stalls)]
    assert _check(ticks) >= 15
