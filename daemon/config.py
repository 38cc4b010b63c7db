"""The rig's configuration: one TOML file, by default /etc/linerig/rig.toml.

Every error names the file, the key and its line, and says what is expected, so a
field operator can fix the file without reading code. Example::

    [devices]
    frontend = "/dev/linerig-frontend"   # a device path or a pyserial URL (socket://host:port)
    supply = "/dev/linerig-supply"       # optional SCPI bench supply: heats instead of the front end
    supply_v_max = 20.0                  # optional ceilings asked of the supply (default: from the probe)
    supply_i_max = 0.5
    rate_hz = 1.0

    [daemon]
    socket = "/run/linerig/linerigd.sock"
    database = "/var/lib/linerig/linerig.db"
    group = "linerig"                   # who may use the control socket
    max_database_MB = 4000              # the database stops growing here: heater off, clear fault

    [probes]
    profiles = ["probes/lab-needle.toml"]  # relative to this file
    active = "DEMO-0001"                   # serial (or name) of the probe in use

    [limits]                               # daemon limits, see daemon.safety.LIMIT_HELP
    max_power_W_per_m = 40

    [run]                                  # the default run plan, see daemon.controller.PLAN_HELP
    heat_s = 600

    [presets.quick]                        # a named plan: [run] with these changes
    heat_s = 300

    [sync]                                 # push ended runs to a central PostgreSQL database by itself
    to = "service=linerig-central"         # libpq connection string; the password in ~/.pgpass, not here
    rig = "north-rig"                      # this rig's name there (default: made once, kept in the database)
"""

from __future__ import annotations

import grp
import math
import re
import tomllib
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any

from linerig.daemon.controller import PLAN_HELP, PlanError, RunPlan
from linerig.daemon.errors import ConfigError
from linerig.daemon.probe import ProbeProfile, ProbeProfileError, load_probe_profile
from linerig.daemon.safety import LIMIT_HELP, Limits, check_plan, limit_problem

DEFAULT_CONFIG_PATH = Path("/etc/linerig/rig.toml")
DEFAULT_PROBE_PATH = Path(__file__).parent / "profiles" / "default-needle.toml"
_URL = re.compile(r"^[a-z][a-z0-9+.-]*://", re.IGNORECASE)
_KEY = re.compile(r"^((?:[A-Za-z0-9_-]+|\"[^\"]*\"|'[^']*')(?:\s*\.\s*(?:[A-Za-z0-9_-]+|\"[^\"]*\"|'[^']*'))*)\s*=")


@dataclass(frozen=True)
class DeviceConfig:
    frontend: str | None = None
    frontend_baud: int = 115200
    supply: str | None = None
    supply_baud: int = 9600
    supply_v_max: float | None = None
    supply_i_max: float | None = None
    rate_hz: float = 1.0


@dataclass(frozen=True)
class DaemonConfig:
    socket: Path | None = None
    database: Path | None = None
    group: str | None = None
    max_database_MB: float | None = None


@dataclass(frozen=True)
class SyncConfig:
    """Where and how often linerigd pushes to the central database (daemon/central/scheduler.py)."""

    to: str
    rig: str | None = None
    interval_s: float = 300.0
    retry_s: float = 30.0
    max_backoff_s: float = 3600.0


@dataclass(frozen=True)
class RigConfig:
    source: str = "<defaults>"
    devices: DeviceConfig = field(default_factory=DeviceConfig)
    daemon: DaemonConfig = field(default_factory=DaemonConfig)
    probes: tuple[ProbeProfile, ...] = ()
    active_probe: ProbeProfile | None = None
    limits: Limits = field(default_factory=Limits)
    plan: RunPlan = field(default_factory=RunPlan)
    presets: dict[str, RunPlan] = field(default_factory=dict)
    sync: SyncConfig | None = None

    @property
    def probe(self) -> ProbeProfile:
        if self.active_probe is not None:
            return self.active_probe
        return load_probe_profile(DEFAULT_PROBE_PATH)


SECTIONS = ("devices", "daemon", "probes", "limits", "run", "presets", "sync")


# -- where a key is written ----------------------------------------------------
def _split_key(text: str) -> list[str]:
    """`a."b.c".d` → ["a", "b.c", "d"] (TOML dotted keys, bare or quoted)."""
    parts, cur, quote = [], "", ""
    for ch in text.strip():
        if quote:
            if ch == quote:
                quote = ""
            else:
                cur += ch
        elif ch in "\"'":
            quote = ch
        elif ch == ".":
            parts.append(cur.strip())
            cur = ""
        else:
            cur += ch
    parts.append(cur.strip())
    return parts


