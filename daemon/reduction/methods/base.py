"""What a method is and what it returns: a value per quantity, each with its own uncertainty budget.

A method looks at a ``SensorRecord`` (and at what the methods before it found) and returns a ``MethodResult``, or
None when it does not apply. The selector (``select.py``) decides which result stands for the sensor.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Protocol

from ..driftfit import DriftFit
from ..live import DEFAULT_POWER_U_REL
from ..record import SensorRecord
from ..stats import combine


@dataclass(frozen=True)
class Estimate:
    """One quantity (SI) with its relative standard uncertainty budget and where it came from."""

    value: float
    budget: dict[str, float]
    source: str

    @property
    def u_rel(self) -> float:
        return combine(self.budget)

    @property
    def u(self) -> float:
        return abs(self.value) * self.u_rel


@dataclass
class MethodResult:
    """A method's answer for one sensor. ``k`` is uncalibrated (the selector applies the probe factor)."""

    name: str
    k: Estimate | None
    alpha: Estimate | None = None
    contact: Estimate | None = None
    rho_c: Estimate | None = None  # k/α of the same fit (before the probe factor), where the method gives α
    window_s: tuple[float, float] | None = None
    residual_rms_K: float | None = None
    n_used: int | None = None
    q_mean_W_per_m: float | None = None
    converged: bool = True     # the fit worked; its flags say whether it may stand for the sensor under ``auto``
    credible: bool = True      # its model describes the record within the noise (a fitted model may not)
    why: str = ""              # what the method did (window rule) or why it failed, for ``method_reason``
    flags: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    fit: Any = None            # the underlying fit object (LateTimeFit, ModelFit, CoolingFit …) for plots
    drift: DriftFit | None = None  # the fit with the drift as a parameter, where the method made one


@dataclass(frozen=True)
class Options:
    """How the run is to be reduced (the caller's choices; defaults are the interface's)."""

    method: str = "auto"
    calibration_factor: float = 1.0
    calibration_factor_u: float = 0.0
    window_s: tuple[float, float] | None = None
    max_rise_K: float | None = None
    bulk_density_kg_per_m3: float | None = None
    power_u_rel: float = DEFAULT_POWER_U_REL
    stable_rule: bool = True


class Found(dict[str, MethodResult]):
    """Results of the methods that ran before, by name (a later method may start from an earlier one's answer)."""

    def converged(self, name: str) -> MethodResult | None:
        r = self.get(name)
        return r if r is not None and r.converged else None

    def credible(self, name: str) -> MethodResult | None:
        r = self.converged(name)
        return r if r is not None and r.credible else None


class Method(Protocol):
    """One way of reading the record. ``fit`` returns None when the method does not apply to this sensor."""

    name: str

    def fit(self, rec: SensorRecord, opts: Options, found: Found) -> MethodResult | None: ...
