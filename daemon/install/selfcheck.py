"""The last word of linerig-setup: what the rig looks like now, from the running daemon where there is one.

On a live system with the service started, the daemon is asked over its socket (front end and supply identity,
probe) and the socket's group and mode are read from the file system. Under a throwaway root, or before a front end
is configured, the same lines come from what the ports said at set-up and from rig.toml, and say so.
"""

from __future__ import annotations

import grp
import time
from pathlib import Path
from typing import Any

from linerig.daemon.config import load_config
from linerig.daemon.errors import ConfigError
from linerig.daemon.install import render
from linerig.daemon.install.host import Host
from linerig.daemon.install.layout import CONFIG, SERVICE
from linerig.daemon.install.plan import Plan

IDENTITY_WAIT_S = 15.0


def report(host: Host, plan: Plan) -> tuple[bool, list[str]]:
    """(all well, the lines to print): configuration, front end, supply, probe, socket."""
    config_line, probe_line = _config(host)
    ok = not config_line.startswith("configuration: ConfigError")
    status = _status(host, plan) if host.live and plan.starts else None
    if status is not None:
        front, supply, socket = _from_daemon(status, plan.socket)
    else:
        front, supply = _from_ports(plan, "found at set-up" + ("" if host.live else "; --root: nothing runs here"))
        socket = f"socket: {plan.socket}, group {render.CONTROL_GROUP} (made when {SERVICE} starts)"
        if host.live and plan.starts:
            socket += f"; {SERVICE} is not answering there: see journalctl -u {SERVICE}"
            ok = False
    return ok, [config_line, front, supply, probe_line, socket]


def _from_ports(plan: Plan, why: str) -> tuple[str, str]:
    if plan.found.skipped:
        return f"front end: not probed ({plan.found.skipped})", "supply: not probed"
    fe, sup = plan.found.frontend, plan.found.supply
    return (f"front end: {f'{fe.identity} at {fe.port}' if fe else 'none found'} ({why})",
            f"supply: {f'{sup.identity} at {sup.port}' if sup else 'none (the front end heats)'} ({why})")


def _config(host: Host) -> tuple[str, str]:
    """Reads rig.toml as the daemon will; the groups the sysusers file makes count as there (a throwaway root)."""
    made = render.sysusers_groups(render.sysusers_text())
    try:
        cfg = load_config(host.path(CONFIG), lambda g: g in made or host.group_exists(g))
    except ConfigError as exc:
        return f"configuration: ConfigError: {exc}", "probe: unknown (the configuration does not read)"
    return (f"configuration: {CONFIG} reads as linerigd will read it",
            f"probe: {cfg.probe.name} (serial {cfg.probe.serial or 'none'}), active in {CONFIG}")


def _status(host: Host, plan: Plan) -> dict[str, Any] | None:
    """The daemon's status once it knows its front end (or as it is after a while, or None if it does not answer)."""
    deadline = time.monotonic() + IDENTITY_WAIT_S
    status = None
    while time.monotonic() < deadline:
        status = host.daemon_status(plan.socket, wait_s=5.0)
        if status is not None and status.get("identity"):
            break
        time.sleep(0.5)  # the daemon identifies its front end in its own time; ask again
    return status


def _from_daemon(status: dict[str, Any], socket: Path) -> tuple[str, str, str]:
    """Front end, supply and socket as the running daemon has them."""
    fe = status.get("identity")
    link = "link up" if status.get("link_up") else f"link down: {status.get('link_problem') or 'no answer yet'}"
    front = (f"front end: {fe['model']} serial {fe['serial']}, firmware {fe['firmware']} ({link})" if fe
             else f"front end: not identified yet ({link})")
    sup = status.get("supply_identity")
    if status.get("heat_source") != "scpi":
        supply = "supply: none (the front end heats)"
    elif sup:
        supply = f"supply: {sup['maker']} {sup['model']} serial {sup['serial']}, firmware {sup['firmware']}"
    else:
        supply = "supply: configured, not identified"
    try:
        st = socket.stat()
        where = f"socket: {socket}, group {grp.getgrgid(st.st_gid).gr_name}, mode {st.st_mode & 0o777:04o}"
    except (OSError, KeyError) as exc:
        where = f"socket: {socket}: {exc}"
    return front, supply, where
