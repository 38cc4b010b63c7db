"""Probe profiles: the geometry and heat capacity a reduction needs, read from a small TOML file.

A profile is the only place probe dimensions live, so every reduction (live, offline, calibration) sees
the same numbers. Values in the file carry trade units (mm, MJ/(m³·K)); the SI accessors are what reduction
code uses.

Schema (``hardware/probes/*.toml``)::

    [probe]
    name = "LN-100 lab needle"
    serial = "LN100-0007"
    kind = "single"                    # "single" | "dual" | "rod"
    heater_length_mm = 100.0
    radius_mm = 0.635                  # outer radius of the heated needle
    heat_capacity_MJ_per_m3K = 2.5     # volumetric heat capacity of the needle body
    heater_resistance_ohm = 41.0       # optional, nominal at 20 °C
    heater_tcr_per_K = 0.0             # optional
    thermocouple = "T"                 # optional ITS-90 type letter
    radius_u_mm = 0.01                 # optional standard uncertainty of the radius
    sample_radius_mm = 25.0            # optional: the probe sits on the axis of a sample this wide (a lab cell,
                                       #  a core tube); usually given per run (run metadata sample_radius_m)
    [[sensor]]
    name = "heater"                    # CSV column T_heater_C
    radial_mm = 0.0                    # 0 = inside the heated needle; > 0 = distance from the heater axis
    axial_mm = 50.0                    # optional, distance from the tip
    radial_u_mm = 0.1                  # optional standard uncertainty of the spacing
    needle_radius_mm = 0.5             # optional, a radial sensor's own needle (default: as the heated needle on a
    needle_heat_capacity_MJ_per_m3K = 3.0  #  dual probe, none elsewhere), for the heat-pulse model
    spacing_calibrated = false         # optional: radial_mm is an effective spacing from pulses in a medium of
                                       #  known ρc (set by a stored spacing calibration)
    [pulse]                            # optional: the heat-pulse run this probe is made for (daemon preset "pulse")
    sensor = "needle8"                 # the radial sensor the pulse is read at
    power_W_per_m = 20.0
    pulse_s = 50.0                     # heating time
    record_s = 280.0                   # recording after heater on (the run's recovery logs the rest)
    baseline_s = 120.0                 # optional
"""

from __future__ import annotations

import json
import math
import tomllib
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

KINDS = ("single", "dual", "rod")
THERMOCOUPLE_TYPES = ("B", "E", "J", "K", "N", "R", "S", "T")


class ProbeProfileError(ValueError):
    """A probe profile is missing a key or holds a value the reduction cannot use."""


@dataclass(frozen=True)
class SensorPosition:
    """Where one temperature sensor sits relative to the heater."""

    name: str
    radial_mm: float = 0.0
    axial_mm: float | None = None
    radial_u_mm: float | None = None
    needle_radius_mm: float | None = None
    needle_heat_capacity_MJ_per_m3K: float | None = None
    spacing_calibrated: bool = False   # radial_mm is an effective spacing from a pulse in a medium of known ρc

    @property
    def is_on_heater(self) -> bool:
        return self.radial_mm == 0.0

    @property
    def radial_m(self) -> float:
        return self.radial_mm * 1e-3


@dataclass(frozen=True)
class PulsePlan:
    """The heat-pulse run a probe is made for (``pulse_plan.design_pulse`` derives one)."""

    sensor: str
    power_W_per_m: float
    pulse_s: float
    record_s: float
    baseline_s: float | None = None

    def plan_changes(self) -> dict[str, Any]:
        """The run-plan settings of this pulse (``controller.RunPlan``): heat for the pulse, record the decay."""
        out: dict[str, Any] = {"kind": "pulse", "sensor": self.sensor, "power_W_per_m": self.power_W_per_m,
                               "heat_s": self.pulse_s, "recover_s": max(self.record_s - self.pulse_s, 1.0),
                               "auto_stop": False, "cycles": 1}
        if self.baseline_s is not None:
            out["baseline_s"] = self.baseline_s
        return out


