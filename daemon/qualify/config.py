"""The qualification settings file: acceptance criteria, procedure, intended use and reference media.

Defaults live in ``criteria.toml`` beside this module; a user file is merged over them key by key (a
``[[reference]]`` list replaces the default list). Values keep the file's trade units; the accessors give SI.
"""

from __future__ import annotations

import copy
import math
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from linerig.daemon.resources import qualify_criteria_path

CRITERION_IDS = (
    "insulation", "heater_resistance", "heater_tcr", "heater_drift", "tc_offset", "tc_noise", "response_time",
    "probe_heat_capacity", "contact_resistance", "reference_media", "calibration_factor", "calibration_bias",
    "repeatability", "length_to_diameter", "sensor_spacing", "axial_loss", "sample_radius", "sample_height",
)
"""Every criterion, in report order."""


class QualificationConfigError(ValueError):
    """The criteria file is missing a key or holds a value the procedure cannot use; the message names it."""


@dataclass(frozen=True)
class Criterion:
    """One acceptance criterion: its limits (file units), where they come from and whether it decides the verdict."""

    id: str
    title: str
    source: str
    required: bool
    limits: dict[str, float]

    def limit(self, key: str) -> float:
        try:
            return self.limits[key]
        except KeyError:
            raise QualificationConfigError(f"criteria.{self.id}.{key} is missing") from None


@dataclass(frozen=True)
class ReferenceMedium:
    """A medium of known conductivity and heat capacity for the calibration runs."""

    name: str
    k_W_per_mK: float
    k_u_W_per_mK: float
    rho_c_MJ_per_m3K: float
    power_W_per_m: float
    description: str = ""
    source: str = ""
    sim_material: str = ""
    calibration_medium: str = ""
    """A medium of ``daemon.workflows.calibration`` (as `linerig calibrate` uses): its conductivity is then taken
    from there at the medium's measured temperature, and ``k_W_per_mK`` is only the nominal for planning."""

    @property
    def rho_c_J_per_m3K(self) -> float:
        return self.rho_c_MJ_per_m3K * 1e6

    @property
    def alpha_m2_per_s(self) -> float:
        return self.k_W_per_mK / self.rho_c_J_per_m3K


@dataclass(frozen=True)
class Procedure:
    sensor: str
    bath_temperatures_C: tuple[float, ...]
    bath_log_s: float
    heater_check_s: float
    heater_check_W_per_m: float
    repeats: int
    baseline_s: float
    heat_s: float
    sample_interval_s: float
    max_drift_K_per_min: float
    settle_timeout_s: float


@dataclass(frozen=True)
class IntendedUse:
    description: str
    k_W_per_mK: float
    rho_c_MJ_per_m3K: float
    heating_s: float
    sample_diameter_mm: float
    sample_height_mm: float
    source: str = ""

    @property
    def alpha_m2_per_s(self) -> float:
        return self.k_W_per_mK / (self.rho_c_MJ_per_m3K * 1e6)

    @property
    def has_sample(self) -> bool:
        return self.sample_diameter_mm > 0


@dataclass(frozen=True)
class QualificationConfig:
    criteria: dict[str, Criterion]
    procedure: Procedure
    intended_use: IntendedUse
    references: tuple[ReferenceMedium, ...]
    text: str
    """The merged settings as TOML, stored with each qualification so a result can be read and re-judged later."""


def _merge(base: dict[str, Any], over: dict[str, Any]) -> dict[str, Any]:
    out = copy.deepcopy(base)
    for key, value in over.items():
        if isinstance(value, dict) and isinstance(out.get(key), dict):
            out[key] = _merge(out[key], value)
        else:
            out[key] = copy.deepcopy(value)
    return out


