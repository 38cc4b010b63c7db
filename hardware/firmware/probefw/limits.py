"""Hard limits flashed into the front end. The host cannot change them; it can only ask for less.

Edit these for a build (and record the values with the probe), never at run time. They sit
above the daemon's configured limits, which sit above each run's plan (DESIGN.md, Safety).
"""

LEASE_MAX_MS = 1000  # longest lease the host may ask for; the heater is off ≤ this after the host goes quiet
T_PROBE_MAX_C = 95.0  # any valid channel above this turns the heater off (keep pore water from boiling)
T_REARM_MARGIN_K = 5.0  # after that, P is refused until every valid channel is this far below the limit
POWER_MAX_W = 45.0  # measured heater power (a 1.5 m field rod at up to 30 W/m)
POWER_MAX_W_PER_M = 60.0  # largest power per metre a P command may ask for
POWER_TRIP_MARGIN = 1.10  # measured power above POWER_MAX_W × this ...
POWER_TRIP_COUNT = 3  # ... for this many control cycles in a row trips OVERPOWER
ON_TIME_MAX_MS = 3_600_000  # longest continuous heating (1 h)
R_HEATER_MIN_OHM = 1.0  # below this the heater or its leads are shorted
I_ON_MAX_A = 6.0  # on-state current above this is a short whatever the resistance estimate says
I_OPEN_A = 0.003  # mean current below this while driving ≥ DUTY_OPEN_MIN means an open heater
DUTY_OPEN_MIN = 0.015
OPEN_TRIP_COUNT = 3
SUPPLY_MIN_V = 9.0  # battery below this under load: heater off (protects the battery and the power step)
BAD_FRAMES_TRIP = 3  # this many corrupt host frames ...
BAD_FRAMES_WINDOW_MS = 1000  # ... within this window while heating turn the heater off
HEATER_LENGTH_MAX_MM = 2000.0

# Lower bound of each type's Seebeck coefficient over −40..150 °C (µV/K), from the ITS-90 reference
# functions (daemon/rig/its90.py). In raw-emf mode the firmware bounds the hot junction from above by
# t ≤ t_cj + emf / S_MIN: never below the truth, so the over-temperature limit trips early, not late.
S_MIN_UV_PER_K = {"E": 53.8, "J": 47.4, "K": 36.6, "N": 24.8, "T": 34.9}


def temperature_bound_C(emf_uV: float, cj_C: float, tc_type: str) -> float:
    """Upper bound of the hot-junction temperature from a raw emf (conservative, no tables needed)."""
    if emf_uV <= 0:
        return cj_C
    return cj_C + emf_uV / S_MIN_UV_PER_K[tc_type]


def power_request_error(power_W_per_m: float, heater_length_m: float) -> str:
    """'' when a P command's power is allowed, else the ACK error code."""
    if power_W_per_m > POWER_MAX_W_PER_M or power_W_per_m * heater_length_m > POWER_MAX_W:
        return "LIMIT"
    return ""