@dataclass(frozen=True)
class ProbeProfile:
    """One probe: heated needle (or rod) geometry, its heat capacity and its sensors."""

    name: str
    radius_mm: float
    heater_length_mm: float | None = None
    heat_capacity_MJ_per_m3K: float | None = None
    serial: str = ""
    kind: str = "single"
    heater_resistance_ohm: float | None = None
    heater_tcr_per_K: float = 0.0
    thermocouple: str | None = None
    radius_u_mm: float | None = None
    sensors: tuple[SensorPosition, ...] = field(default_factory=lambda: (SensorPosition("heater"),))
    pulse: PulsePlan | None = None
    # the sample around the probe, when it is not the ground: its outer face bends the line (``window.wall_end_s``)
    sample_radius_mm: float | None = None

    # --- SI accessors -------------------------------------------------------------------------------------
    @property
    def radius_m(self) -> float:
        return self.radius_mm * 1e-3

    @property
    def radius_u_m(self) -> float:
        """Standard uncertainty of the radius; 1 % of it when the profile does not say (no source)."""
        return (self.radius_u_mm if self.radius_u_mm is not None else 0.01 * self.radius_mm) * 1e-3

    @property
    def length_m(self) -> float | None:
        return None if self.heater_length_mm is None else self.heater_length_mm * 1e-3

    @property
    def sample_radius_m(self) -> float | None:
        return None if self.sample_radius_mm is None else self.sample_radius_mm * 1e-3

    def in_sample(self, radius_m: float | None) -> ProbeProfile:
        """This probe on the axis of a sample of that radius (None: in the ground, or as the profile says)."""
        if radius_m is None:
            return self
        if not (math.isfinite(radius_m) and radius_m * 1e3 > self.radius_mm):
            raise ProbeProfileError(f"sample radius must be a number larger than the probe's radius "
                                    f"({self.radius_mm:g} mm), got {radius_m * 1e3:g} mm")
        beyond = max((s.radial_mm for s in self.sensors), default=0.0)
        if radius_m * 1e3 <= beyond:
            raise ProbeProfileError(f"sample radius {radius_m * 1e3:g} mm does not reach the farthest sensor "
                                    f"({beyond:g} mm from the heater)")
        return replace(self, sample_radius_mm=radius_m * 1e3)

    @property
    def heat_capacity_J_per_m3K(self) -> float | None:
        return None if self.heat_capacity_MJ_per_m3K is None else self.heat_capacity_MJ_per_m3K * 1e6

    @property
    def heat_capacity_J_per_mK(self) -> float | None:
        """Heat capacity per unit length of the heated needle, S = π a² ρc."""
        c = self.heat_capacity_J_per_m3K
        return None if c is None else math.pi * self.radius_m**2 * c

    def sensor(self, name: str) -> SensorPosition:
        for s in self.sensors:
            if s.name == name:
                return s
        known = ", ".join(s.name for s in self.sensors)
        raise ProbeProfileError(f"probe {self.name!r} has no sensor {name!r} (it has: {known})")

    def has_sensor(self, name: str) -> bool:
        return any(s.name == name for s in self.sensors)

    def spacing_m(self, name: str) -> float:
        """Radial distance of a sensor from the heater axis; 0 for a sensor inside the heated needle."""
        return self.sensor(name).radial_m

    def sensor_radius_m(self, name: str) -> float:
        """Radius at which the sensor sees the medium: the needle radius for a sensor inside the heater."""
        s = self.sensor(name)
        return self.radius_m if s.is_on_heater else s.radial_m

    def sensor_radius_u_m(self, name: str) -> float:
        s = self.sensor(name)
        if s.is_on_heater:
            return self.radius_u_m
        u = s.radial_u_mm if s.radial_u_mm is not None else 0.01 * s.radial_mm
        return u * 1e-3

    def needle_radius_m(self, name: str) -> float:
        """Radius of a radial sensor's own needle: as given, else the heated needle's on a dual probe, else 0."""
        s = self.sensor(name)
        if s.needle_radius_mm is not None:
            return s.needle_radius_mm * 1e-3
        return self.radius_m if self.kind == "dual" and not s.is_on_heater else 0.0

    def needle_heat_capacity_J_per_m3K(self, name: str) -> float | None:
        """Volumetric heat capacity of a radial sensor's needle: as given, else the heated needle's on a dual probe."""
        s = self.sensor(name)
        if s.needle_heat_capacity_MJ_per_m3K is not None:
            return s.needle_heat_capacity_MJ_per_m3K * 1e6
        return self.heat_capacity_J_per_m3K if self.kind == "dual" and not s.is_on_heater else None

    def with_sensor(self, name: str, radial_mm: float, radial_u_mm: float | None = None,
                    calibrated: bool = False) -> ProbeProfile:
        """A copy with one sensor's radial position (and its uncertainty) set, e.g. from ``--spacing`` or a spacing
        calibration (``calibrated``: an effective spacing from a pulse in a medium of known ρc, which has taken in
        the pulse model's own error there); the sensor is added if missing. Its place and its needle are kept."""
        if radial_mm < 0 or not math.isfinite(radial_mm):
            raise ProbeProfileError(
                f"sensor {name!r}: spacing must be a finite distance >= 0 mm, got {radial_mm}")
        if radial_u_mm is not None and not (radial_u_mm >= 0 and math.isfinite(radial_u_mm)):
            raise ProbeProfileError(f"sensor {name!r}: spacing uncertainty must be >= 0 mm, got {radial_u_mm}")
        old = next((s for s in self.sensors if s.name == name), None)
        if old is None:
            return replace(self, sensors=(*self.sensors, SensorPosition(name=name, radial_mm=radial_mm,
                                                                       radial_u_mm=radial_u_mm,
                                                                       spacing_calibrated=calibrated)))
        new = replace(old, radial_mm=radial_mm, radial_u_mm=radial_u_mm if radial_u_mm is not None
                      else (old.radial_u_mm if old.radial_mm == radial_mm else None), spacing_calibrated=calibrated)
        return replace(self, sensors=tuple(new if s.name == name else s for s in self.sensors))


