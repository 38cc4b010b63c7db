"""Every limit the daemon enforces, in one place.

Limits are layered: the front end's flashed hard limits ≥ these daemon limits ≥
the run's own plan. Any breach turns the heater off first; the caller then
records why and moves the run to ``faulted``. Nothing here does I/O, so each
check is a plain function that tests can drive sample by sample.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass, fields

# The front end's flashed hard limits (hardware/firmware/probefw/limits.py, PROTOCOL.md §11). The daemon's own
# limits must sit inside them; tests/test_safety.py checks these copies against the firmware's file.
FRONT_END_MAX_LEASE_S = 1.0  # LEASE_MAX_MS: the front end caps a lease at 1000 ms
FRONT_END_MAX_PROBE_C = 95.0  # T_PROBE_MAX_C
FRONT_END_MAX_POWER_W_PER_M = 60.0  # POWER_MAX_W_PER_M
FRONT_END_MAX_POWER_W = 45.0  # POWER_MAX_W, the whole heater
FRONT_END_MAX_ON_S = 3600.0  # ON_TIME_MAX_MS
FRONT_END_MIN_SUPPLY_V = 9.0  # SUPPLY_MIN_V

LIMIT_HELP: dict[str, str] = {
    "max_power_W_per_m": "heater power per metre of heater, W/m",
    "power_tolerance": "fraction by which measured power may exceed the setpoint (0.15 = 15 %)",
    "max_rise_K": "temperature rise of the hottest heater sensor over its baseline, K",
    "max_probe_C": "absolute temperature of any probe sensor, °C",
    "max_heating_s": "heating time of one run, s (device clock or the daemon's own clock, whichever is longer)",
    "heater_ohm_tolerance": "fraction either side of the probe's nominal heater resistance (0.25 = ±25 %)",
    "min_supply_V": "supply (battery) voltage at the front end, V",
    "max_frame_loss": "fraction of the front end's frames (samples, acknowledgements ...) lost or corrupted among "
                      "the last frame_window of them",
    "frame_window": "number of frames the loss fraction is taken over (a whole number)",
    "stale_after_s": "seconds of silence from the front end before its data count as stale",
    "lease_s": "heater lease given to the front end, s (at most 1 s; renewed every quarter of it)",
    "precheck_margin_K": "a run may not start unless every probe sensor is this far below max_probe_C, K",
    "heater_on_within_s": "seconds the front end has to report the heater on after it was armed",
}


@dataclass(frozen=True)
class Limits:
    max_power_W_per_m: float = 60.0
    power_tolerance: float = 0.15
    max_rise_K: float = 12.0  # moisture migrates away from a hot needle (ASTM D5334-14 §1.2: add less heat)
    max_probe_C: float = 85.0
    max_heating_s: float = 3600.0
    heater_ohm_tolerance: float = 0.25
    min_supply_V: float = 10.5  # a 12 V lead-acid or LiFePO4 pack near empty (common practice, no source)
    max_frame_loss: float = 0.1
    frame_window: int = 50
    stale_after_s: float = 2.0
    lease_s: float = 0.8  # renewed every 0.2 s: four renewals may go missing before the heater goes off
    precheck_margin_K: float = 5.0
    heater_on_within_s: float = 2.0

    def __post_init__(self) -> None:
        for f in fields(self):
            problem = limit_problem(f.name, getattr(self, f.name))
            if problem:
                raise ValueError(f"limit {f.name} must be {problem}, got {getattr(self, f.name)!r}")

    def to_dict(self) -> dict[str, float]:
        return {f.name: getattr(self, f.name) for f in fields(self)}


_FW = "the front end's flashed limit"
# name: (lowest, highest, unit, why not lower, why not higher). Beyond these a limit defeats itself (a lease
# too short to renew, data stale for ever, a margin no probe meets) or sits above the firmware's own.
LIMIT_RANGE: dict[str, tuple[float, float, str, str, str]] = {
    "max_power_W_per_m": (0.1, FRONT_END_MAX_POWER_W_PER_M, " W/m", "no usable heating", _FW),
    "power_tolerance": (0.01, 0.5, "", "meter noise alone would trip it", "it would hide a regulator fault"),
    "max_rise_K": (0.1, 30.0, " K", "no usable heating",
                   "soil dries and moisture migrates long before (ASTM D5334-14 §1.2)"),
    "max_probe_C": (-40.0, FRONT_END_MAX_PROBE_C, " °C", "below any ground a probe is pushed into", _FW),
    "max_heating_s": (1.0, FRONT_END_MAX_ON_S, " s", "no usable heating", _FW),
    "heater_ohm_tolerance": (0.01, 0.5, "", "the heater's own temperature coefficient would trip it",
                             "it would miss a short or an open"),
    "min_supply_V": (FRONT_END_MIN_SUPPLY_V, 30.0, " V", _FW + " is higher", "above any 12 V or 24 V pack"),
    "max_frame_loss": (0.001, 0.5, "", "one lost frame would trip it", "half the data could be missing"),
    "frame_window": (5, 1000, " frames", "too few to judge a loss rate", "a burst would be diluted away"),
    "stale_after_s": (0.1, 10.0, " s", "shorter than the link's own jitter",
                      "the heater would run blind that long"),
    "lease_s": (0.2, FRONT_END_MAX_LEASE_S, " s", "renewals every lease/4 would flood the link",
                "the front end caps its lease there"),
    "precheck_margin_K": (0.5, 20.0, " K", "a probe at the limit could start heating",
                          "no probe in warm ground could start"),
    "heater_on_within_s": (0.2, 10.0, " s", "shorter than one command and its sample",
                           "an unanswered arm would wait that long"),
}


def limit_problem(name: str, value: object) -> str | None:
    """What a value of limit ``name`` must be, when it is not; None when it is fine."""
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        return "a finite number"
    lo, hi, unit, why_lo, why_hi = LIMIT_RANGE[name]
    if name == "frame_window" and not isinstance(value, int):
        return f"a whole number from {lo:g} to {hi:g}"
    if value > hi:
        return f"at most {hi:g}{unit} ({why_hi})"
    if value < lo:
        return f"at least {lo:g}{unit} ({why_lo})"
    return None


def plan_power_problem(max_power_W_per_m: float, heater_length_m: float) -> str | None:
    """The power limit over the whole heater against the front end's total-power limit, or None."""
    total = max_power_W_per_m * heater_length_m
    if total > FRONT_END_MAX_POWER_W:
        return (f"{max_power_W_per_m:g} W/m over the {heater_length_m:g} m heater is {total:.1f} W, above "
                f"{FRONT_END_MAX_POWER_W:g} W ({_FW}); at most {FRONT_END_MAX_POWER_W / heater_length_m:.4g} W/m "
                "for this probe")
    return None