def _num(table: dict[str, Any], key: str, where: str, *, positive: bool = True, allow_zero: bool = False) -> float:
    if key not in table:
        raise QualificationConfigError(f"{where}.{key} is missing (a number)")
    v = table[key]
    if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
        raise QualificationConfigError(f"{where}.{key} must be a finite number, got {v!r}")
    if positive and (v < 0 or (v == 0 and not allow_zero)):
        raise QualificationConfigError(f"{where}.{key} must be {'>= 0' if allow_zero else '> 0'}, got {v!r}")
    return float(v)


def _text(table: dict[str, Any], key: str, where: str, default: str = "") -> str:
    v = table.get(key, default)
    if not isinstance(v, str):
        raise QualificationConfigError(f"{where}.{key} must be a string, got {v!r}")
    return v


def _toml_value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int | float):
        return repr(v)
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n") + '"'
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    raise QualificationConfigError(f"cannot write {type(v).__name__} to TOML")


def dump_toml(doc: dict[str, Any]) -> str:
    """TOML text for the settings' shape: tables of scalars and lists, nested tables, arrays of tables."""
    lines: list[str] = []

    def table(prefix: str, t: dict[str, Any]) -> None:
        scalars = {k: v for k, v in t.items() if not isinstance(v, dict) and not _is_table_array(v)}
        if prefix and (scalars or not t):
            lines.append(f"[{prefix}]")
        lines.extend(f"{k} = {_toml_value(v)}" for k, v in scalars.items())
        if scalars:
            lines.append("")
        for k, v in t.items():
            name = f"{prefix}.{k}" if prefix else k
            if isinstance(v, dict):
                table(name, v)
            elif _is_table_array(v):
                for item in v:
                    lines.append(f"[[{name}]]")
                    lines.extend(f"{ik} = {_toml_value(iv)}" for ik, iv in item.items())
                    lines.append("")

    table("", doc)
    return "\n".join(lines)


def _is_table_array(v: Any) -> bool:
    return isinstance(v, list) and bool(v) and all(isinstance(x, dict) for x in v)


