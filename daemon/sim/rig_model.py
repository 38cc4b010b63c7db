"""The simulated rig's physical world: probe, heater, battery, thermocouples and the ground around them.

`SimulatedRig` is what the simulator's serial front end wraps. It knows nothing about frames or ports; it
advances device time, heats the ground with whatever power the battery can actually deliver, and produces
readings the way a thermocouple converter would (noise, quantisation, fault bits). Faults are switched on and
off by name so that the server can map commands to them.

Per-channel fault bits (the same values as the wire protocol's):

* `FAULT_OPEN`  0x01  thermocouple open circuit (value is NaN)
* `FAULT_RANGE` 0x02  reading outside the thermocouple type's range
* `FAULT_CJ`    0x04  cold-junction sensor failed (value and cj_C are NaN)
* `FAULT_STALE` 0x08  converter stopped updating (value frozen)
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from linerig.daemon.sim.materials import Material
from linerig.daemon.sim.physics import AxialRadialModel, ModelConfigError, RadialModel

__all__ = [
    "FAULT_CJ",
    "FAULT_NAMES",
    "FAULT_OPEN",
    "FAULT_RANGE",
    "FAULT_STALE",
    "BatterySpec",
    "ChannelReading",
    "ProbeSpec",
    "RigSample",
    "SensorSpec",
    "SimulatedRig",
    "UnknownFaultError",
]

FAULT_OPEN = 0x01
FAULT_RANGE = 0x02
FAULT_CJ = 0x04
FAULT_STALE = 0x08

FAULT_NAMES: dict[str, str] = {
    "open_tc:<channel>": "thermocouple open circuit: FAULT_OPEN, value NaN",
    "short_tc:<channel>": "thermocouple shorted at the connector: reads the cold junction, no fault bit",
    "noisy_tc:<channel>": "channel noise ten times the normal level (bad shield, ground loop)",
    "stale_tc:<channel>": "converter stuck: value frozen, FAULT_STALE",
    "cj_fault": "cold-junction sensor failed: cj_C NaN, every channel FAULT_CJ and NaN",
    "heater_open": "heater circuit open: no current, no heat",
    "heater_short": "heater shorted in the cable (about 0.2 ohm): current limited, no heat in the ground",
    "heater_drift": "heater resistance creeping up by 2 % per hour of device time (failing joint)",
    "battery_low": "battery flat: past its knee, open-circuit voltage 10.2 V (below the 10.5 V a 12 V pack is cut "
    "off at), power sags",
    "poor_contact": "probe lost contact with the medium: contact conductance one tenth of normal",
    "dry_out": "heat drives water away from the probe: a zone at 35 % of the medium's k grows while heating "
    "(radial model only)",
}
"""Fault names accepted by `SimulatedRig.inject`; <channel> is a sensor name or a 0-based index."""

_CHANNEL_FAULTS = ("open_tc", "short_tc", "noisy_tc", "stale_tc")
_RIG_FAULTS = ("cj_fault", "heater_open", "heater_short", "heater_drift", "battery_low", "poor_contact", "dry_out")
DRY_OUT_K_FRACTION = 0.35
"""Conductivity left in the dried zone: partly dried sand keeps roughly a third of its moist k (de Vries 1963
gives 0.24-0.29 dry against 2.1 at theta 0.2; partial drying sits in between; no source for the exact value)."""
DUAL_OUTER_RADIUS_M = 0.2
DUAL_GRID = {"n_radial": 60, "n_axial_heater": 12, "n_axial_beyond": 16}
DRY_OUT_TIME_S = 300.0
"""The dried zone's radius grows as a·(1 + √(t_heating/DRY_OUT_TIME_S)): 3a after 20 minutes (no source)."""

# usable range of each thermocouple type (°C), NIST ITS-90 reference-function limits
_TC_RANGE_C: dict[str, tuple[float, float]] = {
    "T": (-270.0, 400.0),
    "K": (-270.0, 1372.0),
    "J": (-210.0, 1200.0),
    "E": (-270.0, 1000.0),
    "N": (-270.0, 1300.0),
    "R": (-50.0, 1768.0),
    "S": (-50.0, 1768.0),
    "B": (0.0, 1820.0),
}

EmfFunction = Callable[[str, float, float], float]
"""(type letter, hot-junction °C, reference-junction °C) -> emf in µV, e.g. an ITS-90 implementation."""


class UnknownFaultError(ValueError):
    """`inject` was given a fault name or channel it does not know; the message lists the valid ones."""


