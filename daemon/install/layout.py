"""Where linerig-setup puts each file on the target machine, and what it never touches.

Paths are absolute on the target; `on(root, path)` places one under a throwaway root.
"""

from __future__ import annotations

from pathlib import Path

SYSUSERS = Path("/etc/sysusers.d/linerig.conf")
OPERATORS = Path("/etc/sysusers.d/linerig-operators.conf")
RULES = Path("/etc/udev/rules.d/70-linerig.rules")
UNIT = Path("/etc/systemd/system/linerigd.service")
SYNC_DROPIN = Path("/etc/systemd/system/linerigd.service.d/sync.conf")
CONFIG_DIR = Path("/etc/linerig")
CONFIG = CONFIG_DIR / "rig.toml"
PROBES_DIR = CONFIG_DIR / "probes"
BY_ID = Path("/dev/serial/by-id")
STATE_DIR = Path("/var/lib/linerig")
DATABASE = STATE_DIR / "linerig.db"
SERVICE = "linerigd"
CONTROL_GROUP = "linerig"

INSTALLED = (SYSUSERS, OPERATORS, RULES, SYNC_DROPIN, UNIT)
"""What an uninstall removes: the files only linerig-setup writes and nobody edits."""

KEPT = ((CONFIG, "the rig's configuration"), (PROBES_DIR, "the probe profiles"),
        (DATABASE, "the measurements"))
"""What an uninstall leaves, and why it is worth keeping."""


def on(root: Path, path: Path) -> Path:
    """``path`` (absolute on the target) under ``root``."""
    return root / path.relative_to("/")