def key_line(text: str, dotted: list[str]) -> int | None:
    """1-based line where the key path ``dotted`` is set or its table opens; None when not found."""
    table: list[str] = []
    implied: int | None = None  # first line whose table or key lies inside ``dotted`` ([a.b] defines a)
    for n, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        if not line or line.startswith("#"):
            continue
        if line.startswith("["):
            inner = line.lstrip("[").split("]", 1)[0]
            table = _split_key(inner)
            path = table
        else:
            m = _KEY.match(line)
            if not m:
                continue
            path = [*table, *_split_key(m.group(1))]
        if path == dotted:
            return n
        if implied is None and path[: len(dotted)] == dotted:
            implied = n
    return implied


class _Src:
    """The file being read, for error messages."""

    def __init__(self, path: str, text: str) -> None:
        self.path = path
        self.text = text

    def error(self, dotted: list[str], message: str) -> ConfigError:
        where = ".".join(dotted)
        for i in range(len(dotted), 0, -1):  # the key itself, else the nearest table that holds it
            line = key_line(self.text, dotted[:i])
            if line is not None:
                return ConfigError(f"{self.path} line {line}: {where}: {message}")
        return ConfigError(f"{self.path}: {where}: {message}")


def _table(src: _Src, doc: dict[str, Any], name: str) -> dict[str, Any]:
    value = doc.get(name, {})
    if not isinstance(value, dict):
        raise src.error([name], f"expected a table [{name}], got {type(value).__name__}")
    return value


def _only(src: _Src, table: dict[str, Any], path: list[str], known: dict[str, str]) -> None:
    for key in table:
        if key not in known:
            raise src.error([*path, key], f"unknown key; expected one of: {', '.join(sorted(known))}")


# -- sections -----------------------------------------------------------------
_DEVICE_KEYS = {"frontend": "front-end port", "frontend_baud": "baud rate", "supply": "SCPI supply port",
                "supply_baud": "baud rate", "supply_v_max": "supply voltage ceiling, V",
                "supply_i_max": "supply current ceiling, A", "rate_hz": "sample rate, Hz"}
_DAEMON_KEYS = {"socket": "socket path", "database": "database path", "group": "control group",
                "max_database_MB": "size cap, MB"}
_PROBE_KEYS = {"profiles": "profile paths", "active": "serial or name"}
_SYNC_KEYS = {"to": "libpq connection string", "rig": "this rig's name", "interval_s": "seconds between pushes",
              "retry_s": "first retry after a failure, s", "max_backoff_s": "longest wait between retries, s",
              "allow_password": "true to accept a password written in `to`"}


def _port(src: _Src, path: list[str], value: Any) -> str:
    if not isinstance(value, str) or not value.strip():
        raise src.error(path, "expected a device path (/dev/...) or a pyserial URL (socket://host:port), "
                              f"got {value!r}")
    return value.strip()


def _baud(src: _Src, path: list[str], value: Any) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or not 300 <= value <= 4_000_000:
        raise src.error(path, f"expected a whole baud rate such as 9600 or 115200, got {value!r}")
    return value


def _devices(src: _Src, t: dict[str, Any]) -> DeviceConfig:
    _only(src, t, ["devices"], _DEVICE_KEYS)
    kw: dict[str, Any] = {}
    for key in ("frontend", "supply"):
        if key in t:
            kw[key] = _port(src, ["devices", key], t[key])
    for key in ("frontend_baud", "supply_baud"):
        if key in t:
            kw[key] = _baud(src, ["devices", key], t[key])
    for key, top in (("supply_v_max", 60.0), ("supply_i_max", 10.0)):
        if key in t:
            v = t[key]
            if isinstance(v, bool) or not isinstance(v, int | float) or not 0 < v <= top:
                raise src.error(["devices", key], f"expected a number above 0 and at most {top:g}, got {v!r}")
            kw[key] = float(v)
    if "rate_hz" in t:
        v = t["rate_hz"]
        if isinstance(v, bool) or not isinstance(v, int | float) or not 0.1 <= v <= 20:
            raise src.error(["devices", "rate_hz"], f"expected a sample rate from 0.1 to 20 Hz, got {v!r}")
        kw["rate_hz"] = float(v)
    return DeviceConfig(**kw)