@dataclass(frozen=True)
class SensorSpec:
    """A thermocouple junction: radial distance from the heater axis (0 = on the heater) and position along
    the heater measured from its tip (the far end from the handle; the bottom of a rod pushed into the
    ground), as probe profiles give it. A junction in a needle of its own (a dual probe's sensing needle) reads
    the needle, a conductor with a heat capacity in the ground (``needle_radius_m`` > 0 with ``needle_rho_c``;
    ``NeedleResponse``)."""

    name: str
    radial_m: float
    axial_m: float
    needle_radius_m: float = 0.0
    needle_rho_c: float = 0.0

    def needle_response(self, k_medium: float, rho_c_medium: float) -> NeedleResponse | None:
        """How the sensing needle reads the ground's rise at its centre (None: a bare junction)."""
        b, r = self.needle_radius_m, self.radial_m
        if b <= 0 or self.needle_rho_c <= 0 or r <= b:
            return None
        return NeedleResponse.of(b, r, self.needle_rho_c, k_medium, rho_c_medium)


@dataclass(frozen=True)
class NeedleResponse:
    """A sensing needle as a perfectly conducting cylinder of radius b and heat capacity πb²C_s in the ground.

    Continuity of temperature and the heat balance at its surface give its reading, in the Laplace domain, as
    the ground's rise at its centre times Λ(ζ) = 1/[ζK1(ζ) + (ζ²/α_s)K0(ζ)], ζ = b√(s/α), α_s = 2ρc/C_s (the
    same conduction problem as the reduction's pulse model, derived there; Carslaw & Jaeger 1959 §13.7 for
    the cylinder). The simulator steps in time, so Λ is replaced by 1 + Σ w_i·[1/(1 + sτ_i) − 1]: first-order
    lags on a log grid of time constants, fitted by least squares in the band where the ground's field
    reaches the needle (ζ up to 10·b/r, beyond which the field at the needle is e^(−10) of a step). Λ(0) = 1:
    the needle reads the ground at long times. Replaces a single lag b²C_s·ln(r/b)/2k, which over-stated the
    lag by about a third and left out that a conductor reads more than the field at its centre.
    """

    weights: tuple[float, ...]
    taus_s: tuple[float, ...]
    fit_error: float  # largest |fit − Λ| over the band

    @classmethod
    def of(cls, b: float, r: float, needle_rho_c: float, k: float, rho_c: float) -> NeedleResponse:
        from scipy.special import k0e, k1e

        alpha, alpha_s = k / rho_c, 2.0 * rho_c / needle_rho_c
        p_max = min(1.0, (10.0 * b / r) ** 2)   # p = s·b²/α = ζ²
        p = np.logspace(-10.0, math.log10(p_max), 300)
        z = np.sqrt(p)
        lam = np.exp(z) / (z * k1e(z) + z * z / alpha_s * k0e(z))
        taus = np.logspace(math.log10(1.0 / p_max) - 1.0, 6.0, 14)   # in units of b²/α
        basis = 1.0 / (1.0 + np.outer(p, taus)) - 1.0
        w, *_ = np.linalg.lstsq(basis, lam - 1.0, rcond=None)
        err = float(np.max(np.abs(basis @ w - (lam - 1.0))))
        scale = b * b / alpha
        return cls(tuple(float(x) for x in w), tuple(float(x) * scale for x in taus), err)

    def step(self, state: list[float], x0: float, x1: float, dt: float) -> None:
        """Advance each lag over dt with the ground's rise going linearly from x0 to x1."""
        for i, tau in enumerate(self.taus_s):
            state[i] = _lagged(state[i], x0, x1, dt, tau)

    def reading(self, state: list[float], x: float) -> float:
        """The needle's rise: the ground's x less what the lags still hold back."""
        return x + sum(w * (y - x) for w, y in zip(self.weights, state, strict=True))


def _attr(obj: Any, *names: str, scale: Sequence[float] = (), default: Any = None) -> Any:
    """First attribute (or mapping key) present among `names`, times the matching scale factor."""
    for i, n in enumerate(names):
        v = obj.get(n) if isinstance(obj, dict) else getattr(obj, n, None)
        if v is not None:
            return v * scale[i] if i < len(scale) and scale[i] != 1.0 else v
    return default