@dataclass(frozen=True)
class SampleView:
    """What the supervisor needs from one sample."""

    heating: bool  # the daemon has armed the heater (it should be on)
    heater_confirmed: bool  # since arming, the front end has reported the heater on at least once
    heater_on: bool  # the front end says the heater is on
    power_set_W_per_m: float
    power_W_per_m: float
    heater_ohm: float | None
    supply_V: float
    temps_C: tuple[float, ...]  # NaN for a faulted channel
    faults: tuple[int, ...]
    rise_K: float | None  # rise of the hottest heater sensor over the baseline
    heating_elapsed_s: float
    run_active: bool = False
    off_pending: bool = False  # heater-off sent, not yet acknowledged: samples in flight may still show it on


def check_sample(s: SampleView, lim: Limits, nominal_ohm: float | None) -> str | None:
    """The reason to trip, or None. Order: the most dangerous breach first."""
    finite = [t for t in s.temps_C if math.isfinite(t)]
    if finite and max(finite) > lim.max_probe_C:
        return f"probe temperature {max(finite):.1f} °C is above the limit {lim.max_probe_C:.1f} °C"
    if s.heater_on and not (s.heating or s.off_pending):
        return ("the front end reports the heater on when it should be off (another program on its port, or a "
                "front-end fault): heater forced off")
    if s.heater_on:
        if not (math.isfinite(s.power_W_per_m) and (s.heater_ohm is None or math.isfinite(s.heater_ohm))):
            return "the front end's heater voltage or current reading is not a number (sensor fault?)"
        cap = min(lim.max_power_W_per_m, s.power_set_W_per_m * (1 + lim.power_tolerance))
        if s.power_W_per_m > cap:
            return f"heater power {s.power_W_per_m:.2f} W/m is above {cap:.2f} W/m"
        if nominal_ohm and s.heater_ohm is not None:
            lo, hi = nominal_ohm * (1 - lim.heater_ohm_tolerance), nominal_ohm * (1 + lim.heater_ohm_tolerance)
            if not lo <= s.heater_ohm <= hi:
                what = "open" if s.heater_ohm > hi else "shorted"
                return f"heater resistance {s.heater_ohm:.2f} Ω is outside {lo:.1f}–{hi:.1f} Ω (heater {what}?)"
        if s.heater_ohm is None and s.power_W_per_m <= 0:
            return "heater draws no current (heater open?)"
    if s.heating and s.heater_confirmed and not s.heater_on:
        return "the front end reports the heater off while heating (lease lost or a front-end limit?)"
    if s.heating and s.rise_K is not None and s.rise_K > lim.max_rise_K:
        return f"temperature rise {s.rise_K:.2f} K is above the limit {lim.max_rise_K:.1f} K"
    if s.heating and s.heating_elapsed_s > lim.max_heating_s:
        return f"heating time {s.heating_elapsed_s:.0f} s is above the limit {lim.max_heating_s:.0f} s"
    if not s.supply_V >= lim.min_supply_V:  # also catches NaN
        return f"supply voltage {s.supply_V:.2f} V is below {lim.min_supply_V:.2f} V (battery low)"
    if (s.heating or s.run_active) and any(s.faults):
        bad = [i for i, f in enumerate(s.faults) if f]
        return f"thermocouple channel(s) {bad} report a fault (open thermocouple?)"
    return None