def sensor_mm(item: str, option: str, example: str = "needle8=8.0") -> tuple[str, float]:
    """A command line's ``SENSOR=MM`` (``--spacing`` and the like) as (name, millimetres >= 0)."""
    name, sep, mm = item.partition("=")
    try:
        value = float(mm)
    except ValueError:
        value = math.nan
    if not sep or not name or not (math.isfinite(value) and value >= 0):
        raise ProbeProfileError(f"{option} {item!r}: expected SENSOR=MM with MM >= 0, e.g. {option} {example}")
    return name, value


def _fail(source: str, key: str, expected: str, got: Any = None) -> ProbeProfileError:
    tail = "" if got is None else f", got {got!r}"
    return ProbeProfileError(f"{source}: {key} must be {expected}{tail}")


def _number(table: dict[str, Any], key: str, source: str, prefix: str, *, required: bool,
            positive: bool = True, allow_zero: bool = False) -> float | None:
    if key not in table:
        if required:
            raise _fail(source, f"{prefix}{key}", "given (a number)", None)
        return None
    v = table[key]
    if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
        raise _fail(source, f"{prefix}{key}", "a finite number", v)
    v = float(v)
    if positive and (v < 0 or (v == 0 and not allow_zero)):
        raise _fail(source, f"{prefix}{key}", ">= 0" if allow_zero else "> 0", v)
    return v


