"""Hard limits the host cannot override (probe temperature, power, on-time, heater and thermocouple faults),
under both interpreters. Each trip must switch the heater off first, latch, and report."""

from board import FakeRig, Harness
from check import patched
from probefw import limits


def _arm(h: Harness, power: float = 5.0, **cfg: object) -> None:
    h.configure(**cfg)  # type: ignore[arg-type]
    assert h.ack(h.send("P", power, 1000)).ok


def _over_temperature(mode: str) -> None:
    # A probe with almost no heat loss: 5 W raises it 20 K per watt -> it passes 95 °C
    rig = FakeRig(r_th_K_per_W=20.0, tau_ms=20_000.0, ambient_C=25.0)
    h = Harness(rig=rig)
    _arm(h, mode=mode, tc_type="K")
    for _ in range(120):
        h.run(1000, renew_every_ms=200)
        if h.faults():
            break
    assert h.faults() == ["OVERTEMP"]
    assert rig.duty == 0.0
    assert rig.probe_C() < limits.T_PROBE_MAX_C + 1.0  # off at the limit, not long after
    # latched: the host cannot simply re-arm
    assert h.ack(h.send("P", 5.0, 1000)).detail == "FAULT"
    # O acknowledges; P is still refused until the probe is T_REARM_MARGIN_K below the limit
    assert h.ack(h.send("O")).ok
    assert h.ack(h.send("P", 5.0, 1000)).detail == "FAULT"
    h.run(60_000)
    assert rig.probe_C() < limits.T_PROBE_MAX_C - limits.T_REARM_MARGIN_K
    assert h.ack(h.send("P", 5.0, 1000)).ok


def test_over_temperature_trips_and_latches_in_degrees() -> None:
    _over_temperature("T")


def test_over_temperature_trips_and_latches_from_raw_emf() -> None:
    _over_temperature("E")


def test_open_thermocouple_on_the_heater_channel_trips() -> None:
    rig = FakeRig()
    h = Harness(rig=rig)
    _arm(h)
    h.run(1000, renew_every_ms=200)
    rig.open_tc.add(0)
    h.run(300, renew_every_ms=200)
    assert h.faults() == ["TC_OPEN"]
    assert rig.duty == 0.0
    s = h.samples()[-1]
    assert s.channels[0].fault & 0x01 and not s.heater_on


def test_open_thermocouple_on_another_channel_does_not_stop_heating() -> None:
    rig = FakeRig()
    h = Harness(rig=rig)
    _arm(h)
    rig.open_tc.add(2)
    h.run(2000, renew_every_ms=200)
    assert h.faults() == [] and rig.duty > 0


def _fault_while_heating(name: str, before_ms: int, after_ms: int) -> list:
    """Heat, switch the board's fault ``name`` on, carry on heating; the fault codes the firmware sent."""
    rig = FakeRig()
    h = Harness(rig=rig)
    _arm(h)
    h.run(before_ms, renew_every_ms=200)
    setattr(rig, name, True)
    h.run(after_ms, renew_every_ms=200)
    assert rig.duty == 0.0
    return h.faults()


def test_open_heater_trips() -> None:
    assert _fault_while_heating("heater_open", 1000, 1000) == ["HEATER_OPEN"]


def test_shorted_heater_trips_on_the_first_measurement() -> None:
    rig = FakeRig(heater_short_ohm=0.3)
    h = Harness(rig=rig)
    _arm(h)
    h.run(300, renew_every_ms=200)
    assert h.faults() == ["HEATER_SHORT"]
    assert rig.duty == 0.0
    # only the small probe duty was ever applied
    assert max(d for _, d in rig.duty_log) <= 0.02


def test_switch_stuck_on_trips_as_a_short() -> None:
    # the PWM stage fails fully on: from mean V and I this is more current than the duty explains
    rig = FakeRig(r0_ohm=20.0, pwm_stuck_on=True)
    h = Harness(rig=rig)
    _arm(h, power=3.0)
    h.run(1000, renew_every_ms=200)
    assert h.faults() == ["HEATER_SHORT"]
    assert rig.duty == 0.0  # the enable line (a second switch in series) is released too


def test_over_power_trips_even_if_the_regulator_misbehaves() -> None:
    # Defect injection: the regulator asks for full duty whatever it measures. 12.6 V into 20 Ω is 7.9 W;
    # with the flashed limit set to 6 W the firmware must cut it after POWER_TRIP_COUNT cycles.
    with patched(limits, "POWER_MAX_W", 6.0):
        rig = FakeRig(r0_ohm=20.0)
        h = Harness(rig=rig)
        _arm(h, power=5.0)
        h.fe.reg.update = lambda *_: 1.0
        h.run(1000, renew_every_ms=200)
    assert h.faults() == ["OVERPOWER"]
    assert rig.duty == 0.0
    on = [t for t, d in rig.duty_log if d == 1.0]
    off = [t for t, d in rig.duty_log if d == 0.0][-1]
    assert off - on[0] <= (limits.POWER_TRIP_COUNT + 1) * 100


def test_on_time_limit() -> None:
    # the flashed limit is an hour; shorten it here so the test stays fast, the mechanism is the same
    with patched(limits, "ON_TIME_MAX_MS", 3000):
        rig = FakeRig()
        h = Harness(rig=rig)
        _arm(h)
        h.run(2500, renew_every_ms=200)
        assert rig.duty > 0
        h.run(1000, renew_every_ms=200)
    assert h.faults()[:1] == ["ONTIME"]
    assert rig.duty == 0.0


def test_low_battery_trips() -> None:
    rig = FakeRig(v_start=12.0, v_end=8.0, sag_ms=10_000)
    h = Harness(rig=rig)
    _arm(h, power=3.0)
    h.run(10_000, renew_every_ms=200)
    assert "SUPPLY_LOW" in h.faults()
    assert rig.duty == 0.0


def test_dead_converter_bus_turns_heater_off() -> None:
    assert _fault_while_heating("bus_dead", 500, 300) == ["BUS"]


def test_requests_above_the_flashed_limits_are_refused() -> None:
    h = Harness()
    h.configure(length_mm=1000.0)
    assert h.ack(h.send("P", limits.POWER_MAX_W_PER_M + 1, 1000)).detail == "LIMIT"
    # 50 W/m is allowed per metre but 50 W over 1 m exceeds the total power limit
    assert h.ack(h.send("P", 50.0, 1000)).detail == "LIMIT"
    assert h.rig.duty == 0.0


def test_burst_of_corrupt_frames_turns_heater_off() -> None:
    rig = FakeRig()
    h = Harness(rig=rig)
    _arm(h)
    h.run(300, renew_every_ms=200)
    h.send_raw(b"$L,9,1000*00000000\n")  # one bad frame is tolerated
    h.run(100, renew_every_ms=200)
    assert rig.duty > 0
    h.send_raw(b"$L,9,1000*00000000\n$L,9,1000*00000000\n")
    assert h.faults() == ["LINK"]
    assert rig.duty == 0.0
    # not latched: the host may re-arm once the link is clean again
    assert h.ack(h.send("P", 5.0, 1000)).ok


def test_latched_fault_is_repeated_until_acknowledged() -> None:
    rig = FakeRig(heater_short_ohm=0.3)
    h = Harness(rig=rig)
    _arm(h)
    h.run(11_000)
    assert h.faults() == ["HEATER_SHORT"] * 3  # at the trip, then every 5 s
    h.send("O")
    h.run(6000)
    assert h.faults() == ["HEATER_SHORT"] * 3