@dataclass(frozen=True)
class ProbeSpec:
    """What the simulator needs to know about a probe (SI units)."""

    heater_length_m: float
    radius_m: float
    probe_rho_c: float
    heater_resistance_ohm: float
    sensors: tuple[SensorSpec, ...]
    contact_conductance: float | None = 3000.0
    thermocouple: str = "T"
    heater_tcr_per_K: float = 5e-5
    name: str = "probe"
    kind: str = "single"

    def __post_init__(self) -> None:
        sensors = tuple(s if isinstance(s, SensorSpec) else SensorSpec(*s) for s in self.sensors)
        object.__setattr__(self, "sensors", sensors)
        object.__setattr__(self, "thermocouple", str(self.thermocouple).strip()[-1:].upper() or "T")
        for n in ("heater_length_m", "radius_m", "heater_resistance_ohm"):
            v = getattr(self, n)
            if not (v > 0 and math.isfinite(v)):
                raise ModelConfigError(f"probe {self.name!r}: {n} must be > 0, got {v!r}")
        if self.probe_rho_c < 0:
            raise ModelConfigError(f"probe {self.name!r}: probe_rho_c must be >= 0, got {self.probe_rho_c!r}")
        if not sensors:
            raise ModelConfigError(
                f"probe {self.name!r} has no sensors; give at least one (name, radial, axial)"
            )
        names = [s.name for s in sensors]
        if len(set(names)) != len(names):
            raise ModelConfigError(f"probe {self.name!r}: sensor names must be unique, got {names}")
        if self.thermocouple not in _TC_RANGE_C:
            raise ModelConfigError(
                f"probe {self.name!r}: thermocouple type {self.thermocouple!r} unknown; use one of "
                f"{', '.join(_TC_RANGE_C)}"
            )

    @classmethod
    def default_needle(cls) -> ProbeSpec:
        """A 100 mm × 1.27 mm OD laboratory needle, 40 Ω heater, type T junction at mid-length.

        ρc 3.2 MJ/(m³·K) is a stainless tube filled with epoxy (steel ≈ 4.0, epoxy ≈ 1.7; from memory);
        H = 3000 W/(m²·K) is a snug fit in a moist granular medium (common practice, no source).
        """
        return cls(
            heater_length_m=0.100,
            radius_m=0.635e-3,
            probe_rho_c=3.2e6,
            heater_resistance_ohm=40.0,
            sensors=(SensorSpec("probe", 0.0, 0.050),),
            contact_conductance=3000.0,
            thermocouple="T",
            heater_tcr_per_K=5e-5,
            name="lab-needle",
        )

    @classmethod
    def from_profile(cls, profile: Any) -> ProbeSpec:
        """Build from any profile-like object (attributes or mapping keys, SI or mm/MJ units).

        Sensors may be objects or mappings with name and radial_m/axial_m (or radial_mm/axial_mm), or bare
        (name, radial, axial) tuples, which are read in millimetres as profile files give them.
        """
        length = _attr(profile, "heater_length_m", "length_m", "heater_length_mm", "length_mm",
                       scale=(1.0, 1.0, 1e-3, 1e-3))
        radius = _attr(profile, "radius_m", "radius_mm", scale=(1.0, 1e-3))
        if radius is None:
            diameter = _attr(profile, "diameter_m", "diameter_mm", scale=(1.0, 1e-3))
            radius = None if diameter is None else 0.5 * diameter
        if length is None or radius is None:
            raise ModelConfigError(
                "probe profile needs a heater length and a radius "
                "(length_m or heater_length_mm, radius_m or radius_mm)"
            )
        rho_c = _attr(profile, "heat_capacity_J_per_m3K", "probe_rho_c", "heat_capacity_MJ_per_m3K",
                      scale=(1.0, 1.0, 1e6), default=3.2e6)
        # if the profile gives no resistance, pick one that lets a 12 V battery deliver 40 W/m
        resistance = _attr(profile, "heater_resistance_ohm", default=144.0 / (40.0 * float(length)))
        sensors = []
        for s in _attr(profile, "sensors", default=()) or ():
            if isinstance(s, tuple | list):
                name, radial, axial = s[0], float(s[1]) * 1e-3, float(s[2]) * 1e-3
            else:
                name = _attr(s, "name")
                radial = _attr(s, "radial_m", "radial_mm", scale=(1.0, 1e-3), default=0.0)
                axial = _attr(s, "axial_m", "axial_mm", scale=(1.0, 1e-3), default=0.5 * float(length))
            needle_r, needle_c = _needle(profile, str(name), float(radial))
            sensors.append(SensorSpec(str(name), float(radial), float(axial), needle_r, needle_c))
        if not sensors:
            sensors = [SensorSpec("probe", 0.0, 0.5 * float(length))]
        return cls(
            heater_length_m=float(length),
            radius_m=float(radius),
            probe_rho_c=float(rho_c),
            heater_resistance_ohm=float(resistance),
            sensors=tuple(sensors),
            contact_conductance=_attr(profile, "contact_conductance", "contact_conductance_W_per_m2K",
                                      default=3000.0),
            thermocouple=str(_attr(profile, "thermocouple", "thermocouple_type", default="T")),
            heater_tcr_per_K=float(_attr(profile, "heater_tcr_per_K", default=5e-5)),
            name=str(_attr(profile, "name", default="probe")),
            kind=str(_attr(profile, "kind", default="single")),
        )

    def with_spacing(self, sensor: str, radial_m: float) -> ProbeSpec:
        """The same probe with one sensor at another distance from the heater (a bent needle)."""
        names = [s.name for s in self.sensors]
        if sensor not in names:
            raise ModelConfigError(f"probe {self.name!r} has no sensor {sensor!r} ({', '.join(names)})")
        if not (radial_m > self.radius_m and math.isfinite(radial_m)):
            raise ModelConfigError(f"sensor {sensor!r}: a spacing must exceed the heater radius, got {radial_m}")
        return replace(self, sensors=tuple(replace(s, radial_m=radial_m) if s.name == sensor else s
                                           for s in self.sensors))