def _daemon(src: _Src, t: dict[str, Any], base: Path) -> DaemonConfig:
    _only(src, t, ["daemon"], _DAEMON_KEYS)
    kw: dict[str, Any] = {}
    for key in ("socket", "database"):
        if key in t:
            v = t[key]
            if not isinstance(v, str) or not v.strip():
                raise src.error(["daemon", key], f"expected a file path, got {v!r}")
            kw[key] = (base / v).resolve() if not Path(v).is_absolute() else Path(v)
    if "group" in t:
        v = t["group"]
        if not isinstance(v, str) or not v:
            raise src.error(["daemon", "group"], f"expected a group name, got {v!r}")
        try:
            grp.getgrnam(v)
        except KeyError:
            raise src.error(["daemon", "group"], f"no group {v!r} on this machine; create it (see "
                                                 "systemd/README.md) or remove the key") from None
        kw["group"] = v
    if "max_database_MB" in t:
        v = t["max_database_MB"]
        if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v) or v <= 0:
            raise src.error(["daemon", "max_database_MB"], f"expected a size in MB > 0, got {v!r}")
        kw["max_database_MB"] = float(v)
    return DaemonConfig(**kw)


def _probes(src: _Src, t: dict[str, Any], base: Path) -> tuple[tuple[ProbeProfile, ...], ProbeProfile | None]:
    _only(src, t, ["probes"], _PROBE_KEYS)
    raw = t.get("profiles", [])
    if isinstance(raw, str):
        raw = [raw]
    if not isinstance(raw, list) or not all(isinstance(p, str) and p for p in raw):
        raise src.error(["probes", "profiles"], f"expected a list of probe profile paths, got {raw!r}")
    profiles: list[ProbeProfile] = []
    for p in raw:
        path = Path(p) if Path(p).is_absolute() else base / p
        try:
            prof = load_probe_profile(path)
        except ProbeProfileError as exc:
            raise src.error(["probes", "profiles"], f"profile {p!r} cannot be used: {exc}") from None
        if any(x.serial == prof.serial and x.name == prof.name for x in profiles):
            raise src.error(["probes", "profiles"], f"profile {p!r} repeats probe {prof.serial or prof.name!r}")
        profiles.append(prof)
    active = None
    if "active" in t:
        want = t["active"]
        matches = [x for x in profiles if want in (x.serial, x.name)]
        if not isinstance(want, str) or not matches:
            known = ", ".join(x.serial or x.name for x in profiles) or "none: list them in probes.profiles"
            raise src.error(["probes", "active"], f"expected the serial or name of a listed profile ({known}), "
                                                  f"got {want!r}")
        active = matches[0]
    elif profiles:
        active = profiles[0]
    return tuple(profiles), active


def _sync(src: _Src, doc: dict[str, Any]) -> SyncConfig | None:
    if "sync" not in doc:
        return None
    t = _table(src, doc, "sync")
    _only(src, t, ["sync"], _SYNC_KEYS)
    to = t.get("to")
    if not isinstance(to, str) or not to.strip():
        raise src.error(["sync", "to"], "expected a libpq connection string such as \"service=linerig-central\" or "
                                        f"\"postgresql://ROLE@HOST/DBNAME?sslmode=verify-full\", got {to!r}")
    from linerig.daemon.central.connect import has_password
    from linerig.daemon.central.errors import CentralError

    try:
        secret = has_password(to)
    except CentralError as exc:
        raise src.error(["sync", "to"], str(exc)) from None
    allow = t.get("allow_password", False)
    if not isinstance(allow, bool):
        raise src.error(["sync", "allow_password"], f"expected true or false, got {allow!r}")
    if secret and not allow:
        raise src.error(["sync", "to"], "a password is written here, readable by anyone who can read this file: "
                                        "put it in the service user's password file (~/.pgpass or PGPASSFILE) or a "
                                        "service file (PGSERVICEFILE) instead, or set allow_password = true")
    kw: dict[str, Any] = {"to": to.strip()}
    if "rig" in t:
        rig = t["rig"]
        if not isinstance(rig, str) or not rig.strip() or len(rig) > 100 or not rig.isprintable():
            raise src.error(["sync", "rig"], f"expected a name of 1 to 100 printable characters, got {rig!r}")
        kw["rig"] = rig.strip()
    for key, lo, hi in (("interval_s", 10.0, 86400.0), ("retry_s", 1.0, 86400.0), ("max_backoff_s", 10.0, 604800.0)):
        if key in t:
            v = t[key]
            if isinstance(v, bool) or not isinstance(v, int | float) or not lo <= v <= hi:
                raise src.error(["sync", key], f"expected seconds from {lo:g} to {hi:g}, got {v!r}")
            kw[key] = float(v)
    cfg = SyncConfig(**kw)
    if cfg.max_backoff_s < cfg.retry_s:
        raise src.error(["sync", "max_backoff_s"], f"expected at least retry_s ({cfg.retry_s:g}), "
                                                   f"got {cfg.max_backoff_s:g}")
    return cfg


