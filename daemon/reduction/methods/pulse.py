"""Radial sensor, heater switched off: the finite-pulse peak relations as a cross-check (``radial.pulse_check``).

No uncertainty of its own yet, so it never stands for the sensor; its numbers are reported beside the fit.
"""

from __future__ import annotations

import numpy as np

from ..radial import pulse_check
from ..record import SensorRecord
from .base import Found, MethodResult, Options


class PulseCheckMethod:
    name = "pulse"

    def fit(self, rec: SensorRecord, opts: Options, found: Found) -> MethodResult | None:
        run, g = rec.run, rec.geometry
        if g.on_heater or run.t_off is None:
            return None
        sel = run.t > 0
        pc = pulse_check(run.t[sel], rec.dT[sel], g.sensor_radius_m, float(np.mean(rec.Qh)), run.t_off)
        return None if pc is None else MethodResult(self.name, None, converged=False, fit=pc)
