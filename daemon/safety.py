"""Every limit the daemon enforces, in one place.

Limits are layered: the front end's flashed hard limits ≥ these daemon limits ≥
the run's own plan. Any breach turns the heater off first; the caller then
records why and moves the run to ``faulted``. Nothing here does I/O, so each
check is a plain function that tests can drive sample by sample.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields


@dataclass(frozen=True)
class Limits:
    max_power_W_per_m: float = 60.0
    power_tolerance: float = 0.15  # measured power may exceed the setpoint by this fraction
    max_rise_K: float = 12.0  # moisture migrates away from a hot needle (ASTM D5334-14 §1.2: add less heat)
    max_probe_C: float = 85.0
    max_heating_s: float = 3600.0
    heater_ohm_tolerance: float = 0.25  # fraction of the probe's nominal heater resistance
    min_supply_V: float = 10.5  # a 12 V lead-acid or LiFePO4 pack near empty (common practice, no source)
    max_bad_frames_per_min: int = 20
    stale_after_s: float = 2.0  # wall-clock silence from the front end before the data count as stale
    lease_s: float = 1.0  # heater lease given to the front end; it must be renewed well within this

    def __post_init__(self) -> None:
        for f in fields(self):
            value = getattr(self, f.name)
            if not (isinstance(value, int | float) and math.isfinite(value) and value > 0):
                raise ValueError(f"limit {f.name} must be a positive number, got {value!r}")
        if self.lease_s > 1.0:
            raise ValueError("limit lease_s must be at most 1 s: the front end caps its lease there")


@dataclass(frozen=True)
class SampleView:
    """What the supervisor needs from one sample."""

    heating: bool  # the daemon believes the heater should be on
    heater_on: bool  # the front end says the heater is on
    power_set_W_per_m: float
    power_W_per_m: float
    heater_ohm: float | None
    supply_V: float
    temps_C: tuple[float, ...]  # NaN for a faulted channel
    faults: tuple[int, ...]
    rise_K: float | None  # rise of the hottest heater sensor over the baseline
    heating_elapsed_s: float


def check_sample(s: SampleView, lim: Limits, nominal_ohm: float | None) -> str | None:
    """The reason to trip, or None. Order: the most dangerous breach first."""
    finite = [t for t in s.temps_C if math.isfinite(t)]
    if finite and max(finite) > lim.max_probe_C:
        return f"probe temperature {max(finite):.1f} °C is above the limit {lim.max_probe_C:.1f} °C"
    if s.heater_on and not s.heating:
        return "the front end reports the heater on when it should be off"
    if s.heater_on:
        cap = min(lim.max_power_W_per_m, s.power_set_W_per_m * (1 + lim.power_tolerance))
        if s.power_W_per_m > cap:
            return f"heater power {s.power_W_per_m:.2f} W/m is above {cap:.2f} W/m"
        if nominal_ohm and s.heater_ohm is not None:
            lo, hi = nominal_ohm * (1 - lim.heater_ohm_tolerance), nominal_ohm * (1 + lim.heater_ohm_tolerance)
            if not lo <= s.heater_ohm <= hi:
                what = "open" if s.heater_ohm > hi else "shorted"
                return f"heater resistance {s.heater_ohm:.2f} Ω is outside {lo:.1f}–{hi:.1f} Ω (heater {what}?)"
        if s.heater_on and s.heater_ohm is None and s.power_W_per_m <= 0:
            return "heater draws no current (heater open?)"
    if s.heating and s.rise_K is not None and s.rise_K > lim.max_rise_K:
        return f"temperature rise {s.rise_K:.2f} K is above the limit {lim.max_rise_K:.1f} K"
    if s.heating and s.heating_elapsed_s > lim.max_heating_s:
        return f"heating time {s.heating_elapsed_s:.0f} s is above the limit {lim.max_heating_s:.0f} s"
    if s.supply_V < lim.min_supply_V:
        return f"supply voltage {s.supply_V:.2f} V is below {lim.min_supply_V:.2f} V (battery low)"
    if s.heating and any(f for f in s.faults):
        bad = [i for i, f in enumerate(s.faults) if f]
        return f"thermocouple channel(s) {bad} report a fault while heating (open thermocouple?)"
    return None


def check_precheck(temps_C: tuple[float, ...], faults: tuple[int, ...], supply_V: float, lim: Limits) -> list[str]:
    """Everything that must be true before the heater may be armed."""
    problems = []
    for i, (t, f) in enumerate(zip(temps_C, faults, strict=False)):
        if f or not math.isfinite(t):
            problems.append(f"channel {i} reports fault 0x{f:02X}: check the thermocouple connection")
    if supply_V < lim.min_supply_V:
        problems.append(f"supply {supply_V:.2f} V is below {lim.min_supply_V:.2f} V: charge or change the battery")
    finite = [t for t in temps_C if math.isfinite(t)]
    if finite and max(finite) > lim.max_probe_C - 5:
        problems.append(f"probe already at {max(finite):.1f} °C: let it cool first")
    return problems


def check_link(bad_frames_last_min: int, silent_for_s: float, lim: Limits) -> str | None:
    if silent_for_s > lim.stale_after_s:
        return f"no data from the front end for {silent_for_s:.1f} s (cable, power or firmware?)"
    if bad_frames_last_min > lim.max_bad_frames_per_min:
        return f"{bad_frames_last_min} corrupted frames in the last minute (electrical noise or a bad cable?)"
    return None