def _needle(profile: Any, name: str, radial_m: float) -> tuple[float, float]:
    """(radius m, ρc) of a radial sensor's own needle, from a profile that knows it (``ProbeProfile``)."""
    radius_of, cap_of = getattr(profile, "needle_radius_m", None), getattr(profile, "needle_heat_capacity_J_per_m3K",
                                                                            None)
    if radial_m <= 0 or not callable(radius_of) or not callable(cap_of):
        return 0.0, 0.0
    return float(radius_of(name) or 0.0), float(cap_of(name) or 0.0)


FLAT_FRACTION = 1.07
"""The battery_low fault: 7 % past the knee, where the open-circuit voltage has fallen to 10.2 V (12.8 V full,
11.6 V at the knee, then 20 V per unit of capacity: this model's shape, no source)."""


@dataclass(frozen=True)
class BatterySpec:
    """A 12 V sealed lead-acid field battery with its fuse, wiring and switch lumped into one resistance.

    Open-circuit voltage falls linearly from `full_V` to `empty_V` as energy is drawn (12.8 V rested full,
    about 11.6 V at deep discharge: common practice for lead-acid, no source), then drops steeply.
    """

    full_V: float = 12.8
    empty_V: float = 11.6
    capacity_Wh: float = 84.0
    internal_resistance_ohm: float = 0.15
    quiescent_A: float = 0.05
    current_limit_A: float = 2.5


@dataclass(frozen=True)
class ChannelReading:
    name: str
    temp_C: float
    emf_uV: float | None
    fault_bits: int


@dataclass(frozen=True)
class RigSample:
    """What the front end reports at one instant. heater_V and heater_A are RMS values, so their product is
    the heater's power and their ratio its resistance. `delivered_W_per_m` is the simulator's truth (the heat
    released into the ground per metre), for tests; a real front end cannot send it."""

    t_s: float
    cj_C: float
    channels: list[ChannelReading]
    heater_V: float
    heater_A: float
    supply_V: float
    heater_on: bool
    delivered_W_per_m: float = 0.0


@dataclass
class _Electrical:
    heater_V: float = 0.0
    heater_A: float = 0.0
    supply_V: float = 12.8
    heat_W: float = 0.0
    supply_A: float = 0.0


@dataclass
class _Channel:
    spec: SensorSpec
    model_key: int
    depth_m: float
    offset_K: float
    last_reading: float = math.nan
    faults: set[str] = field(default_factory=set)
    needle: NeedleResponse | None = None
    needle_state: list[float] = field(default_factory=list)  # the needle's lags (``NeedleResponse``)


def _lagged(y: float, x0: float, x1: float, dt: float, tau: float) -> float:
    """A first-order lag y' = (x − y)/τ over dt, exact for an input x going linearly from x0 to x1."""
    h = dt / tau
    e = math.exp(-h)
    return e * y + (1.0 - e) * x0 + (x1 - x0) * (h - 1.0 + e) / h


