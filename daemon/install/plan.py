"""What linerig-setup would change on this machine, as an ordered list of changes and what it noticed.

The plan compares what each file should hold with what it holds now, so a second run finds nothing to do. Commands
follow from the files: the accounts are made when the sysusers files change (or the accounts are missing), udev is
reloaded when its rule changes, systemd when the unit changes, and the service is started when it is not running,
or restarted when something it reads changed, unless a measurement is under way.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from linerig.daemon.install import render
from linerig.daemon.install.changes import Change, RemoveDir, RemoveFile, RunCommand, WriteFile, folders_for
from linerig.daemon.install.detect import BY_ID, Detection, Found, detect
from linerig.daemon.install.host import Host, under_way
from linerig.daemon.install.layout import (
    CONFIG,
    CONTROL_GROUP,
    DATABASE,
    INSTALLED,
    KEPT,
    OPERATORS,
    PROBES_DIR,
    RULES,
    SERVICE,
    SYNC_DROPIN,
    SYSUSERS,
    UNIT,
)
from linerig.daemon.paths import SERVICE_SOCKET
from linerig.daemon.probe import ProbeProfileError, load_probe_profile
from linerig.daemon.resources import probe_profile, probe_profiles

DEFAULT_PROBE = "lab-needle"
SERVICE_USER = "linerig"


class SetupError(RuntimeError):
    """linerig-setup cannot do what was asked; the message says what to change."""


@dataclass(frozen=True)
class Options:
    bin_dir: Path
    operators: tuple[str, ...] = ()
    probe: str | None = None
    frontend: str | None = None
    supply: str | None = None


@dataclass
class Plan:
    changes: list[Change] = field(default_factory=list)
    found: Detection = field(default_factory=Detection)
    notes: list[str] = field(default_factory=list)
    socket: Path = SERVICE_SOCKET
    starts: bool = False
    """The service runs after these changes (a front end is configured)."""


def _read(host: Host, path: Path) -> str | None:
    try:
        return host.path(path).read_text(encoding="utf-8")
    except FileNotFoundError:
        return None


def _want(host: Host, path: Path, text: str | None, changes: list[WriteFile]) -> bool:
    """Adds a write when ``path`` should hold ``text`` and does not; True when it will change."""
    if text is None:
        return False
    old = _read(host, path)
    if old == text:
        return False
    changes.append(WriteFile(path, text, old))
    return True


def _ports(host: Host, opts: Options) -> Detection:
    """What the ports say now; ``skipped`` when they must not be asked (the service holds them)."""
    if host.live and host.service_running():
        return Detection(skipped=f"{SERVICE} is running and holds them (stop it to have them found again); the "
                                 "udev rule and rig.toml stay as they are")
    named = [p for p in (opts.frontend, opts.supply) if p]
    for p in named:
        if not p.startswith(f"{BY_ID}/"):
            raise SetupError(f"{p}: give the port by its {BY_ID} name (ls -l {BY_ID}), which stays the same "
                             "whichever USB socket it is in")
        if not host.path(Path(p)).exists():
            raise SetupError(f"{p}: no such port; is it plugged in? (ls -l {BY_ID})")
    found = detect(host.root, only=None if not named else [Path(p) for p in named])
    for role, port in (("frontend", opts.frontend), ("supply", opts.supply)):
        if port is None:
            continue
        hits = found.frontends if role == "frontend" else found.supplies
        if not any(h.port == port for h in hits):  # named but silent or the other kind: used as given
            hits.insert(0, Found(port, role, f"given with --{role}, did not identify itself"))
            for lst in (found.silent, found.busy, found.denied):
                if port in lst:
                    lst.remove(port)
    return found


def _profiles(host: Host, changes: list[WriteFile]) -> list[str]:
    """Copies the packaged probe profiles that are not there yet (never over one); every profile's file name."""
    for src in probe_profiles():
        target = PROBES_DIR / src.name
        if _read(host, target) is None:
            changes.append(WriteFile(target, src.read_text(encoding="utf-8")))
    there = {p.name for p in host.path(PROBES_DIR).glob("*.toml")} if host.path(PROBES_DIR).is_dir() else set()
    return sorted(there | {c.path.name for c in changes if c.path.parent == PROBES_DIR})