def check_precheck(temps_C: tuple[float, ...], faults: tuple[int, ...], supply_V: float, lim: Limits,
                   heater_on: bool = False) -> list[str]:
    """Everything that must be true before the heater may be armed."""
    problems = []
    for i, (t, f) in enumerate(zip(temps_C, faults, strict=False)):
        if f or not math.isfinite(t):
            problems.append(f"channel {i} reports fault 0x{f:02X}: check the thermocouple connection")
    if not supply_V >= lim.min_supply_V:
        problems.append(f"supply {supply_V:.2f} V is below {lim.min_supply_V:.2f} V: charge or change the battery")
    finite = [t for t in temps_C if math.isfinite(t)]
    if finite and max(finite) > lim.max_probe_C - lim.precheck_margin_K:
        problems.append(f"probe already at {max(finite):.1f} °C (limit {lim.max_probe_C:.1f} °C less "
                        f"{lim.precheck_margin_K:g} K): let it cool first")
    if heater_on:
        problems.append("the front end reports the heater on before the run armed it: check the front end")
    return problems


def check_plan(power_W_per_m: float, heat_s: float, lim: Limits) -> list[str]:
    """A run's plan must sit inside the daemon's limits (the third layer)."""
    problems = []
    if power_W_per_m > lim.max_power_W_per_m:
        problems.append(f"power {power_W_per_m:g} W/m is above the limit {lim.max_power_W_per_m:g} W/m")
    if heat_s > lim.max_heating_s:
        problems.append(f"heating time {heat_s:g} s is above the limit {lim.max_heating_s:g} s")
    return problems


def check_link(lost_in_window: int, frames_in_window: int, silent_for_s: float, lim: Limits) -> str | None:
    if silent_for_s > lim.stale_after_s:
        return f"no data from the front end for {silent_for_s:.1f} s (cable, power or firmware?)"
    # among the last frame_window frames: until that many have come (a new run, a reconnect) the ones not yet
    # seen count as received, so two lost acknowledgements in the first second are not a 13 % loss
    total = max(lost_in_window + frames_in_window, lim.frame_window)
    # one lost frame is tolerated whatever the window; a burst is not
    if lost_in_window >= 2 and lost_in_window / total > lim.max_frame_loss:
        return (f"{lost_in_window} of the last {total} frames were lost or corrupted "
                f"(limit {lim.max_frame_loss:.0%}; electrical noise or a bad cable?)")
    return None


def check_arming(armed_for_s: float, confirmed: bool, lim: Limits) -> str | None:
    if not confirmed and armed_for_s > lim.heater_on_within_s:
        return f"the front end did not report the heater on within {lim.heater_on_within_s:g} s of arming"
    return None


CLOCK_STUCK_SAMPLES = 3  # consecutive samples whose device time did not advance (one may be a glitch; no source)
RESPONSE_AFTER_S = 60.0  # heating after which every sensor on the heater must have warmed (common practice, no source)
RESPONSE_K_MAX = 10.0
"""W/(m·K), above any ground a probe meets: quartz, the most conductive common rock-forming mineral, is about 7.7
(Clauser & Huenges 1995, value from memory), and soils and rocks lie below their minerals."""
SHORTFALL_SAMPLES = 3  # consecutive samples short of the asked power (the first after arming is a partial period)


