"""The front-end firmware's shared cases (tests/firmware/cases_*.py) under both interpreters it must run on.

Each case module runs twice: its cases one by one under CPython (pytest), and the whole module under the
MicroPython Unix port (`micropython tests/firmware/mpyrun.py MODULE`, one pytest test per module), so a
failure in either interpreter fails CI. The CPython-only checks that need hypothesis, numpy or the daemon's
own code stay in test_firmware_codec.py, test_firmware_device.py and test_firmware_limits.py.
"""

from __future__ import annotations

from collections.abc import Callable

import pytest
from firmware_path import CASE_MODULES, run_under_micropython, shared_cases


@shared_cases(*CASE_MODULES)
def test_under_cpython(case: Callable[[], None]) -> None:
    case()


@pytest.mark.parametrize("module", CASE_MODULES)
def test_under_micropython(module: str) -> None:
    out = run_under_micropython(module)
    assert f"{module}.test_" in out  # the runner really ran this module's cases
