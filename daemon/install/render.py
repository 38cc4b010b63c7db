"""The files linerig-setup writes, each made from the packaged one in systemd/ (never a copy of a checkout's).

The udev rule keeps the packaged rule's group, mode and ModemManager setting and matches the port found by its
``/dev/serial/by-id`` name (the packaged rule's serial number is a placeholder). The configuration is the example
with the found ports and the chosen probe; its first line carries a mark, so linerig-setup can tell a file it wrote
and nobody edited (which it may write again) from one an operator changed (which it never touches).
"""

from __future__ import annotations

import hashlib
import math
import re
import tomllib
from pathlib import Path
from typing import Any

from linerig.daemon.install.detect import Detection
from linerig.daemon.install.layout import BY_ID, CONTROL_GROUP, OPERATORS, PROBES_DIR
from linerig.daemon.paths import SERVICE_SOCKET
from linerig.daemon.resources import service_file
from linerig.daemon.safety import FRONT_END_MAX_POWER_W, plan_power_problem

PACKAGED_BIN = "/opt/linerig/bin/"
PACKAGED_SHARE = "/opt/linerig/share/linerig/systemd/"
ROLES = {"frontend": "linerig-frontend", "supply": "linerig-supply"}
_MARK = re.compile(r"^# Written by linerig-setup \(mark ([0-9a-f]{12})\)")
_TOKEN = re.compile(r'\s*([A-Za-z_]+(?:\{[^}]*\})?)\s*(==|!=|\+=|-=|:=|=)\s*"([^"]*)"\s*,?')


class RenderError(ValueError):
    """A packaged file no longer has the shape linerig-setup builds on: the message names the file and the line."""


# -- the unit -------------------------------------------------------------------
def unit_text(bin_dir: Path) -> str:
    """The packaged unit, pointed at this installation's commands and documentation."""
    text = service_file("linerigd.service").read_text(encoding="utf-8")
    if PACKAGED_BIN not in text:
        raise RenderError(f"linerigd.service: no {PACKAGED_BIN}linerigd line to point at {bin_dir}")
    docs = service_file("README.md").parent
    return text.replace(PACKAGED_BIN, f"{bin_dir}/").replace(PACKAGED_SHARE, f"{docs}/")


# -- users and groups -------------------------------------------------------------
def sysusers_text() -> str:
    return service_file("linerig.sysusers").read_text(encoding="utf-8")


def sysusers_groups(text: str) -> set[str]:
    """The groups a sysusers file creates (``g`` lines, and the user's own group)."""
    return {f[1] for f in (line.split() for line in text.splitlines()) if len(f) > 1 and f[0] in ("g", "u")}


def operators_text(existing: str | None, added: list[str]) -> str | None:
    """The operators' memberships: those already in the file and the ones added now (None: no operator at all)."""
    users = [f[1] for f in (line.split() for line in (existing or "").splitlines())
             if len(f) == 3 and f[0] == "m" and f[2] == CONTROL_GROUP]
    users += [u for u in added if u not in users]
    if not users:
        return None
    head = (f"# {OPERATORS}: written by linerig-setup --operator. These users are in group {CONTROL_GROUP}: they may\n"
            "# use the control socket, and so switch the heater on. To take someone off, delete the line and run\n"
            f"#   gpasswd -d USER {CONTROL_GROUP}\n")
    return head + "".join(f"m {u} {CONTROL_GROUP}\n" for u in users)


# -- udev -------------------------------------------------------------------------
def _logical_lines(text: str) -> list[str]:
    return text.replace("\\\n", " ").splitlines()


