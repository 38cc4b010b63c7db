"""What the qualification procedure asks of the world, and what comes back.

The procedure is a generator that yields these requests; a driver fulfils each one with a rig (the simulator in
process, or the daemon over its socket) or with the operator, and sends the answer back. So the procedure itself
does no I/O and runs the same against either.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .config import ReferenceMedium


@dataclass(frozen=True)
class Progress:
    """A step started or moved on; answer: None."""

    step: str
    message: str


@dataclass(frozen=True)
class AskNumber:
    """A number only the operator can give (a megohmmeter reading); answer: float, or None if not measured."""

    key: str
    prompt: str
    unit: str
    minimum: float | None = None


@dataclass(frozen=True)
class PlaceInBath:
    """Put the probe in a stirred isothermal bath at about ``setpoint_C`` and let it settle.

    Answer: the bath's reference-thermometer reading in °C (the simulator knows it; a person reads it).
    """

    setpoint_C: float


@dataclass(frozen=True)
class PlaceInMedium:
    """Insert the probe into a reference medium (freshly, for each repeat); answer: None."""

    medium: ReferenceMedium
    repeat: int
    repeats: int


@dataclass(frozen=True)
class Record:
    """Log ``log_s`` seconds with the heater off, then heat for ``heat_s`` at ``power_W_per_m``; answer: Recording."""

    log_s: float
    heat_s: float = 0.0
    power_W_per_m: float = 0.0
    interval_s: float = 1.0
    purpose: str = ""


Request = Progress | AskNumber | PlaceInBath | PlaceInMedium | Record


@dataclass
class Recording:
    """Samples of one Record request, as the front end reported them.

    ``t_s`` is measured from heater on (logging before it is negative; with no heating, from the end of logging);
    ``session_s`` from the start of the qualification (drift checks span several recordings). ``q_W_per_m`` is
    the measured power per metre (V·I/L), 0 with the heater off. Temperatures in °C, NaN where a channel faulted.
    """

    t_s: np.ndarray
    session_s: np.ndarray
    heater_V: np.ndarray
    heater_A: np.ndarray
    q_W_per_m: np.ndarray
    temps_C: dict[str, np.ndarray] = field(default_factory=dict)
    faults: dict[str, int] = field(default_factory=dict)
    """Fault bits seen on each channel during the recording (OR of all samples)."""

    def __post_init__(self) -> None:
        for name in ("t_s", "session_s", "heater_V", "heater_A", "q_W_per_m"):
            setattr(self, name, np.asarray(getattr(self, name), dtype=float))
        self.temps_C = {k: np.asarray(v, dtype=float) for k, v in self.temps_C.items()}
        n = self.t_s.size
        for name in ("session_s", "heater_V", "heater_A", "q_W_per_m"):
            if getattr(self, name).size != n:
                raise ValueError(f"recording: {name} has {getattr(self, name).size} values for {n} times")
        for k, v in self.temps_C.items():
            if v.size != n:
                raise ValueError(f"recording: channel {k} has {v.size} values for {n} times")

    @property
    def heating(self) -> np.ndarray:
        return (self.t_s >= 0) & (self.q_W_per_m > 0)