def _limits(src: _Src, t: dict[str, Any]) -> Limits:
    known = {f.name for f in fields(Limits)}
    _only(src, t, ["limits"], {k: "" for k in known})
    for key, value in t.items():
        problem = limit_problem(key, value)
        if problem:
            raise src.error(["limits", key], f"expected {problem} ({LIMIT_HELP[key]}), got {value!r}")
    return Limits(**t)


def _plan(src: _Src, t: dict[str, Any], path: list[str], base: RunPlan) -> RunPlan:
    _only(src, t, path, PLAN_HELP)
    try:
        return base.with_changes(t)
    except PlanError as exc:
        raise src.error([*path, exc.key], f"expected {exc.problem} ({PLAN_HELP[exc.key]}), "
                                          f"got {exc.value!r}") from None


def _check_plan(src: _Src, plan: RunPlan, path: list[str], limits: Limits, probe: ProbeProfile | None) -> None:
    for key, problem in zip(("power_W_per_m", "heat_s"),
                            (check_plan(plan.power_W_per_m, 0, limits), check_plan(0, plan.heat_s, limits)),
                            strict=True):
        if problem:
            raise src.error([*path, key], f"{problem[0]}; lower it or raise the limit in [limits]")
    names = [s.name for s in probe.sensors] if probe else ["heater"]
    if plan.sensor not in names:
        raise src.error([*path, "sensor"], f"expected one of the active probe's sensors ({', '.join(names)}), "
                                           f"got {plan.sensor!r}")


def parse_config(text: str, source: str = "<config>", base_dir: Path | None = None) -> RigConfig:
    src = _Src(source, text)
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{source}: not valid TOML: {exc}") from None
    for key in doc:
        if key not in SECTIONS:
            raise src.error([key], f"unknown section; expected one of: {', '.join(SECTIONS)}")
    base = base_dir or Path.cwd()
    devices = _devices(src, _table(src, doc, "devices"))
    daemon = _daemon(src, _table(src, doc, "daemon"), base)
    probes, active = _probes(src, _table(src, doc, "probes"), base)
    limits = _limits(src, _table(src, doc, "limits"))
    plan = _plan(src, _table(src, doc, "run"), ["run"], RunPlan())
    probe = active or load_probe_profile(DEFAULT_PROBE_PATH)
    if plan.sensor == RunPlan().sensor and "sensor" not in _table(src, doc, "run") \
            and plan.sensor not in [s.name for s in probe.sensors]:
        plan = plan.with_changes({"sensor": probe.sensors[0].name})  # the default follows the probe
    _check_plan(src, plan, ["run"], limits, probe)
    presets: dict[str, RunPlan] = {}
    for name, table in _table(src, doc, "presets").items():
        if not isinstance(table, dict):
            raise src.error(["presets", name], f"expected a table [presets.{name}] of plan settings")
        presets[name] = _plan(src, table, ["presets", name], plan)
        _check_plan(src, presets[name], ["presets", name], limits, probe)
    if devices.frontend and not _URL.match(devices.frontend) and not devices.frontend.startswith("/"):
        raise src.error(["devices", "frontend"], "expected an absolute device path or a pyserial URL, "
                                                 f"got {devices.frontend!r}")
    sync = _sync(src, doc)
    return RigConfig(source=source, devices=devices, daemon=daemon, probes=probes, active_probe=active,
                     limits=limits, plan=plan, presets=presets, sync=sync)


def load_config(path: Path) -> RigConfig:
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ConfigError(f"{path}: no such file; write one (see systemd/README.md) or pass --config") from None
    except OSError as exc:
        raise ConfigError(f"{path}: cannot read it ({exc.strerror})") from None
    return parse_config(text, str(path), path.parent)