def _packaged_rule(role: str) -> list[tuple[str, str, str]]:
    """The packaged rule that names ``/dev/linerig-<role>``, as (key, operator, value) tokens."""
    link = ROLES[role]
    for line in _logical_lines(service_file("70-linerig.rules").read_text(encoding="utf-8")):
        if line.lstrip().startswith("#") or f'SYMLINK+="{link}"' not in line.replace(" ", ""):
            continue
        tokens = _TOKEN.findall(line)
        if "".join(f"{k}{op}\"{v}\"" for k, op, v in tokens) != re.sub(r'[\s,]', "", line):
            raise RenderError(f"70-linerig.rules: cannot read the rule for {link}: {line.strip()}")
        return tokens
    raise RenderError(f"70-linerig.rules: no rule names {link}")


def udev_rule(role: str, port: str) -> str:
    """The packaged rule for ``role`` with its device match replaced by the port's by-id name."""
    tokens = _packaged_rule(role)
    name = Path(port).relative_to("/dev").as_posix() if port.startswith(f"{BY_ID}/") else None
    if name is None or not re.fullmatch(r"[0-9A-Za-z#+\-.:=@_/]+", name):
        raise RenderError(f"{port}: udev can match only a {BY_ID} name made of plain characters")
    keep_match = [(k, op, v) for k, op, v in tokens if op in ("==", "!=") and k in ("SUBSYSTEM", "KERNEL")]
    assign = [(k, op, v) for k, op, v in tokens if op not in ("==", "!=")]
    match = [*keep_match, ("SYMLINK", "==", name)]
    return ", ".join(f'{k}{op}"{v}"' for k, op, v in match) + ", \\\n  " + \
        ", ".join(f'{k}{op}"{v}"' for k, op, v in assign) + "\n"


def rules_text(found: Detection) -> str:
    """70-linerig.rules for the ports found; a role not found is left as a commented note."""
    out = ["# /etc/udev/rules.d/70-linerig.rules: written by linerig-setup, which found the ports below. Each rule is",
           "# the packaged one (group, mode, ModemManager kept off) matched by the port's /dev/serial/by-id name.",
           "# Another device, or a device on another adapter: plug it in and run linerig-setup again.", ""]
    for role, what, hit in (("frontend", "front end", found.frontend), ("supply", "SCPI supply", found.supply)):
        if hit is None:
            out += [f"# {what}: none found at set-up, so /dev/{ROLES[role]} is not made.", ""]
            continue
        out += [f"# {what}: {hit.identity}", udev_rule(role, hit.port)]
    return "\n".join(out).rstrip("\n") + "\n"


# -- rig.toml -----------------------------------------------------------------------
def _table(text: str | None, name: str) -> dict[str, Any]:
    try:
        table = tomllib.loads(text or "").get(name, {})
    except tomllib.TOMLDecodeError:
        return {}
    return table if isinstance(table, dict) else {}


def configured_port(text: str | None, role: str) -> str | None:
    """The port a rig.toml names for ``role`` (``frontend`` or ``supply``), or None."""
    port = _table(text, "devices").get(role)
    return port if isinstance(port, str) and port.strip() else None


def configured_socket(text: str | None) -> Path:
    """The control socket a rig.toml names, or the service's own."""
    socket = _table(text, "daemon").get("socket")
    return Path(socket) if isinstance(socket, str) and socket.startswith("/") else SERVICE_SOCKET


def pushes(text: str | None) -> bool:
    """True when a rig.toml has a [sync] table: the daemon pushes to a central database and needs the network."""
    try:
        return isinstance(tomllib.loads(text or "").get("sync"), dict)
    except tomllib.TOMLDecodeError:
        return False


def sync_dropin_text() -> str:
    return service_file("linerigd-sync.conf").read_text(encoding="utf-8")


def configured_probe(text: str | None) -> str | None:
    """The ``active`` probe a rig.toml names, or None."""
    active = _table(text, "probes").get("active")
    return active if isinstance(active, str) else None


def mark(body: str) -> str:
    return hashlib.sha256(body.encode("utf-8")).hexdigest()[:12]


