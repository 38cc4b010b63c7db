"""Each limit in daemon.safety, one sample at a time (the process-level trips are in test_reliability_limits)."""

from __future__ import annotations

import math
from dataclasses import replace

import pytest

from linerig.daemon.safety import (
    LIMIT_RANGE,
    DeviceClockWatch,
    FrameLossWindow,
    Limits,
    SampleView,
    ShortfallWatch,
    check_arming,
    check_heater_response,
    check_link,
    check_plan,
    check_precheck,
    check_sample,
    limit_problem,
)

LIM = Limits()
OHM = 40.0
# A healthy heating sample: 5 W/m on a 0.1 m, 40 Ω heater → 0.5 W, I = √(P/R) ≈ 0.112 A, V ≈ 4.47 V.
HEATING = SampleView(heating=True, heater_confirmed=True, heater_on=True, power_set_W_per_m=5.0, power_W_per_m=5.0,
                     heater_ohm=OHM, supply_V=12.6, temps_C=(14.0, 13.0), faults=(0, 0), rise_K=2.0,
                     heating_elapsed_s=100.0, run_active=True)
IDLE = replace(HEATING, heating=False, heater_confirmed=False, heater_on=False, power_W_per_m=0.0, heater_ohm=None,
               rise_K=None, heating_elapsed_s=0.0, run_active=False)


def test_healthy_samples_pass() -> None:
    assert check_sample(HEATING, LIM, OHM) is None
    assert check_sample(IDLE, LIM, OHM) is None


@pytest.mark.parametrize(("change", "words"), [
    ({"temps_C": (85.5, 13.0)}, "probe temperature 85.5 °C is above"),
    ({"power_W_per_m": 5.9}, "heater power 5.90 W/m is above 5.75 W/m"),  # 5 W/m + 15 % tolerance
    ({"power_set_W_per_m": 58.0, "power_W_per_m": 61.0}, "above 60.00 W/m"),  # the absolute cap wins
    ({"heater_ohm": 0.2}, "heater shorted"),
    ({"heater_ohm": 55.0}, "heater open"),
    ({"heater_ohm": None, "power_W_per_m": 0.0}, "draws no current"),
    ({"power_W_per_m": math.nan}, "not a number"),
    ({"heater_on": False}, "reports the heater off while heating"),
    ({"rise_K": 12.5}, "temperature rise 12.50 K is above the limit 12.0 K"),
    ({"heating_elapsed_s": 3601.0}, "heating time 3601 s is above the limit 3600 s"),
    ({"supply_V": 10.2}, "supply voltage 10.20 V is below 10.50 V"),
    ({"supply_V": math.nan}, "supply voltage nan V is below"),
    ({"temps_C": (math.nan, 13.0), "faults": (1, 0)}, "channel(s) [0] report a fault"),
])
def test_each_breach_while_heating_trips_with_its_reason(change: dict, words: str) -> None:
    reason = check_sample(replace(HEATING, **change), LIM, OHM)
    assert reason is not None and words in reason, reason


def test_heater_on_when_it_should_be_off_unless_an_off_is_still_in_flight() -> None:
    stray = replace(IDLE, heater_on=True, power_W_per_m=5.0, heater_ohm=OHM, power_set_W_per_m=5.0)
    assert "should be off" in (check_sample(stray, LIM, OHM) or "")
    assert check_sample(replace(stray, off_pending=True), LIM, OHM) is None


def test_heater_not_yet_confirmed_is_not_a_breach_but_a_late_arming_is() -> None:
    arming = replace(HEATING, heater_confirmed=False, heater_on=False, power_W_per_m=0.0, heater_ohm=None)
    assert check_sample(arming, LIM, OHM) is None
    assert check_arming(LIM.heater_on_within_s - 0.1, False, LIM) is None
    assert "did not report the heater on" in (check_arming(LIM.heater_on_within_s + 0.1, False, LIM) or "")
    assert check_arming(100.0, True, LIM) is None


def test_a_fault_bit_outside_a_run_is_not_a_trip_but_inside_one_it_is() -> None:
    broken = replace(IDLE, temps_C=(math.nan, 13.0), faults=(1, 0))
    assert check_sample(broken, LIM, OHM) is None
    assert "fault" in (check_sample(replace(broken, run_active=True), LIM, OHM) or "")


def test_precheck_lists_every_problem() -> None:
    assert check_precheck((12.0, 12.1), (0, 0), 12.6, LIM) == []
    problems = check_precheck((math.nan, 81.0), (1, 0), 10.0, LIM, heater_on=True)
    assert len(problems) == 4
    assert "channel 0" in problems[0] and "battery" in problems[1] and "cool" in problems[2]
    assert "heater on before" in problems[3]


def test_plan_must_sit_inside_the_limits() -> None:
    assert check_plan(5.0, 600.0, LIM) == []
    assert len(check_plan(61.0, 3601.0, LIM)) == 2