def profile_from_dict(doc: dict[str, Any], source: str = "<probe profile>") -> ProbeProfile:
    """Build and check a profile from parsed TOML; errors name the source, the key and what is expected."""
    probe = doc.get("probe")
    if not isinstance(probe, dict):
        raise ProbeProfileError(f"{source}: missing [probe] table")
    extra_tables = sorted(set(doc) - {"probe", "sensor", "pulse"})
    if extra_tables:
        raise ProbeProfileError(f"{source}: unknown table [{extra_tables[0]}] (known: [probe], [[sensor]], [pulse])")
    known = {"name", "serial", "kind", "heater_length_mm", "radius_mm", "heat_capacity_MJ_per_m3K",
             "heater_resistance_ohm", "heater_tcr_per_K", "thermocouple", "radius_u_mm", "sample_radius_mm"}
    unknown = sorted(set(probe) - known)
    if unknown:
        raise ProbeProfileError(
            f"{source}: unknown key probe.{unknown[0]} (known keys: {', '.join(sorted(known))})")
    name = probe.get("name")
    if not isinstance(name, str) or not name.strip():
        raise _fail(source, "probe.name", "a non-empty string", name)
    serial = probe.get("serial", "")
    if not isinstance(serial, str):
        raise _fail(source, "probe.serial", "a string", serial)
    kind = probe.get("kind", "single")
    if kind not in KINDS:
        raise _fail(source, "probe.kind", f"one of {', '.join(KINDS)}", kind)
    radius = _number(probe, "radius_mm", source, "probe.", required=True)
    length = _number(probe, "heater_length_mm", source, "probe.", required=True)
    cap = _number(probe, "heat_capacity_MJ_per_m3K", source, "probe.", required=False)
    res = _number(probe, "heater_resistance_ohm", source, "probe.", required=False)
    tcr = _number(probe, "heater_tcr_per_K", source, "probe.", required=False, positive=False)
    radius_u = _number(probe, "radius_u_mm", source, "probe.", required=False, allow_zero=True)
    sample_r = _number(probe, "sample_radius_mm", source, "probe.", required=False)
    tc = probe.get("thermocouple")
    if tc is not None and (not isinstance(tc, str) or tc.upper() not in THERMOCOUPLE_TYPES):
        raise _fail(source, "probe.thermocouple", f"one of {', '.join(THERMOCOUPLE_TYPES)}", tc)
    assert radius is not None and length is not None
    if length <= 2 * radius:
        raise _fail(source, "probe.heater_length_mm", "longer than the needle diameter", length)

    raw_sensors = doc.get("sensor", [])
    if not isinstance(raw_sensors, list) or not raw_sensors:
        raise ProbeProfileError(f"{source}: at least one [[sensor]] table is needed (name, radial_mm)")
    sensors: list[SensorPosition] = []
    for i, s in enumerate(raw_sensors):
        where = f"sensor[{i}]."
        if not isinstance(s, dict):
            raise ProbeProfileError(f"{source}: sensor[{i}] must be a table")
        sensor_keys = ("name", "radial_mm", "axial_mm", "radial_u_mm", "needle_radius_mm",
                       "needle_heat_capacity_MJ_per_m3K", "spacing_calibrated")
        extra = sorted(set(s) - set(sensor_keys))
        if extra:
            raise ProbeProfileError(f"{source}: unknown key {where}{extra[0]} (known: {', '.join(sensor_keys)})")
        sname = s.get("name")
        if not isinstance(sname, str) or not sname or not all(c.isalnum() or c == "_" for c in sname):
            raise _fail(source, f"{where}name", "a name of letters, digits or _ (it names the CSV column "
                        "T_<name>_C)", sname)
        if any(x.name == sname for x in sensors):
            raise _fail(source, f"{where}name", "unique among the sensors", sname)
        radial = _number(s, "radial_mm", source, where, required=True, allow_zero=True)
        axial = _number(s, "axial_mm", source, where, required=False, allow_zero=True)
        radial_u = _number(s, "radial_u_mm", source, where, required=False, allow_zero=True)
        needle_r = _number(s, "needle_radius_mm", source, where, required=False, allow_zero=True)
        needle_c = _number(s, "needle_heat_capacity_MJ_per_m3K", source, where, required=False)
        calibrated = s.get("spacing_calibrated", False)
        if not isinstance(calibrated, bool):
            raise _fail(source, f"{where}spacing_calibrated", "true or false (the spacing is an effective one from "
                        "a pulse in a medium of known ρc)", calibrated)
        assert radial is not None
        if axial is not None and axial > length:
            raise _fail(source, f"{where}axial_mm", f"within the heater length ({length} mm)", axial)
        if 0.0 < radial <= radius:
            raise _fail(source, f"{where}radial_mm",
                        f"0 (inside the heater) or beyond the needle radius ({radius} mm)", radial)
        if needle_r is not None and radial > 0 and needle_r >= radial - radius:
            raise _fail(source, f"{where}needle_radius_mm", "small enough that the needles do not touch", needle_r)
        sensors.append(SensorPosition(sname, radial, axial, radial_u, needle_r, needle_c, calibrated))
    profile = ProbeProfile(name=name, radius_mm=radius, heater_length_mm=length, heat_capacity_MJ_per_m3K=cap,
                           serial=serial, kind=kind, heater_resistance_ohm=res, heater_tcr_per_K=tcr or 0.0,
                           thermocouple=tc.upper() if isinstance(tc, str) else None, radius_u_mm=radius_u,
                           sensors=tuple(sensors), pulse=_pulse(doc.get("pulse"), sensors, source))
    if sample_r is not None:
        try:
            return profile.in_sample(sample_r * 1e-3)
        except ProbeProfileError as e:
            raise _fail(source, "probe.sample_radius_mm", "beyond the probe and every sensor", sample_r) from e
    return profile