class DeviceClockWatch:
    """The front end's sample clock must advance (PROTOCOL.md §4.3: a counter that does not wrap). Stopped, it
    stops the heating time, the run's plan and its time axis with it: a heating ran three times its plan."""

    def __init__(self) -> None:
        self._last: float | None = None
        self._stuck = 0

    def reset(self) -> None:
        """After a restart of the front end: its clock starts again from zero."""
        self._last = None
        self._stuck = 0

    def add(self, device_s: float, period_s: float) -> str | None:
        """One sample's device time; the reason to trip, or None."""
        last, self._last = self._last, device_s
        if last is None:
            return None
        step = device_s - last
        if step < -period_s:
            return f"the front end's clock went back {-step:.3f} s without a restart (its timing cannot be trusted)"
        self._stuck = self._stuck + 1 if step < 0.5 * period_s else 0
        if self._stuck >= CLOCK_STUCK_SAMPLES:
            return (f"the front end's clock has stopped: device time stayed at {device_s:.3f} s over "
                    f"{self._stuck + 1} samples (heating time and the run's time axis cannot be trusted)")
        return None


def check_heater_response(rises_K: dict[str, float], heating_s: float, power_W_per_m: float) -> str | None:
    """Every sensor on the heater must warm. After RESPONSE_AFTER_S of heating at q, a line source in the most
    conductive ground (RESPONSE_K_MAX) has risen by more than q/(4πk), one unit of ln t of its late-time slope
    (Carslaw & Jaeger 1959 §10.4), and a probe's own heat capacity and contact only add to it. A sensor that rose
    less reads something else (shorted at its plug it reads the plug; pulled out, the air), so every
    temperature limit on it is blind and its k any number."""
    if heating_s < RESPONSE_AFTER_S or not power_W_per_m > 0:
        return None
    need = power_W_per_m / (4.0 * math.pi * RESPONSE_K_MAX)
    for name, rise in rises_K.items():
        if math.isfinite(rise) and rise < need:
            return (f"sensor {name!r} on the heater rose {rise:+.3f} K in {heating_s:.0f} s at {power_W_per_m:.1f} "
                    f"W/m, less than any ground allows ({need:.3f} K): thermocouple shorted, or not in the probe?")
    return None


class ShortfallWatch:
    """Delivered power well below the request, held: the run no longer heats at the power it planned (a flat
    battery, a failing regulator or lead), and with a sagging supply the constant-power premise goes."""

    def __init__(self) -> None:
        self._short = 0

    def reset(self) -> None:
        self._short = 0

    def add(self, heating: bool, set_W_per_m: float, measured_W_per_m: float, lim: Limits) -> str | None:
        if not heating or not set_W_per_m > 0 or not math.isfinite(measured_W_per_m):
            self._short = 0
            return None
        floor = set_W_per_m * (1.0 - lim.power_tolerance)
        self._short = self._short + 1 if measured_W_per_m < floor else 0
        if self._short >= SHORTFALL_SAMPLES:
            short = 1.0 - measured_W_per_m / set_W_per_m
            return (f"heater delivers {measured_W_per_m:.2f} W/m, {short:.0%} below the {set_W_per_m:.2f} W/m asked "
                    f"(limit {lim.power_tolerance:.0%}) for {self._short} samples: flat battery, regulator or leads?")
        return None


class FrameLossWindow:
    """Frames lost among the last ``size`` frames the front end sent, of every kind (samples, acknowledgements,
    faults), from the decoder's running totals: PROTOCOL.md §5 counts a sequence step of n as n − 1 lost frames,
    so a corrupted frame counts once, by the gap it leaves. At 1 Hz the lease's acknowledgements outnumber the
    samples five to one: counted against samples alone, 3 % of lost frames read as 15 %."""

    def __init__(self, size: int) -> None:
        self.size = size
        self._marks: deque[tuple[int, int]] = deque()  # (good frames, lost frames) so far, one mark per call

    def reset(self) -> None:
        self._marks.clear()

    def add(self, good_total: int, lost_total: int) -> None:
        """Call with the decoder's running counts (any time; once per sample is enough)."""
        self._marks.append((good_total, lost_total))
        while len(self._marks) > 2 and good_total - self._marks[1][0] >= self.size:
            self._marks.popleft()  # the window still holds at least ``size`` frames without the oldest mark

    @property
    def lost(self) -> int:
        return self._marks[-1][1] - self._marks[0][1] if len(self._marks) > 1 else 0

    @property
    def frames(self) -> int:
        return self._marks[-1][0] - self._marks[0][0] if len(self._marks) > 1 else 0
