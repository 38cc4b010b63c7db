"""The distribution installs one import namespace, ``linerig``, over the top-level folders daemon/ and tui/, with the
data packages hardware/ and systemd/ beside them."""

from __future__ import annotations

import ast
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
TOPS = ("daemon", "tui")
DATA_TOPS = ("hardware", "systemd")
SKIP = {"__pycache__"}


def _declared() -> tuple[set[str], dict[str, str]]:
    cfg = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]
    return set(cfg["packages"]), cfg["package-dir"]


def _folders(top: str) -> set[str]:
    """Every folder under ``top`` that holds a file, as its linerig package name."""
    return {"linerig." + ".".join(p.parent.relative_to(ROOT).parts) for p in (ROOT / top).rglob("*")
            if p.is_file() and not SKIP & set(p.parts)}


def test_every_package_folder_is_declared_under_linerig() -> None:
    """A folder missing from the list would be left out of the wheel (data folders too: the probe profiles,
    the firmware), and setuptools warns that it would be ignored."""
    packages, dirs = _declared()
    assert dirs == {f"linerig.{top}": top for top in (*TOPS, *DATA_TOPS)}
    on_disk = set().union(*(_folders(top) for top in (*TOPS, *DATA_TOPS)))
    assert on_disk == packages, f"missing {sorted(on_disk - packages)}, stale {sorted(packages - on_disk)}"


def test_no_module_imports_the_bare_top_level_names() -> None:
    """A bare ``import daemon`` would work in a checkout (the folder is on sys.path) and fail once installed."""
    offenders = []
    for path in ROOT.glob("*/**/*.py"):
        if ".venv" in path.parts or path.parts[len(ROOT.parts)] in ("hardware", "build"):
            continue
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            names = ([a.name for a in node.names] if isinstance(node, ast.Import)
                     else [node.module or ""] if isinstance(node, ast.ImportFrom) and node.level == 0 else [])
            offenders += [f"{path.relative_to(ROOT)}: {n}" for n in names if n.split(".")[0] in TOPS]
    assert not offenders, offenders