def _pulse(table: Any, sensors: list[SensorPosition], source: str) -> PulsePlan | None:
    """The optional [pulse] table: the heat-pulse run the probe is made for."""
    if table is None:
        return None
    if not isinstance(table, dict):
        raise ProbeProfileError(f"{source}: [pulse] must be a table")
    keys = ("sensor", "power_W_per_m", "pulse_s", "record_s", "baseline_s")
    extra = sorted(set(table) - set(keys))
    if extra:
        raise ProbeProfileError(f"{source}: unknown key pulse.{extra[0]} (known: {', '.join(keys)})")
    name = table.get("sensor")
    radial = [s.name for s in sensors if not s.is_on_heater]
    if name not in radial:
        raise _fail(source, "pulse.sensor", f"one of the radial sensors ({', '.join(radial) or 'none'})", name)
    power = _number(table, "power_W_per_m", source, "pulse.", required=True)
    pulse_s = _number(table, "pulse_s", source, "pulse.", required=True)
    record = _number(table, "record_s", source, "pulse.", required=True)
    base = _number(table, "baseline_s", source, "pulse.", required=False)
    assert power is not None and pulse_s is not None and record is not None
    if record <= pulse_s:
        raise _fail(source, "pulse.record_s", f"longer than the pulse ({pulse_s:g} s): the decay is the measurement",
                    record)
    return PulsePlan(str(name), power, pulse_s, record, base)


def load_probe_profile(path: str | Path) -> ProbeProfile:
    """Read a probe profile TOML file."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except OSError as e:
        raise ProbeProfileError(f"{p}: cannot read probe profile ({e.strerror or e})") from e
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise ProbeProfileError(f"{p}: not valid TOML ({e})") from e
    return profile_from_dict(doc, str(p))


def stored_profile(text: str, source: str) -> ProbeProfile:
    """A profile from the probes table: TOML (``[probe]`` and ``[[sensor]]``) or the daemon's flat JSON."""
    if not text.lstrip().startswith("{"):
        return profile_from_dict(tomllib.loads(text), source)
    flat = json.loads(text)
    if not isinstance(flat, dict):
        raise ProbeProfileError(f"{source}: stored profile is not a table")
    sensors = flat.pop("sensors", None) or [{"name": "heater"}]
    pulse = flat.pop("pulse", None)
    probe = {k: v for k, v in flat.items() if v is not None}
    if not isinstance(sensors, list):
        raise ProbeProfileError(f"{source}: stored sensors are not a list")
    doc: dict[str, Any] = {"probe": probe, "sensor": [{k: v for k, v in s.items() if v is not None}
                                                      for s in sensors if isinstance(s, dict)]}
    if isinstance(pulse, dict):
        doc["pulse"] = {k: v for k, v in pulse.items() if v is not None}
    return profile_from_dict(doc, source)
