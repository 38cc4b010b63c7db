"""Thermal properties from line-source (needle-probe) records: pure functions, no I/O.

Methods, the automatic window rule, the uncertainty budget and the meaning of every flag are in METHODS.md next
to this file. Entry points: ``reduce_run`` (offline), ``LiveReducer`` (incremental), ``probe_factor``
(calibration).
"""

from .api import RunReduction, SensorResult, reduce_run
from .calibration import ProbeCalibration, apply_factor, calibrate, probe_factor
from .data import ReductionError, RunData
from .live import LiveEstimate, LiveReducer, replay

__all__ = [
    "LiveEstimate",
    "LiveReducer",
    "ProbeCalibration",
    "ReductionError",
    "RunData",
    "RunReduction",
    "SensorResult",
    "apply_factor",
    "calibrate",
    "probe_factor",
    "reduce_run",
    "replay",
]
