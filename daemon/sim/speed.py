"""The simulator's time scale, checked the same way by linerig-sim and by linerigd --simulate."""

from __future__ import annotations

import argparse
import math


def speed_factor(text: str) -> float:
    """A time-scale factor for the simulator: 1 is real time; beyond 1000 a second of physics no longer fits."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not (math.isfinite(value) and 0 < value <= 1000):
        raise argparse.ArgumentTypeError(f"must be above 0 and at most 1000, got {text}")
    return value
