"""Makes hardware/firmware and the shared firmware cases (tests/firmware) importable under CPython, runs those
cases under MicroPython too, and hands every frame the shared harness sees to the daemon's own decoder.

The firmware's behaviour is asserted once, in tests/firmware/cases_*.py, in code both interpreters run.
tests/test_firmware_interpreters.py collects them for pytest (`shared_cases`) and runs each module under the
`micropython` command (`run_under_micropython`), so a failure in either interpreter fails CI; the other
tests/test_firmware_*.py add what only CPython can check (hypothesis, numpy, the daemon's decoder and ITS-90).
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
FW_DIR = ROOT / "hardware" / "firmware"
CASES_DIR = Path(__file__).resolve().parent / "firmware"
for _p in (FW_DIR, CASES_DIR):
    if str(_p) not in sys.path:
        sys.path.insert(0, str(_p))

import board  # noqa: E402
from board import FakeRig, Harness  # noqa: E402
from check import cases  # noqa: E402

from linerig.daemon.rig.framing import FrameDecoder  # noqa: E402
from linerig.daemon.rig.messages import parse_message  # noqa: E402

__all__ = ["CASE_MODULES", "FW_DIR", "FakeRig", "Harness", "board", "run_under_micropython", "shared_cases"]

# the MicroPython harness keeps every frame it decoded; its test processes need more than the 2 MB default heap
TEST_HEAP = "32M"


def micropython_command() -> str | None:
    """The Unix port's `micropython` next to this interpreter (the dev extra installs it), or on PATH."""
    here = Path(sys.executable).with_name("micropython")
    return str(here) if here.is_file() else shutil.which("micropython")


CASE_MODULES = tuple(sorted(p.stem for p in CASES_DIR.glob("cases_*.py")))


def shared_cases(*module_names: str) -> pytest.MarkDecorator:
    """Parametrises a test over every case in the named tests/firmware modules, one pytest id per case."""
    named = [(f"{m.removeprefix('cases_')}.{n}", fn) for m in module_names for n, fn in cases(__import__(m))]
    return pytest.mark.parametrize("case", [fn for _, fn in named], ids=[n for n, _ in named])


def run_under_micropython(*module_names: str) -> str:
    """Runs the named case modules under MicroPython; fails with the runner's output when any case fails."""
    exe = micropython_command()
    if exe is None:
        pytest.fail("the micropython command is missing: `make .venv/.installed` installs it (dev extra)")
    done = subprocess.run([exe, "-X", f"heapsize={TEST_HEAP}", str(CASES_DIR / "mpyrun.py"), *module_names],
                          capture_output=True, text=True, timeout=300, cwd=ROOT,
                          env={**os.environ, "MICROPYPATH": ""})
    if done.returncode != 0 or " 0 failed under micropython" not in done.stdout:
        pytest.fail(f"under MicroPython (exit {done.returncode}):\n{done.stdout}\n{done.stderr}", pytrace=False)
    return done.stdout


class DaemonCheck:
    """Feeds everything the firmware sends to the daemon's decoder: every frame must decode and parse there."""

    def __init__(self) -> None:
        self.decoder = FrameDecoder()

    def __call__(self, data: bytes) -> None:
        for frame in self.decoder.feed(data):
            assert parse_message(frame) is not None, frame
        c = self.decoder.counters
        assert (c.bad_frames, c.skipped_bytes, c.seq_gaps, c.duplicates) == (0, 0, 0, 0), c


if DaemonCheck not in board.host_checks:
    board.host_checks.append(DaemonCheck)
