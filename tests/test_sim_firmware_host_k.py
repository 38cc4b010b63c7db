"""The simulator hosting the real firmware gives the material's conductivity when time zero is the switch-on
instant the firmware acknowledges (PROTOCOL.md §4.2), which generally falls between two samples.

Outside check: the late-time line-source solution, ΔT ≈ (q/4πk)·[ln(4κt/r²) − γ] (Carslaw & Jaeger 1959,
§10.4), whose slope against ln t is q/(4πk); at the probe itself the slope is the same once the probe's heat
capacity and contact resistance have stopped mattering (Blackwell 1954, J. Appl. Phys. 25:137).
"""

from __future__ import annotations

import math

import numpy as np

from linerig.daemon.sim.firmware_host import FirmwareFrontEnd, firmware_modules
from linerig.daemon.sim.materials import get_material
from linerig.daemon.sim.rig_model import ProbeSpec, SimulatedRig

RATE_HZ = 1.0
STEP_S = 0.5  # host loop period: one lease renewal per step keeps the 1 s lease alive
POWER_W_PER_M = 5.0
SWITCH_PHASE_S = 0.75  # the P command arrives this long after a sample, as a real host's would at random
HEAT_S = 300.0


def _heated_run() -> tuple[np.ndarray, np.ndarray, np.ndarray, int, list[dict]]:
    """(sample device s, reported q W/m, heater-channel °C, switch-on device ms from the P ack, heater log)."""
    device, _ = firmware_modules()
    rig = SimulatedRig(get_material("moist-sand"), ProbeSpec.default_needle(), seed=3)
    events: list[dict] = []
    fe = FirmwareFrontEnd(rig, speed=1.0, log_heater=events.append)
    frames: list[bytes] = []
    seq = 0

    def command(kind: str, fields: list[str], wall: float) -> None:
        nonlocal seq
        seq += 1
        fe.receive(device.encode(kind, seq, fields), wall)

    wall = 0.0
    fe.tick(wall)
    command("C", [f"{RATE_HZ:g}", "T", "T", f"{rig.probe.heater_length_m * 1000:.1f}"], wall)
    for _ in range(int(60 / STEP_S)):  # a minute of baseline
        wall += STEP_S
        frames += fe.tick(wall)
    wall += SWITCH_PHASE_S
    frames += fe.tick(wall)
    command("P", [f"{POWER_W_PER_M}", "1000"], wall)
    frames += fe.tick(wall)
    ack = next(f for f in reversed(frames) if f.startswith(b"$A"))
    on_ms = int(device.decode(ack.rstrip(b"\n"))[2][2])
    for _ in range(int(HEAT_S / STEP_S)):
        wall += STEP_S
        frames += fe.tick(wall)
        command("L", ["1000"], wall)
    samples = [device.decode(f.rstrip(b"\n"))[2] for f in frames if f.startswith(b"$S")]
    t = np.array([int(s[0]) for s in samples]) / 1000.0
    q = np.array([float(s[2]) * float(s[3]) for s in samples]) / rig.probe.heater_length_m
    temp = np.array([float(s[6]) for s in samples])
    return t, q, temp, on_ms, events


def test_switch_on_falls_between_samples_and_the_ack_carries_the_physical_instant() -> None:
    t, _, _, on_ms, events = _heated_run()
    on_s = on_ms / 1000.0
    before = t[t <= on_s]
    # the device switched on SWITCH_PHASE_S after the last sample, not at a sample instant (so a host that takes
    # the previous sample as time zero starts its clock that much too early)
    assert math.isclose(on_s - before[-1], SWITCH_PHASE_S, abs_tol=1e-9)
    # the physics started heating at the acknowledged instant (the simulator's heater log)
    assert events[0]["heater_on"] and events[0]["device_t_s"] == on_s


def test_line_source_slope_from_the_acknowledged_time_zero_gives_the_material_k() -> None:
    t, q, temp, on_ms, _ = _heated_run()
    k = get_material("moist-sand").k_W_per_mK
    on_s = on_ms / 1000.0
    baseline = float(np.mean(temp[(t < on_s) & (t > on_s - 50.0)]))
    heating = (t > on_s) & (q > 0.0)
    q_mean = float(np.mean(q[heating][1:]))  # the first report covers a partial period
    assert abs(q_mean / POWER_W_PER_M - 1.0) < 0.01
    late = heating & (t - on_s >= 60.0)
    slope = np.polyfit(np.log(t[late] - on_s), temp[late] - baseline, 1)[0]
    # Carslaw & Jaeger 1959 §10.4: slope = q/(4πk); 3 % covers the probe's finite size at 60 s (Blackwell 1954)
    # and the 10 mK noise of the simulated converter
    assert math.isclose(q_mean / (4.0 * math.pi * slope), k, rel_tol=0.03)
