"""How long and how hard to heat for a heat pulse, and how long to record after it.

The sensor needle should see a peak of about 0.5–1 K (enough over 10 mK of noise for a 1 % peak; small enough to
leave the soil's water where it is), while the heated needle, much hotter, stays inside the daemon's rise limit.
For a medium (k, ρc) and a probe, ``design_pulse`` takes the shortest pulse that reaches the target peak without
the heater passing a share of that limit, then records four peak times from heater on: the decay is what the fit
leans on for k, and the window rule of ``reduction.pulse`` stops where the needles' finite length has taken 5 %.

The sensor's peak comes from the pulse model (``reduction.pulse_model``); the heated needle's rise at the end of
the pulse from the cylinder-probe model with contact resistance (``reduction.probe_model``; Blackwell 1954),
with a contact conductance of 3000 W/(m²·K), a snug needle in moist granular soil (the simulator's own default;
common practice, no source).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from .probe import ProbeProfile
from .reduction.probe_model import response_stehfest
from .reduction.pulse_model import PulseGeometry, sensor_rise

TARGET_PEAK_K = 0.75
HEATER_SHARE = 0.75             # the heated needle may use 75 % of the rise limit (the rest: contact, k lower)
CONTACT_W_PER_M2K = 3000.0
PEAK_TIMES = 4.0                # record four peak times after heater on
BASELINE_S = 120.0
TYPICAL_SOIL = (1.5, 2.5e6)     # k, ρc of a moist soil (de Vries 1963 lists 1.3–3.1 MJ/(m³·K) for sands and clays)
_PULSES_S = np.unique(np.round(np.geomspace(4.0, 600.0, 60)))


class PulsePlanError(ValueError):
    """No pulse fits the probe and the limits; the message says which limit binds."""


@dataclass(frozen=True)
class PulseDesign:
    """A pulse for one probe in one medium (SI), with what the models expect of it."""

    power_W_per_m: float
    pulse_s: float
    record_s: float
    baseline_s: float
    peak_s: float
    peak_rise_K: float
    heater_rise_K: float
    k_W_per_mK: float
    rho_c_J_per_m3K: float

    def to_dict(self) -> dict[str, float]:
        return asdict(self)


def probe_geometry(probe: ProbeProfile, sensor: str) -> PulseGeometry:
    """The pulse model's geometry of one radial sensor of a probe profile."""
    if not probe.has_sensor(sensor) or probe.sensor(sensor).is_on_heater:
        raise PulsePlanError(f"sensor {sensor!r} of probe {probe.name!r} is not a radial sensor (radial_mm > 0)")
    s = probe.sensor(sensor)
    return PulseGeometry(spacing_m=s.radial_m, heater_radius_m=probe.radius_m,
                         heater_C_J_per_m3K=probe.heat_capacity_J_per_m3K,
                         sensor_radius_m=probe.needle_radius_m(sensor),
                         sensor_C_J_per_m3K=probe.needle_heat_capacity_J_per_m3K(sensor),
                         length_m=probe.length_m, axial_m=None if s.axial_mm is None else s.axial_mm * 1e-3)


def heater_rise_per_W(geometry: PulseGeometry, k: float, rho_c: float, t_s: float,
                      contact_W_per_m2K: float = CONTACT_W_PER_M2K) -> float:
    """Rise of the heated needle (K) after t_s of 1 W/m: the cylinder probe with heat capacity and contact."""
    a = geometry.heater_radius_m or 1e-4
    alpha = k / rho_c
    cap = geometry.heater_C_J_per_m3K
    aj = 2.0 * rho_c / cap if cap else None
    h = k / (a * contact_W_per_m2K)
    return float(response_stehfest(np.array([alpha * t_s / a**2]), aj, h)[0]) / (4.0 * math.pi * k)


def sensor_peak_per_W(geometry: PulseGeometry, k: float, rho_c: float, pulse_s: float) -> tuple[float, float]:
    """(time of the peak in s, peak rise in K) at the sensor for a pulse of 1 W/m lasting ``pulse_s``."""
    t_guess = geometry.spacing_m**2 * rho_c / (4.0 * k) + pulse_s
    t = np.linspace(pulse_s * 0.5, 4.0 * t_guess, 1600)
    y = sensor_rise(t, np.array([0.0, pulse_s]), np.array([1.0, -1.0]), k, rho_c, geometry)
    i = int(np.argmax(y))
    return float(t[i]), float(y[i])


def design_pulse(geometry: PulseGeometry, k: float = TYPICAL_SOIL[0], rho_c: float = TYPICAL_SOIL[1], *,
                 max_power_W_per_m: float, max_rise_K: float, target_peak_K: float = TARGET_PEAK_K) -> PulseDesign:
    """The shortest pulse that gives ``target_peak_K`` at the sensor within the power and heater-rise limits.

    Power is rounded down to a whole W/m and the pulse up to a whole second, so the peak lands a little under or
    over the target; record length is ``PEAK_TIMES`` expected peak times, rounded up to 10 s.
    """
    if not (k > 0 and rho_c > 0 and max_power_W_per_m > 0 and max_rise_K > 0 and target_peak_K > 0):
        raise PulsePlanError("k, ρc, the power limit, the rise limit and the target peak must all be > 0")
    for t0 in _PULSES_S:
        _, peak_per_W = sensor_peak_per_W(geometry, k, rho_c, float(t0))
        q_need = target_peak_K / peak_per_W
        q_heater = HEATER_SHARE * max_rise_K / heater_rise_per_W(geometry, k, rho_c, float(t0))
        if q_need <= min(q_heater, max_power_W_per_m):
            q = float(max(math.floor(min(q_heater, max_power_W_per_m)), 1.0))
            # the energy the target needs, at the highest power the limits allow: the shortest pulse
            pulse = max(float(math.ceil(q_need * t0 / q)), 2.0)
            t_peak, peak = sensor_peak_per_W(geometry, k, rho_c, pulse)
            record = 10.0 * math.ceil(PEAK_TIMES * t_peak / 10.0)
            return PulseDesign(q, pulse, record, BASELINE_S, t_peak, q * peak,
                               q * heater_rise_per_W(geometry, k, rho_c, pulse), k, rho_c)
    raise PulsePlanError(f"no pulse up to {_PULSES_S[-1]:.0f} s reaches {target_peak_K} K at "
                         f"{geometry.spacing_m * 1e3:.3g} mm within {max_power_W_per_m:g} W/m and a heater rise of "
                         f"{HEATER_SHARE * max_rise_K:.3g} K: raise the limits or accept a smaller peak")