def untouched(text: str) -> bool:
    """True when ``text`` is a configuration linerig-setup wrote and nobody has edited since."""
    head, _, body = text.partition("\n")
    _, _, body = body.partition("\n")
    m = _MARK.match(head)
    return m is not None and m.group(1) == mark(body)


def config_text(found: Detection, active: str, profiles: list[str], heater_length_m: float | None = None) -> str:
    """The example configuration with the ports found, every probe profile listed and ``active`` (a probe's serial
    or name) in use, under a mark (`untouched`). When the front end heats, the example's power limit is lowered to
    what its flashed total-power limit allows over ``heater_length_m`` (a long rod), or the daemon refuses the file."""
    lines = service_file("rig.toml.example").read_text(encoding="utf-8").splitlines()
    if found.supply is None and heater_length_m:
        at = _key_line(lines, "limits", "max_power_W_per_m")
        written = float(lines[at].split("=", 1)[1].split("#", 1)[0])
        if plan_power_problem(written, heater_length_m):
            most = math.floor(FRONT_END_MAX_POWER_W / heater_length_m)
            lines[at:at + 1] = [f"# lowered at set-up: the front end's {FRONT_END_MAX_POWER_W:g} W over this probe's "
                                f"{heater_length_m:g} m heater", f"max_power_W_per_m = {most}"]
    for role, what, hit in (("frontend", "front end", found.frontend), ("supply", "SCPI supply", found.supply)):
        at = _key_line(lines, "devices", role)
        if hit is not None:
            note = f"# {what} found at set-up: {hit.identity}, {hit.port}"
            lines[at:at + 1] = [note, _uncommented(lines[at])]
        else:
            note = (f"# no {what} found at set-up: plug it in and run linerig-setup again, or give its port here"
                    if role == "frontend" else f"# no {what} found at set-up (the front end heats)")
            lines[at:at + 1] = [note, _commented(lines[at])]
    listed = ", ".join(f'"{PROBES_DIR.name}/{p}"' for p in profiles)
    at = _key_line(lines, "probes", "profiles")
    lines[at] = _with_value(lines[at], "profiles", f"[{listed}]")
    at = _key_line(lines, "probes", "active")
    lines[at] = _with_value(lines[at], "active", f'"{active}"')
    body = "\n".join(lines) + "\n"
    return (f"# Written by linerig-setup (mark {mark(body)}). Until this file is edited, linerig-setup may write it\n"
            "# again with the ports it finds; once edited it is yours, and linerig-setup leaves it as it is.\n" + body)


def _key_line(lines: list[str], section: str, key: str) -> int:
    where = ""
    for i, line in enumerate(lines):
        s = line.strip()
        if s.startswith("["):
            where = s.split("]")[0].strip("[ ")
        elif where == section and re.match(rf"#?\s*{key}\s*=", s):
            return i
    raise RenderError(f"rig.toml.example: no {key} line in [{section}]")


def _uncommented(line: str) -> str:
    """``# key = value   # note`` as ``key = value     # note``, the note where it was."""
    m = re.match(r"#\s?(.*?)(\s+#.*)?$", line)
    if m is None:
        return line
    return m.group(1) + (" " * (len(line) - len(m.group(1)) - len(m.group(2) or "")) + (m.group(2) or "")
                         if m.group(2) else "")


def _commented(line: str) -> str:
    return line if line.lstrip().startswith("#") else f"# {line}"


def _with_value(line: str, key: str, value: str) -> str:
    """``key = value`` in place of the line's own value, its comment kept at the same column where it fits."""
    m = re.match(rf'(\s*{key}\s*=\s*)("[^"]*"|\[[^\]]*\])(\s*)(#.*)?$', line)
    if m is None:
        raise RenderError(f"rig.toml.example: cannot read the line {line!r}")
    start = m.group(1) + value
    if not m.group(4):
        return start
    column = len(m.group(1) + m.group(2) + m.group(3))
    return f"{start.ljust(column - 1)} {m.group(4)}"
