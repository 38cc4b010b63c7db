"""The files linerig ships beside its code, found through `importlib.resources`.

A checkout (an editable install) and an installed wheel find them the same way: the firmware and probe profiles in
the data package ``linerig.hardware`` (the folder hardware/), the unit, rules, sysusers file and example configuration
in ``linerig.systemd`` (systemd/), the defaults in ``linerig.daemon``. Nothing else locates these files by
``__file__``, so a file missing from the wheel fails here, with its name, and not as a path into a checkout.
"""

from __future__ import annotations

import os
from importlib.resources import files
from pathlib import Path

FIRMWARE_ENV = "LINERIG_FIRMWARE_DIR"


class ResourceMissingError(FileNotFoundError):
    """A file linerig ships is not where the installed package keeps it: reinstall linerig."""


def _package_dir(package: str) -> Path:
    """A data package's folder on disk (the firmware runs from it and the set-up copies from it, so a real folder)."""
    root = files(package)
    if not isinstance(root, Path) or not root.is_dir():
        raise ResourceMissingError(f"{package} is not a folder on disk ({root}); install linerig from a wheel or a "
                                   "checkout, not from a zip archive")
    return root


def _file(package: str, *parts: str) -> Path:
    path = _package_dir(package).joinpath(*parts)
    if not path.is_file():
        raise ResourceMissingError(f"{'/'.join(parts)} is missing from {package} ({path}); reinstall linerig")
    return path


def firmware_dir() -> Path:
    """The folder that holds the front-end firmware (``main.py`` and ``probefw/``), or ``$LINERIG_FIRMWARE_DIR``."""
    if env := os.environ.get(FIRMWARE_ENV):
        return Path(env)
    return _package_dir("linerig.hardware") / "firmware"


def firmware_process_script() -> Path:
    """The script the `micropython` command runs to host the firmware on the simulated board (daemon/sim)."""
    return _file("linerig.daemon.sim", "firmware_proc.py")


def probe_profiles() -> list[Path]:
    """The example probe profiles (hardware/probes/*.toml), by name."""
    return sorted((_package_dir("linerig.hardware") / "probes").glob("*.toml"))


def probe_profile(name: str) -> Path:
    """One example profile by its file stem, e.g. ``lab-needle``."""
    return _file("linerig.hardware", "probes", f"{name}.toml")


def default_probe_path() -> Path:
    """The probe the daemon assumes when none is configured, and the one the simulator builds by default."""
    return _file("linerig.daemon", "profiles", "default-needle.toml")


def qualify_criteria_path() -> Path:
    """The default qualification criteria, which a user's file is merged over."""
    return _file("linerig.daemon.qualify", "criteria.toml")


def service_file(name: str) -> Path:
    """One of the service files in systemd/: ``linerigd.service``, ``70-linerig.rules``, ``linerig.sysusers``,
    ``rig.toml.example`` (and whatever else lives there)."""
    return _file("linerig.systemd", name)


def hardware_doc(name: str) -> Path:
    """A document in hardware/, e.g. ``PROTOCOL.md``."""
    return _file("linerig.hardware", name)