def _probe_key(host: Host, name: str, changes: list[WriteFile]) -> str:
    """The serial (or name) of probe profile ``name`` in the probes folder, as rig.toml's ``active`` wants it."""
    return _probe(host, name, changes).key


@dataclass(frozen=True)
class _Probe:
    key: str  # serial, or name
    heater_length_m: float | None


def _probe(host: Host, name: str, changes: list[WriteFile]) -> _Probe:
    target = PROBES_DIR / f"{name}.toml"
    pending = next((c for c in changes if c.path == target), None)
    path = host.path(target)
    if pending is None and not path.is_file():
        there = sorted(p.stem for p in host.path(PROBES_DIR).glob("*.toml")) if host.path(PROBES_DIR).is_dir() else []
        raise SetupError(f"--probe {name}: no {target}; choose one of {', '.join(there) or 'the packaged ones'}, or "
                         "put your profile there first")
    try:
        # a copy not written yet is read from the packaged profile it comes from
        profile = load_probe_profile(probe_profile(name) if pending is not None else path)
    except ProbeProfileError as exc:
        raise SetupError(f"--probe {name}: {exc}") from None
    return _Probe(profile.serial or profile.name, profile.length_m)


def _active_heater_length(host: Host, active: str, changes: list[WriteFile]) -> float | None:
    """The heated length of the profile whose serial or name is ``active`` (None when none matches)."""
    for name in _profiles(host, []):
        try:
            probe = _probe(host, Path(name).stem, changes)
        except SetupError:
            continue
        if probe.key == active:
            return probe.heater_length_m
    return None


def install_plan(host: Host, opts: Options) -> Plan:
    plan = Plan()
    for user in opts.operators:
        if not host.user_exists(user):
            raise SetupError(f"--operator {user}: no such user on this machine (see /etc/passwd); create the "
                             "account first, or check the spelling")
    writes: list[WriteFile] = []
    service_user_changed = _want(host, SYSUSERS, render.sysusers_text(), writes)
    operators_changed = _want(host, OPERATORS, render.operators_text(_read(host, OPERATORS), list(opts.operators)),
                              writes)
    profiles = _profiles(host, writes)

    found = plan.found = _ports(host, opts)
    probed = found.skipped is None
    old_config = _read(host, CONFIG)
    rules_changed = config_changed = False
    if probed or _read(host, RULES) is None:
        rules_changed = _want(host, RULES, render.rules_text(found), writes)
    if old_config is not None and not render.untouched(old_config):
        plan.notes.append(f"{CONFIG} is yours (edited, or not written by linerig-setup): left as it is")
        _compare_ports(plan, old_config)
    elif probed or old_config is None:
        active = (_probe_key(host, opts.probe, writes) if opts.probe
                  else render.configured_probe(old_config) or _probe_key(host, DEFAULT_PROBE, writes))
        length = _active_heater_length(host, active, writes)
        config_changed = _want(host, CONFIG, render.config_text(found, active, profiles, length), writes)
    elif opts.probe:
        plan.notes.append(f"--probe {opts.probe} not applied: {CONFIG} is written again only when the ports are "
                          f"probed (stop {SERVICE} first)")
    unit_changed = _want(host, UNIT, render.unit_text(opts.bin_dir), writes)
    config_now = next((w.text for w in writes if w.path == CONFIG), old_config)
    removals: list[Change] = []
    if render.pushes(config_now):
        unit_changed |= _want(host, SYNC_DROPIN, render.sync_dropin_text(), writes)
    elif host.path(SYNC_DROPIN).exists():
        removals += [RemoveFile(SYNC_DROPIN), RemoveDir(SYNC_DROPIN.parent)]
        plan.notes.append(f"no [sync] in {CONFIG}: the drop-in that gives the push its network goes")
        unit_changed = True

    plan.changes += folders_for(host, [w.path for w in writes])
    plan.changes += writes + removals
    plan.socket = render.configured_socket(config_now)
    # an operator's membership is checked on each connection: a new one needs no restart
    _commands(host, plan, config_now, accounts=service_user_changed or operators_changed, rules=rules_changed,
              restart=unit_changed or config_changed or rules_changed or service_user_changed, unit=unit_changed)
    return plan


