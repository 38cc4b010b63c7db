"""Probe factor from a run in a reference medium of known conductivity, and its use on later results.

F = k_reference / k_measured (the probe constant of ASTM D5334 / D5930); later results are multiplied by F.
Relative standard uncertainties add in quadrature: u(F)/F = √[(u_ref/k_ref)² + (u_meas/k_meas)²].
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import asdict, dataclass
from typing import Protocol


class _HasK(Protocol):
    k_raw_W_per_mK: float
    k_raw_u_W_per_mK: float


@dataclass(frozen=True)
class ProbeCalibration:
    probe_serial: str
    factor: float
    factor_u: float
    reference: str
    reference_k_W_per_mK: float
    measured_k_W_per_mK: float
    date: str

    def to_dict(self) -> dict[str, object]:
        return asdict(self)


def probe_factor(measured: _HasK | float, reference_k: float, reference_k_u: float,
                 measured_k_u: float | None = None) -> tuple[float, float]:
    """(factor, standard uncertainty). ``measured`` is a SensorResult (its uncalibrated k) or a bare k."""
    if isinstance(measured, int | float):
        k_m = float(measured)
        u_m = 0.0 if measured_k_u is None else float(measured_k_u)
    else:
        k_m = measured.k_raw_W_per_mK
        u_m = measured.k_raw_u_W_per_mK if measured_k_u is None else float(measured_k_u)
    if not (k_m > 0 and reference_k > 0) or not (math.isfinite(k_m) and math.isfinite(reference_k)):
        raise ValueError(f"conductivities must be finite and > 0 (measured {k_m}, reference {reference_k})")
    f = reference_k / k_m
    return f, f * math.hypot(reference_k_u / reference_k, u_m / k_m)


def calibrate(measured: _HasK | float, reference_k: float, reference_k_u: float, *, probe_serial: str,
              reference: str, measured_k_u: float | None = None, date: str | None = None) -> ProbeCalibration:
    f, u = probe_factor(measured, reference_k, reference_k_u, measured_k_u)
    k_m = measured if isinstance(measured, int | float) else measured.k_raw_W_per_mK
    return ProbeCalibration(probe_serial, f, u, reference, reference_k, float(k_m),
                            date or dt.date.today().isoformat())


def apply_factor(k: float, k_u: float, factor: float, factor_u: float) -> tuple[float, float]:
    """Calibrated k and its standard uncertainty."""
    kc = k * factor
    return kc, kc * math.hypot(k_u / k if k else 0.0, factor_u / factor if factor else 0.0)