def test_stale_data_and_frame_loss() -> None:
    assert check_link(0, 50, 1.0, LIM) is None
    assert "no data" in (check_link(0, 50, LIM.stale_after_s + 0.1, LIM) or "")
    assert check_link(1, 10, 0.0, LIM) is None  # one lost frame is always tolerated
    assert check_link(5, 50, 0.0, LIM) is None  # 5 of 55 = 9 %
    assert "lost or corrupted" in (check_link(6, 50, 0.0, LIM) or "")  # 6 of 56 = 10.7 %


def test_frame_loss_window_counts_losses_among_the_last_frames() -> None:
    w = FrameLossWindow(10)
    for i in range(1, 21):
        w.add(i, 0)  # one good frame at a time
    assert (w.lost, w.frames) == (0, 10)
    w.add(21, 3)  # three frames lost before this good one
    assert (w.lost, w.frames) == (3, 10)
    for i in range(22, 32):
        w.add(i, 3)
    assert w.lost == 0  # the burst has left the window
    w.reset()
    assert (w.lost, w.frames) == (0, 0)


def test_limits_refuse_nonsense() -> None:
    assert limit_problem("max_rise_K", True) == "a finite number"
    assert limit_problem("max_rise_K", -1) == "at least 0.1 K (no usable heating)"
    assert limit_problem("frame_window", 2.5) == "a whole number from 5 to 1000"
    assert "at most 1 s" in (limit_problem("lease_s", 1.5) or "")
    assert "at most 0.5" in (limit_problem("max_frame_loss", 1.0) or "")
    for name, default in Limits().to_dict().items():  # every limit has a range, and its default is inside it
        assert name in LIMIT_RANGE and limit_problem(name, default) is None, name
    with pytest.raises(ValueError, match="max_probe_C"):
        Limits(max_probe_C=math.inf)


def test_the_daemons_copies_of_the_flashed_limits_are_the_firmwares() -> None:
    """The daemon refuses limits above the front end's own; its copies must be the firmware's values."""
    import importlib.util

    from linerig.daemon import safety
    from linerig.daemon.resources import firmware_dir

    spec = importlib.util.spec_from_file_location("probefw_limits", firmware_dir() / "probefw" / "limits.py")
    assert spec is not None and spec.loader is not None
    fw = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(fw)
    assert safety.FRONT_END_MAX_LEASE_S == fw.LEASE_MAX_MS / 1000
    assert safety.FRONT_END_MAX_PROBE_C == fw.T_PROBE_MAX_C
    assert safety.FRONT_END_MAX_POWER_W_PER_M == fw.POWER_MAX_W_PER_M
    assert safety.FRONT_END_MAX_POWER_W == fw.POWER_MAX_W
    assert safety.FRONT_END_MAX_ON_S == fw.ON_TIME_MAX_MS / 1000
    assert safety.FRONT_END_MIN_SUPPLY_V == fw.SUPPLY_MIN_V


def test_a_front_end_clock_that_stops_or_goes_back_is_named() -> None:
    w = DeviceClockWatch()
    for t in range(10):
        assert w.add(float(t), 1.0) is None
    assert w.add(10.0, 1.0) is None and w.add(13.0, 1.0) is None  # lost samples: a longer step, not a fault
    assert w.add(13.0, 1.0) is None and w.add(13.0, 1.0) is None  # two stuck samples may be a glitch
    assert "clock has stopped" in (w.add(13.0, 1.0) or "")
    w.reset()
    w.add(100.0, 1.0)
    assert "went back" in (w.add(50.0, 1.0) or "")


def test_a_sensor_on_the_heater_must_warm_as_any_ground_would() -> None:
    """The bar is the late-time slope in the most conductive ground, q/(4πk) per unit of ln t with k = 10. The
    line source itself (Carslaw & Jaeger 1959 §10.4, scipy's E1) for a 0.635 mm needle after 60 s at 5 W/m, in
    ground from k = 0.25 (dry clay) to 10 with ρc 1.3–4 MJ/(m³·K), always rises well past it."""
    from scipy.special import exp1

    q, t, r = 5.0, 60.0, 0.635e-3
    need = q / (4 * math.pi * 10.0)
    for k in (0.25, 1.5, 3.0, 10.0):
        for rho_c in (1.3e6, 4.0e6):
            rise = q / (4 * math.pi * k) * float(exp1(r**2 * rho_c / (4 * k * t)))
            assert rise > 2 * need
            assert check_heater_response({"heater": rise}, t, q) is None
    assert check_heater_response({"heater": 0.01}, 59.0, q) is None  # too early to judge
    reason = check_heater_response({"heater": 0.01}, t, q) or ""
    assert "thermocouple shorted" in reason and "'heater'" in reason
    assert check_heater_response({"heater": math.nan}, t, q) is None  # a faulted channel is the fault bit's job


def test_delivered_power_held_below_the_request_is_named() -> None:
    w = ShortfallWatch()
    assert w.add(True, 10.0, 6.8, LIM) is None and w.add(True, 10.0, 6.8, LIM) is None  # the first may be partial
    assert "32% below the 10.00 W/m asked" in (w.add(True, 10.0, 6.8, LIM) or "")
    w.reset()
    for _ in range(10):
        assert w.add(True, 10.0, 8.6, LIM) is None  # 14 %: inside power_tolerance
    assert w.add(False, 10.0, 0.0, LIM) is None