def _compare_ports(plan: Plan, config: str) -> None:
    """Says where the ports found differ from what the operator's rig.toml names (it is theirs to change)."""
    for role, hit in (("frontend", plan.found.frontend), ("supply", plan.found.supply)):
        named = render.configured_port(config, role)
        if hit is not None and named not in (hit.port, f"/dev/{render.ROLES[role]}"):
            plan.notes.append(f"found a {role} at {hit.port}, but {CONFIG} names {named or 'none'}")


def _commands(host: Host, plan: Plan, config: str | None, *, accounts: bool, rules: bool, restart: bool,
              unit: bool) -> None:
    files = [str(p) for p in (SYSUSERS, OPERATORS) if any(getattr(c, "path", None) == p for c in plan.changes)
             or host.path(p).exists()]
    groups = render.sysusers_groups(render.sysusers_text())
    if accounts or not host.accounts_exist(SERVICE_USER, groups | {CONTROL_GROUP}):
        plan.changes.append(RunCommand(("systemd-sysusers", *files), "the service user and its groups"))
    if rules:
        plan.changes += [RunCommand(("udevadm", "control", "--reload"), "read the new udev rule"),
                         RunCommand(("udevadm", "trigger", "--subsystem-match=tty", "--action=change"),
                                    "apply it to the ports plugged in now"),
                         RunCommand(("udevadm", "settle"), "wait until it has")]
    if unit:
        plan.changes.append(RunCommand(("systemctl", "daemon-reload"), "read the new unit"))
    if render.configured_port(config, "frontend") is None:
        plan.notes.append(f"no front end in {CONFIG}: {SERVICE} is installed but not started; plug the front end in "
                          "and run linerig-setup again (or set [devices] frontend)")
        return
    plan.starts = True
    if not (host.service_enabled() and host.service_running()):
        plan.changes.append(RunCommand(("systemctl", "enable", "--now", SERVICE), "start it now and at every boot"))
    elif restart:
        busy = under_way(host.daemon_status(plan.socket))
        if busy:
            plan.notes.append(f"{SERVICE} is measuring ({busy}): not restarted; when the run is over, "
                              f"systemctl restart {SERVICE}")
        else:
            plan.changes.append(RunCommand(("systemctl", "restart", SERVICE), "pick up the changed files"))


def uninstall_plan(host: Host) -> Plan:
    plan = Plan()
    config = _read(host, CONFIG)
    plan.socket = render.configured_socket(config)
    if host.path(UNIT).exists() and (host.service_enabled() or host.service_running()):
        busy = under_way(host.daemon_status(plan.socket)) if host.service_running() else None
        if busy:
            raise SetupError(f"{SERVICE} is measuring ({busy}): let the run end, or stop it with `linerig abort`, "
                             "then uninstall")
        plan.changes.append(RunCommand(("systemctl", "disable", "--now", SERVICE), "stop it and keep it stopped"))
    removed = [p for p in INSTALLED if host.path(p).exists()]
    plan.changes += [RemoveFile(p) for p in removed]
    if SYNC_DROPIN in removed:
        plan.changes.append(RemoveDir(SYNC_DROPIN.parent))
    if UNIT in removed:
        plan.changes.append(RunCommand(("systemctl", "daemon-reload"), "forget the unit"))
    if RULES in removed:
        plan.changes.append(RunCommand(("udevadm", "control", "--reload"), "forget the udev rule"))
    for path, what in KEPT:
        if host.path(path).exists():
            plan.notes.append(f"kept {path}: {what}" + (" (remove it yourself if you mean to)"
                                                        if path != DATABASE else ", never removed by linerig-setup"))
    plan.notes.append(f"kept the {SERVICE_USER} user and its groups: they own the measurements in "
                      f"{DATABASE.parent}")
    return plan
