"""The command set of PROTOCOL.md on the firmware's device logic, under both interpreters."""

from board import FakeRig, Harness
from check import pairwise


def test_boot_frame_first_and_heater_off() -> None:
    h = Harness(reset_cause="WATCHDOG")
    boot = h.messages[0][2]
    assert boot.kind == "B" and boot.seq == 0
    assert (boot.boot_id, boot.firmware, boot.protocol, boot.reset_cause) == ("1A2B3C4D", "1.0.0", 1, "WATCHDOG")
    assert h.rig.duty_log == [(0, 0.0)]


def test_identify_then_ack() -> None:
    h = Harness(rig=FakeRig(n_channels=4))
    got = h.send("I", seq=41)
    assert [k for _, k, _ in got] == ["D", "A"]
    ident = got[0][2]
    assert (ident.protocol, ident.n_channels, ident.boot_id, ident.serial) == (1, 4, "1A2B3C4D", "TEST0001")
    ack = got[1][2]
    assert (ack.cmd_seq, ack.ok, ack.detail) == (41, True, "")


def test_unconfigured_device_sends_no_samples_and_refuses_power() -> None:
    h = Harness()
    h.run(2000)
    assert h.of("S") == []
    assert h.ack(h.send("P", 5.0, 1000)).detail == "NOTCONFIGURED"


def test_samples_at_the_configured_rate_and_without_gaps() -> None:
    for rate, expect_ms in ((10, 100), (2, 500), (0.5, 2000)):
        h = Harness()
        h.configure(rate_hz=rate)
        h.run(20_000)
        samples = h.samples()
        times = [s.device_ms for s in samples][1:]  # the first slot is served at the first loop pass
        assert {b - a for a, b in pairwise(times)} == {expect_ms}
        assert len(samples) in (20_000 // expect_ms, 20_000 // expect_ms + 1)
        assert all(len(s.channels) == 3 for s in samples)
        assert (h.bad_frames, h.seq_gaps) == (0, 0)


def test_raw_emf_mode_reports_microvolts() -> None:
    rig = FakeRig(ambient_C=40.0, cj_C=20.0)
    h = Harness(rig=rig)
    h.configure(tc_type="K", mode="E")
    h.run(500)
    s = h.samples()[-1]
    # type K, 40 °C against a 20 °C cold junction: E(40) - E(20) = 1.6118 - 0.7981 mV (NIST Monograph 175)
    assert abs(s.channels[0].value - (1611.8 - 798.1)) < 0.2
    assert s.cj_C == 20.0


def test_bad_configuration_is_refused() -> None:
    h = Harness()
    for fields in (("3", "K", "T", "100"), ("10", "X", "T", "100"), ("10", "K", "Q", "100"),
                   ("10", "K", "T", "0"), ("10", "K", "T"), ("ten", "K", "T", "100"), ("nan", "K", "T", "1")):
        assert h.ack(h.send("C", *fields)).detail == "BADARG", fields
    assert h.ack(h.send("Z")).detail == "UNKNOWN"


def test_reconfiguring_while_heating_is_refused() -> None:
    h = Harness()
    h.configure()
    h.send("P", 5.0, 1000)
    assert h.ack(h.send("C", "1", "K", "T", "100")).detail == "BUSY"


def test_duplicate_command_is_reacked_not_reapplied() -> None:
    h = Harness()
    h.configure()
    first = h.ack(h.send("P", 5.0, 1000, seq=100))
    assert first.ok and h.rig.duty > 0
    h.run(1500)  # the ACK was "lost", the host is slow to retry, and meanwhile the lease lapses
    assert h.rig.duty == 0.0
    n = len(h.rig.duty_log)
    retry = h.send("P", 5.0, 1000, seq=100)  # the same frame again, inside the 2 s retry window
    assert [k for _, k, _ in retry] == ["A"] and retry[0][2].fields == first.fields  # switch-on time included
    assert h.rig.duty == 0.0 and len(h.rig.duty_log) == n  # answered, not re-applied: no re-arming
    h.send("O", seq=101)
    again = h.send("O", seq=101)
    assert [k for _, k, _ in again] == ["A"] and again[0][2].fields == ["101", "OK", ""]
    # queries are always answered in full
    assert [k for _, k, _ in h.send("Q", seq=102)] == ["T", "A"]
    assert [k for _, k, _ in h.send("Q", seq=102)] == ["T", "A"]


def test_a_retry_after_the_window_or_with_new_fields_is_a_new_command() -> None:
    h = Harness()
    h.configure()
    h.send("P", 5.0, 1000, seq=7)
    h.run(2500)  # lease lapsed, and outside the 2 s retry window
    assert h.rig.duty == 0.0
    h.send("P", 5.0, 1000, seq=7)  # a restarted host reusing seq 7 is obeyed
    assert h.rig.duty > 0
    h.send("P", 4.0, 1000, seq=7)  # same seq, different power: a new command
    assert h.fe.power_set_W_per_m == 4.0


def test_status_frame() -> None:
    h = Harness()
    h.configure(rate_hz=5, mode="T")
    got = h.send("Q", seq=9)
    assert [k for _, k, _ in got] == ["T", "A"]
    st = got[0][2]
    assert (st.heater_on, st.power_set_W_per_m, st.lease_left_ms, st.rate_hz, st.mode) == (False, 0.0, 0, 5.0, "T")


def test_off_is_always_accepted() -> None:
    h = Harness()
    assert h.ack(h.send("O")).ok
    h.configure()
    h.send("P", 5.0, 1000)
    assert h.rig.duty > 0
    h.send("O")
    assert h.rig.duty == 0.0 and not h.fe.heater_on


def test_switch_on_and_off_times_are_acknowledged() -> None:
    # PROTOCOL.md §4.2: OK to P carries the device time the heater went on, OK to O the time it went off
    h = Harness()
    h.configure()
    h.run(250)
    on = h.ack(h.send("P", 5.0, 1000))
    assert on.detail == str(h.rig.now_ms)
    t_on = h.rig.now_ms
    h.run(300, renew_every_ms=100)
    assert h.ack(h.send("P", 6.0, 1000)).detail == str(t_on)  # a power change keeps the switch-on time
    off = h.ack(h.send("O"))
    assert off.detail == str(h.rig.now_ms)
    assert h.ack(h.send("O")).detail == ""  # nothing went off this time