def config_from_dict(doc: dict[str, Any]) -> QualificationConfig:
    """Check and build the settings from parsed TOML (already merged with the defaults)."""
    raw = doc.get("criteria")
    if not isinstance(raw, dict):
        raise QualificationConfigError("[criteria] tables are missing")
    unknown = sorted(set(raw) - set(CRITERION_IDS))
    if unknown:
        raise QualificationConfigError(f"unknown criterion criteria.{unknown[0]}; known: {', '.join(CRITERION_IDS)}")
    criteria: dict[str, Criterion] = {}
    for cid in CRITERION_IDS:
        table = raw.get(cid)
        if not isinstance(table, dict):
            raise QualificationConfigError(f"[criteria.{cid}] is missing")
        where = f"criteria.{cid}"
        limits = {k: _num(table, k, where, positive=False) for k, v in table.items()
                  if k not in ("title", "source", "required")}
        required = table.get("required", True)
        if not isinstance(required, bool):
            raise QualificationConfigError(f"{where}.required must be true or false, got {required!r}")
        criteria[cid] = Criterion(cid, _text(table, "title", where, cid), _text(table, "source", where), required,
                                  limits)

    p = doc.get("procedure")
    if not isinstance(p, dict):
        raise QualificationConfigError("[procedure] is missing")
    temps = p.get("bath_temperatures_C")
    if (not isinstance(temps, list) or len(temps) < 2
            or not all(isinstance(x, int | float) and not isinstance(x, bool) for x in temps)):
        raise QualificationConfigError("procedure.bath_temperatures_C must be a list of at least two numbers")
    if len({float(x) for x in temps}) < 2:
        raise QualificationConfigError("procedure.bath_temperatures_C needs two different temperatures for the TCR")
    repeats = p.get("repeats")
    if not isinstance(repeats, int) or isinstance(repeats, bool) or repeats < 2:
        raise QualificationConfigError(
            f"procedure.repeats must be a whole number >= 2 (repeatability needs two), got {repeats!r}")
    procedure = Procedure(
        sensor=_text(p, "sensor", "procedure"),
        bath_temperatures_C=tuple(float(x) for x in temps),
        bath_log_s=_num(p, "bath_log_s", "procedure"),
        heater_check_s=_num(p, "heater_check_s", "procedure"),
        heater_check_W_per_m=_num(p, "heater_check_W_per_m", "procedure"),
        repeats=repeats,
        baseline_s=_num(p, "baseline_s", "procedure"),
        heat_s=_num(p, "heat_s", "procedure"),
        sample_interval_s=_num(p, "sample_interval_s", "procedure"),
        max_drift_K_per_min=_num(p, "max_drift_K_per_min", "procedure"),
        settle_timeout_s=_num(p, "settle_timeout_s", "procedure"),
    )

    u = doc.get("intended_use")
    if not isinstance(u, dict):
        raise QualificationConfigError("[intended_use] is missing")
    intended = IntendedUse(
        description=_text(u, "description", "intended_use"),
        k_W_per_mK=_num(u, "k_W_per_mK", "intended_use"),
        rho_c_MJ_per_m3K=_num(u, "rho_c_MJ_per_m3K", "intended_use"),
        heating_s=_num(u, "heating_s", "intended_use"),
        sample_diameter_mm=_num(u, "sample_diameter_mm", "intended_use", allow_zero=True),
        sample_height_mm=_num(u, "sample_height_mm", "intended_use", allow_zero=True),
        source=_text(u, "source", "intended_use"),
    )

    refs_raw = doc.get("reference")
    if not isinstance(refs_raw, list) or not refs_raw:
        raise QualificationConfigError("at least one [[reference]] medium is needed")
    refs: list[ReferenceMedium] = []
    for i, r in enumerate(refs_raw):
        where = f"reference[{i}]"
        if not isinstance(r, dict):
            raise QualificationConfigError(f"{where} must be a table")
        name = _text(r, "name", where)
        if not name:
            raise QualificationConfigError(f"{where}.name must be a non-empty string")
        if any(x.name == name for x in refs):
            raise QualificationConfigError(f"{where}.name {name!r} is used twice")
        refs.append(ReferenceMedium(
            name=name, k_W_per_mK=_num(r, "k_W_per_mK", where), k_u_W_per_mK=_num(r, "k_u_W_per_mK", where,
                                                                                  allow_zero=True),
            rho_c_MJ_per_m3K=_num(r, "rho_c_MJ_per_m3K", where), power_W_per_m=_num(r, "power_W_per_m", where),
            description=_text(r, "description", where), source=_text(r, "source", where),
            sim_material=_text(r, "sim_material", where, name),
            calibration_medium=_text(r, "calibration_medium", where)))
    return QualificationConfig(criteria, procedure, intended, tuple(refs), dump_toml(doc))


def load_config(path: str | Path | None = None, overrides: dict[str, Any] | None = None) -> QualificationConfig:
    """Defaults, then the file at ``path`` (if any), then ``overrides`` (a dict shaped like the file)."""
    doc = tomllib.loads(qualify_criteria_path().read_text(encoding="utf-8"))
    if path is not None:
        p = Path(path)
        try:
            user_text = p.read_text(encoding="utf-8")
        except OSError as e:
            raise QualificationConfigError(f"{p}: cannot read the criteria file ({e.strerror or e})") from e
        try:
            user = tomllib.loads(user_text)
        except tomllib.TOMLDecodeError as e:
            raise QualificationConfigError(f"{p}: not valid TOML ({e})") from e
        doc = _merge(doc, user)
    if overrides:
        doc = _merge(doc, overrides)
    return config_from_dict(doc)


def config_from_toml(text: str) -> QualificationConfig:
    """Settings from stored TOML text (as kept with each qualification)."""
    try:
        return config_from_dict(tomllib.loads(text))
    except tomllib.TOMLDecodeError as e:
        raise QualificationConfigError(f"stored criteria are not valid TOML ({e})") from e
