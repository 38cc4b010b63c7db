"""Every firmware module compiles with mpy-cross, MicroPython's cross-compiler, as it would for a board.

mpy-cross rejects syntax MicroPython does not have (``match``, type parameters, ...); what it accepts but the
interpreter does not (``from __future__``, a missing module) fails at import, under
tests/test_firmware_interpreters.py. A board loads compiled .mpy files faster, and with less RAM, than source.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from firmware_path import FW_DIR

MODULES = sorted(FW_DIR.rglob("*.py"))


def _mpy_cross() -> str:
    here = Path(sys.executable).with_name("mpy-cross")
    exe = str(here) if here.is_file() else shutil.which("mpy-cross")
    if exe is None:
        pytest.fail("the mpy-cross command is missing: `make .venv/.installed` installs it (dev extra)")
    return exe


def test_the_firmware_has_the_modules_we_expect() -> None:
    names = {p.relative_to(FW_DIR).as_posix() for p in MODULES}
    assert {"main.py", "probefw/device.py", "probefw/loop.py", "probefw/codec.py"} <= names


@pytest.mark.parametrize("module", MODULES, ids=lambda p: p.relative_to(FW_DIR).as_posix())
def test_module_compiles_with_mpy_cross(module: Path, tmp_path: Path) -> None:
    out = tmp_path / module.with_suffix(".mpy").name
    done = subprocess.run([_mpy_cross(), "-o", str(out), str(module)], capture_output=True, text=True, timeout=60)
    assert done.returncode == 0, done.stderr
    assert out.read_bytes()[:1] == b"M"  # the .mpy header's magic byte
