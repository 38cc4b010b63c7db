"""Reduction methods: each reads a ``SensorRecord`` and returns a ``MethodResult`` with its own budget."""

from .base import Estimate, Found, Method, MethodResult, Options, combine
from .line import LineMethod, preliminary_line
from .probe import ProbeModelMethod, RadialMethod
from .pulse import PulseMethod
from .recovery import JointMethod, RecoveryMethod

__all__ = [
    "Estimate",
    "Found",
    "JointMethod",
    "LineMethod",
    "Method",
    "MethodResult",
    "Options",
    "ProbeModelMethod",
    "PulseMethod",
    "RadialMethod",
    "RecoveryMethod",
    "combine",
    "preliminary_line",
]
