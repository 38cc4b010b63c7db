"""Constant heater power from a sagging battery (PWM duty from measured V and I), under both interpreters.

Check against physics outside the firmware: the simulated board computes the true heater power as
D·V_on²/R from its own battery and heater model (Joule heating of a resistor), not from the firmware.
"""

from board import FakeRig, Harness
from check import close
from probefw.regulator import PowerRegulator


def _true_power_trace(h: Harness, ms: int) -> list:
    out = []
    for _ in range(ms // 100):
        h.run(100, renew_every_ms=100)
        out.append(h.rig.true_power_W())
    return out


def test_power_stays_constant_while_the_battery_sags() -> None:
    # 12.6 V -> 10.8 V over 120 s (a tired lead-acid or a 3S lithium pack under load)
    rig = FakeRig(v_start=12.6, v_end=10.8, sag_ms=120_000, r0_ohm=20.0)
    h = Harness(rig=rig)
    h.configure(length_mm=1000.0)
    h.send("P", 4.0, 1000)  # 4 W/m over 1 m
    trace = _true_power_trace(h, 120_000)
    settled = trace[3:]  # one probe cycle, one feed-forward, one trim
    assert max(abs(p - 4.0) / 4.0 for p in settled) < 0.005
    assert close(rig.v_oc(), 10.8)
    # the duty rose as the battery fell: the regulator did the work, not a stiff supply
    duties = [d for _, d in rig.duty_log if d > 0]
    assert duties[-1] > duties[5] * 1.3


def test_power_stays_constant_with_a_copper_heater_warming_up() -> None:
    # copper-like temperature coefficient 0.0039 /K (common handbook value, from memory); the probe warms ~12 K
    rig = FakeRig(tcr_per_K=0.0039, r_th_K_per_W=3.0, tau_ms=5_000.0, v_start=12.0, v_end=11.5, sag_ms=60_000)
    h = Harness(rig=rig)
    h.configure(length_mm=100.0)
    h.send("P", 40.0, 1000)  # 40 W/m over a 100 mm needle = 4 W
    trace = _true_power_trace(h, 30_000)
    assert rig.r_heater() > 20.0 * 1.04  # the heater resistance really changed
    assert max(abs(p - 4.0) / 4.0 for p in trace[3:]) < 0.005


def test_reported_rms_values_give_power_and_resistance() -> None:
    rig = FakeRig(v_start=12.0, v_end=12.0, r0_ohm=30.0)
    h = Harness(rig=rig)
    h.configure(rate_hz=10)
    h.send("P", 2.0, 1000)
    h.run(3000, renew_every_ms=200)
    s = h.samples()[-1]
    assert s.heater_on
    # the host computes P = V·I and R = V/I from the sample, as it would for a DC supply
    assert close(s.heater_V * s.heater_A, rig.true_power_W(), rel=0.005)
    assert close(s.heater_V / s.heater_A, 30.0, rel=0.005)
    assert close(s.supply_V, 12.0, rel=0.01)


def test_a_flat_battery_saturates_and_says_so_once() -> None:
    rig = FakeRig(v_start=10.0, v_end=10.0, r0_ohm=20.0)  # 10 V into 20 Ω is at most 5 W
    h = Harness(rig=rig)
    h.configure()
    h.send("P", 8.0, 1000)
    h.run(5000, renew_every_ms=200)
    assert h.faults() == ["UNDERPOWER"]
    assert close(rig.duty, h.fe.reg.duty_max)
    assert close(rig.true_power_W(), h.fe.reg.duty_max * rig.v_on() ** 2 / 20.0)
    assert h.fe.heater_on  # under power is a warning; the host decides whether the run is still useful


def test_regulator_unit_step_response() -> None:
    # Pure regulator, ideal plant P = D·V²/R: one feed-forward step lands on target.
    reg = PowerRegulator()
    duty = reg.start(3.0)
    v, r = 12.0, 24.0
    for _ in range(4):
        duty = reg.update(v, duty * v / r, duty)
    assert close(duty * v * v / r, 3.0, rel=1e-6)
    assert close(reg.resistance_ohm, 24.0)
    assert reg.stop() == 0.0
