"""The heater lease (PROTOCOL.md §6): the real firmware logic on a simulated board, under both interpreters."""

from board import FakeRig, Harness


def _armed(h: Harness, power: float = 5.0, lease_ms: int = 1000) -> int:
    h.configure()
    assert h.ack(h.send("P", power, lease_ms)).ok
    return h.rig.now_ms


def _off_time(h: Harness) -> int:
    """When the board's heater switch last went to zero duty."""
    return [t for t, d in h.rig.duty_log if d == 0.0][-1]


def test_heater_goes_off_within_the_lease_when_the_host_goes_quiet() -> None:
    h = Harness()
    t_arm = _armed(h)
    h.run(400)
    assert h.rig.duty > 0  # heating
    h.run(2000)  # the host says nothing more
    assert h.rig.duty == 0.0
    assert _off_time(h) - t_arm <= 1000 + h.step_ms  # the lease, plus at most one loop iteration
    assert h.faults() == ["LEASE"]
    # and it never comes back by itself
    h.run(3000)
    assert h.rig.duty == 0.0
    assert not any(m.kind == "S" and m.heater_on for t, _, m in h.messages if t > _off_time(h) + 100)


def test_renewals_keep_it_on_and_stopping_them_turns_it_off() -> None:
    h = Harness()
    _armed(h)
    h.run(10_000, renew_every_ms=200)
    assert h.rig.duty > 0 and h.fe.heater_on
    last_renewal = h.rig.now_ms
    h.run(1500)
    assert h.rig.duty == 0.0
    assert _off_time(h) - last_renewal <= 1000 + h.step_ms


def test_a_long_lease_is_capped_at_one_second() -> None:
    h = Harness()
    t_arm = _armed(h, lease_ms=60_000)
    h.run(1500)
    assert h.rig.duty == 0.0
    assert _off_time(h) - t_arm <= 1000 + h.step_ms
    h2 = Harness()
    _armed(h2)
    h2.send("L", 600_000)
    t = h2.rig.now_ms
    h2.run(1200)
    assert _off_time(h2) - t <= 1000 + h2.step_ms


def test_renewing_a_lapsed_lease_is_refused_not_rearmed() -> None:
    h = Harness()
    _armed(h)
    h.run(1200)
    ack = h.ack(h.send("L", 1000))
    assert not ack.ok and ack.detail == "NOTARMED"
    h.run(500)
    assert h.rig.duty == 0.0


def test_status_reports_the_lease_left() -> None:
    h = Harness(rig=FakeRig())
    _armed(h, lease_ms=800)
    h.run(300)
    got = h.send("Q")
    assert [k for _, k, _ in got] == ["T", "A"]
    status = got[0][2]
    assert status.heater_on and 400 <= status.lease_left_ms <= 500
    assert status.power_set_W_per_m == 5.0 and status.mode == "T" and status.rate_hz == 10.0