class SimulatedRig:
    """A probe in a medium, driven by a battery-powered constant-power heater, read by thermocouples.

    Device time starts at 0 with the ground at `initial_ground_C` (plus `ground_gradient_K_per_m` per metre
    of depth below the heater's top end, which sits at `install_depth_m`; a vertical rod's tip is at
    install_depth_m + heater length) drifting by `drift_K_per_h`. `layers` is
    a list of (depth_top_m, Material) below which that material applies (above the first, `material`); each
    sensor then sits in its own radial model of its layer. `axial_loss=True` solves the (r, z) problem
    instead, so a short probe loses heat from its ends (homogeneous medium only); None (the default) chooses
    it for a dual probe, whose sensing needle a few millimetres away feels the ends of a 40 mm heater.
    `sample_radius_m`/`sample_height_m` bound a laboratory sample (the probe centred in it) with a
    `sample_boundary` of "fixed" (a bath) or "adiabatic" (insulated).
    """

    BASE_DT_S = 0.05
    """Physics steps are whole powers of two times this, so factorisations stay cached whatever dt arrives."""
    MAX_STEP_DOUBLINGS = 5

    def __init__(
        self,
        material: Material,
        probe: ProbeSpec,
        seed: int = 0,
        faults: Iterable[str] = (),
        *,
        initial_ground_C: float = 12.0,
        drift_K_per_h: float = 0.0,
        ground_gradient_K_per_m: float = 0.0,
        ambient_C: float = 18.0,
        noise_K_rms: float = 0.010,
        quantum_K: float = 0.0078125,
        cj_quantum_K: float = 0.015625,
        channel_offset_sd_K: float = 0.02,
        battery: BatterySpec | None = None,
        layers: Sequence[tuple[float, Material]] = (),
        install_depth_m: float = 0.0,
        axial_loss: bool | None = None,
        sample_radius_m: float | None = None,
        sample_height_m: float | None = None,
        sample_boundary: str = "fixed",
        emf_function: EmfFunction | None = None,
    ) -> None:
        if noise_K_rms < 0 or quantum_K < 0 or cj_quantum_K < 0:
            raise ModelConfigError("noise_K_rms, quantum_K and cj_quantum_K must be >= 0")
        self.material = material
        self.probe = probe
        self.seed = int(seed)
        self.initial_ground_C = float(initial_ground_C)
        self.drift_K_per_h = float(drift_K_per_h)
        self.ground_gradient_K_per_m = float(ground_gradient_K_per_m)
        self.ambient_C = float(ambient_C)
        self.noise_K_rms = float(noise_K_rms)
        self.quantum_K = float(quantum_K)
        self.cj_quantum_K = float(cj_quantum_K)
        self.battery = battery or BatterySpec()
        self.install_depth_m = float(install_depth_m)
        self.emf_function = emf_function
        self._rng = np.random.default_rng(self.seed)
        self._layers = sorted(((float(d), m) for d, m in layers), key=lambda x: x[0])
        if axial_loss is None:
            axial_loss = probe.kind == "dual" and not self._layers
        if axial_loss and self._layers:
            raise ModelConfigError("axial_loss=True needs a homogeneous medium; drop `layers` or axial_loss")
        if sample_height_m is not None and not axial_loss:
            raise ModelConfigError("sample_height_m needs axial_loss=True (the radial model has no ends)")
        self._axial = bool(axial_loss)

        # one physics model per distinct material that holds a sensor
        self._models: list[RadialModel | AxialRadialModel] = []
        self._model_materials: list[Material] = []
        model_of: dict[str, int] = {}
        self._channels: list[_Channel] = []
        for s in probe.sensors:
            depth = self.install_depth_m + probe.heater_length_m - s.axial_m
            mat = self._material_at(depth)
            if mat.key not in model_of:
                model_of[mat.key] = len(self._models)
                self._models.append(self._make_model(mat, sample_radius_m, sample_height_m, sample_boundary))
                self._model_materials.append(mat)
            offset = float(self._rng.normal(0.0, channel_offset_sd_K)) if channel_offset_sd_K > 0 else 0.0
            needle = s.needle_response(mat.k_W_per_mK, mat.rho_c_J_per_m3K)
            self._channels.append(_Channel(s, model_of[mat.key], depth, offset, needle=needle,
                                           needle_state=[0.0] * len(needle.taus_s) if needle else []))
        self._by_name = {c.spec.name: i for i, c in enumerate(self._channels)}
        self._needles = [c for c in self._channels if c.needle is not None]

        self._t = 0.0
        self._physics_lag = 0.0  # device time not yet stepped into the physics (< BASE_DT_S)
        self._heater_cmd = False
        self._power_cmd_W_per_m = 0.0
        self._energy_drawn_J = 0.0
        self._drift_factor = 1.0
        self._cj_wander = 0.0
        self._dry_time_s = 0.0
        self._rig_faults: set[str] = set()
        self._elec = _Electrical(supply_V=self._terminal_V(0.0))
        for f in faults:
            self.inject(f, True)

    # ---- construction helpers ----
    def _material_at(self, depth_m: float) -> Material:
        mat = self.material
        for top, m in self._layers:
            if depth_m >= top:
                mat = m
        return mat

    def _make_model(
        self, mat: Material, sample_radius_m: float | None, sample_height_m: float | None, boundary: str
    ) -> RadialModel | AxialRadialModel:
        p = self.probe
        if self._axial:
            # a dual probe is read millimetres away: a finer radial grid out to 0.2 m (heat needs over an hour to
            # get there in wet soil) resolves a pulse at the sensing needle to 0.3 % of its peak at half the cost of
            # a finer one (tests/test_sim_pulse.py)
            fine = p.kind == "dual"
            outer = sample_radius_m if sample_radius_m is not None or not fine else DUAL_OUTER_RADIUS_M
            half = 0.5 * sample_height_m if sample_height_m is not None else (
                0.5 * p.heater_length_m + DUAL_OUTER_RADIUS_M if fine else None)
            return AxialRadialModel(
                mat.k_W_per_mK, mat.rho_c_J_per_m3K, p.radius_m, p.probe_rho_c, p.heater_length_m,
                contact_conductance=p.contact_conductance, outer_radius_m=outer, outer_half_height_m=half,
                boundary=boundary, **(DUAL_GRID if fine else {}),
            )
        return RadialModel(
            mat.k_W_per_mK, mat.rho_c_J_per_m3K, p.radius_m, p.probe_rho_c,
            contact_conductance=p.contact_conductance, outer_radius_m=sample_radius_m, boundary=boundary,
        )

    # ---- commands ----
    def set_heater(self, on: bool, power_W_per_m: float = 0.0) -> None:
        """Switch the constant-power heater; the power is what the regulator aims for, not what it gets."""
        p = float(power_W_per_m)
        if not (p >= 0.0 and math.isfinite(p)):
            raise ModelConfigError(f"power_W_per_m must be >= 0, got {power_W_per_m!r}")
        self._heater_cmd = bool(on)
        self._power_cmd_W_per_m = p
        self._elec = self._electrical()

    def inject(self, fault: str, on: bool = True) -> None:
        """Switch a fault on or off by name (see FAULT_NAMES)."""
        kind, _, arg = fault.partition(":")
        if kind in _CHANNEL_FAULTS:
            ch = self._channel_for(arg, fault)
            if on:
                if kind == "stale_tc":
                    ch.last_reading = self._read_channel(ch, self._cj_true(), commit=False)[0]
                ch.faults.add(kind)
            else:
                ch.faults.discard(kind)
        elif kind in _RIG_FAULTS and not arg:
            if kind == "dry_out" and self._axial:
                raise ModelConfigError("the dry_out fault needs the radial model; build the rig without axial_loss")
            if on:
                self._rig_faults.add(kind)
            else:
                self._rig_faults.discard(kind)
            if kind == "poor_contact":
                h = self.probe.contact_conductance
                base = 10.0 * 3000.0 if h is None else h  # perfect contact degrades to a poor real one
                for m in self._models:
                    m.set_contact_conductance((0.1 * base) if on else h)
            if kind == "dry_out" and not on:
                self._dry_time_s = 0.0
                for m in self._models:
                    if isinstance(m, RadialModel):
                        m.set_conductivity_within(0.0, None)
        else:
            raise UnknownFaultError(f"unknown fault {fault!r}; valid: {', '.join(FAULT_NAMES)}")
        self._elec = self._electrical()

    def _channel_for(self, arg: str, fault: str) -> _Channel:
        if arg in self._by_name:
            return self._channels[self._by_name[arg]]
        if arg.isdigit() and int(arg) < len(self._channels):
            return self._channels[int(arg)]
        raise UnknownFaultError(
            f"fault {fault!r} names no channel; channels are {', '.join(self._by_name)} (or 0.."
            f"{len(self._channels) - 1})"
        )

    @property
    def active_faults(self) -> frozenset[str]:
        out = set(self._rig_faults)
        for c in self._channels:
            out |= {f"{k}:{c.spec.name}" for k in c.faults}
        return frozenset(out)

    def step_surroundings(self, temp_C: float) -> None:
        """The medium's outer boundary jumps to temp_C now: a sample mould moved into a bath or an oven.

        Temperatures inside are unchanged at this instant and relax towards temp_C with the sample's own
        time constant (drift and depth gradient carry on from the new level). With the default, effectively
        infinite medium this is a change of the far-field ground temperature.
        """
        delta = float(temp_C) - self._ground_C(self.install_depth_m)
        self.initial_ground_C += delta
        for m in self._models:
            m.shift_rise(-delta)
        for c in self._needles:
            c.needle_state[:] = [y - delta for y in c.needle_state]

    # ---- electrical world ----
    def heater_resistance_ohm(self) -> float:
        """Heater resistance now: nominal at 20 °C, TCR at the heater's mean temperature, drift if faulted."""
        p = self.probe
        t_heater = self._ground_C(self.install_depth_m + 0.5 * p.heater_length_m) + self._heater_rise_K()
        return p.heater_resistance_ohm * (1.0 + p.heater_tcr_per_K * (t_heater - 20.0)) * self._drift_factor

    def open_circuit_V(self) -> float:
        b = self.battery
        frac = self._energy_drawn_J / (b.capacity_Wh * 3600.0)
        if "battery_low" in self._rig_faults:
            frac = max(frac, FLAT_FRACTION)
        v = b.full_V - (b.full_V - b.empty_V) * min(frac, 1.0)
        if frac > 1.0:  # past the knee the voltage collapses
            v -= 20.0 * (frac - 1.0)
        return max(v, 0.0)

    def _terminal_V(self, supply_A: float) -> float:
        return max(self.open_circuit_V() - self.battery.internal_resistance_ohm * supply_A, 0.0)

    def _electrical(self) -> _Electrical:
        """Steady electrical state for the current command: PWM of the battery into the heater.

        At full duty the heater sees V_oc·R/(R + R_int); constant power is held by shortening the duty cycle
        until the request exceeds that, and then the power sags (and sags further as the battery drains).
        """
        b = self.battery
        voc = self.open_circuit_V()
        rint = b.internal_resistance_ohm
        if not self._heater_cmd:
            return _Electrical(0.0, 0.0, self._terminal_V(b.quiescent_A), 0.0, b.quiescent_A)
        want_W = self._power_cmd_W_per_m * self.probe.heater_length_m
        if "heater_open" in self._rig_faults:
            # the regulator opens the duty cycle fully looking for current that never comes
            v = self._terminal_V(b.quiescent_A)
            return _Electrical(v, 0.0, v, 0.0, b.quiescent_A)
        if "heater_short" in self._rig_faults:
            r_load = 0.2
            i_on = min(voc / (r_load + rint), b.current_limit_A)
            i_rms = min(math.sqrt(want_W / r_load), i_on)  # regulator aims its power at the short
            duty = (i_rms / i_on) ** 2 if i_on > 0 else 0.0
            supply_A = duty * i_on + b.quiescent_A
            return _Electrical(i_rms * r_load, i_rms, self._terminal_V(supply_A), 0.0, supply_A)
        r = self.heater_resistance_ohm()
        i_on = min(voc / (r + rint), b.current_limit_A)
        p_max = i_on * i_on * r
        p = min(want_W, p_max)
        duty = p / p_max if p_max > 0 else 0.0
        supply_A = duty * i_on + b.quiescent_A
        return _Electrical(math.sqrt(p * r), math.sqrt(p / r), self._terminal_V(supply_A), p, supply_A)

    # ---- time ----
    @property
    def t_s(self) -> float:
        return self._t

    def advance(self, dt_s: float) -> None:
        """Move device time on by dt_s, heating with the power the circuit actually delivers."""
        dt = float(dt_s)
        if not (dt >= 0.0 and math.isfinite(dt)):
            raise ModelConfigError(f"dt_s must be >= 0, got {dt_s!r}")
        if dt == 0.0:
            return
        elec = self._electrical()
        self._elec = elec
        self._energy_drawn_J += self.open_circuit_V() * elec.supply_A * dt
        if "heater_drift" in self._rig_faults:
            self._drift_factor *= math.exp(0.02 * dt / 3600.0)
        # cold junction wanders (Ornstein-Uhlenbeck, 0.15 K standard deviation, 15 min correlation time)
        tau, sd = 900.0, 0.15
        decay = math.exp(-dt / tau)
        self._cj_wander = self._cj_wander * decay + sd * math.sqrt(1.0 - decay * decay) * float(
            self._rng.standard_normal()
        )
        q = elec.heat_W / self.probe.heater_length_m
        if "dry_out" in self._rig_faults and q > 0.0:
            self._dry_time_s += dt
            r_dry = self.probe.radius_m * (1.0 + math.sqrt(self._dry_time_s / DRY_OUT_TIME_S))
            for m, mat in zip(self._models, self._model_materials, strict=True):
                if isinstance(m, RadialModel):
                    m.set_conductivity_within(r_dry, DRY_OUT_K_FRACTION * mat.k_W_per_mK)
        self._t += dt
        self._physics_lag += dt
        base = self.BASE_DT_S
        n = math.floor(self._physics_lag / base + 1e-9)
        if n > 0:
            self._physics_lag -= n * base
            while n > 0:
                size = min(1 << (n.bit_length() - 1), 1 << self.MAX_STEP_DOUBLINGS)
                before = [self._ground_rise_K(c) for c in self._needles]
                for m in self._models:
                    m.step(q, size * base)
                for c, start in zip(self._needles, before, strict=True):
                    assert c.needle is not None
                    c.needle.step(c.needle_state, start, self._ground_rise_K(c), size * base)
                n -= size
        self._elec = self._electrical()

    # ---- readings ----
    def _ground_C(self, depth_m: float) -> float:
        return (
            self.initial_ground_C
            + self.drift_K_per_h * self._t / 3600.0
            + self.ground_gradient_K_per_m * (depth_m - self.install_depth_m)
        )

    def _heater_rise_K(self) -> float:
        return float(np.mean([m.probe_rise_K() for m in self._models]))

    def true_temp_C(self, channel: str | int) -> float:
        """Noise-free temperature at a sensor (for tests and benches)."""
        ch = self._channel_for(str(channel), f"true_temp_C({channel!r})")
        return self._true_C(ch)

    def _ground_rise_K(self, ch: _Channel) -> float:
        """Rise of the probe or the ground at a junction (before any sensing needle's lag)."""
        m = self._models[ch.model_key]
        s = ch.spec
        if isinstance(m, AxialRadialModel):
            return m.rise_at_K(s.radial_m, s.axial_m - 0.5 * self.probe.heater_length_m)
        if s.radial_m <= self.probe.radius_m:
            return m.probe_rise_K()
        return m.rise_at_K(s.radial_m)

    def _true_C(self, ch: _Channel) -> float:
        rise = self._ground_rise_K(ch)
        if ch.needle is not None:
            rise = ch.needle.reading(ch.needle_state, rise)
        return self._ground_C(ch.depth_m) + rise

    def _cj_true(self) -> float:
        return self.ambient_C + self._cj_wander

    def _quantise(self, v: float, quantum: float) -> float:
        return round(v / quantum) * quantum if quantum > 0 else v

    def _read_channel(self, ch: _Channel, cj_true: float, commit: bool = True) -> tuple[float, int]:
        bits = 0
        noise = self.noise_K_rms * (10.0 if "noisy_tc" in ch.faults else 1.0)
        hot = cj_true if "short_tc" in ch.faults else self._true_C(ch) + ch.offset_K
        value = self._quantise(hot + noise * float(self._rng.standard_normal()), self.quantum_K)
        if "stale_tc" in ch.faults:
            value, bits = ch.last_reading, bits | FAULT_STALE
        lo, hi = _TC_RANGE_C[self.probe.thermocouple]
        if not lo <= value <= hi:
            bits |= FAULT_RANGE
        if "open_tc" in ch.faults:
            value, bits = math.nan, bits | FAULT_OPEN
        if "cj_fault" in self._rig_faults:
            value, bits = math.nan, bits | FAULT_CJ
        if commit and "stale_tc" not in ch.faults:
            ch.last_reading = value
        return value, bits

    def sample(self) -> RigSample:
        """Readings now. Each call draws fresh noise: equal seeds and equal call sequences give equal data."""
        cj_true = self._cj_true()
        channels = []
        for ch in self._channels:
            value, bits = self._read_channel(ch, cj_true)
            emf = None
            if self.emf_function is not None and not math.isnan(value):
                emf = round(float(self.emf_function(self.probe.thermocouple, value, cj_true)), 1)
            channels.append(ChannelReading(ch.spec.name, value, emf, bits))
        if "cj_fault" in self._rig_faults:
            cj = math.nan
        else:
            cj = self._quantise(cj_true + 0.01 * float(self._rng.standard_normal()), self.cj_quantum_K)
        e = self._elec
        # monitor: 0.05 % gain noise, 1 mV / 0.1 mA / 1 mV resolution (a typical 12-bit shunt monitor)
        g = [1.0 + 5e-4 * float(x) for x in self._rng.standard_normal(3)]
        return RigSample(
            t_s=self._t,
            cj_C=cj,
            channels=channels,
            heater_V=round(e.heater_V * g[0], 3),
            heater_A=round(e.heater_A * g[1], 4),
            supply_V=round(e.supply_V * g[2], 3),
            heater_on=self._heater_cmd,
            delivered_W_per_m=e.heat_W / self.probe.heater_length_m,
        )

    @property
    def channel_names(self) -> list[str]:
        return [c.spec.name for c in self._channels]
