"""Probe qualification: a guided procedure per probe serial, judged against acceptance criteria.

- ``config``: the criteria/procedure/intended-use/reference-media TOML (defaults in ``criteria.toml``);
- ``requests``: what the procedure asks of a rig or the operator (``Record``, ``PlaceInBath`` ...);
- ``procedure``: the procedure as a generator of requests (no I/O) and the drivers ``run_sync``/``run_async``;
- ``analysis``: the pure measurements (heater R and TCR, drift, thermocouple stats, probe model in a known
  medium, response time, calibration, geometry);
- ``criteria``: one verdict per criterion; ``result``: the finished qualification and its stored JSON;
- ``simrig``: the simulator in process; ``liverig``: the daemon over its socket;
- ``store``: the ``qualifications`` table; ``report``: HTML and PDF.

See hardware/QUALIFICATION.md for the procedure in words.
"""

from .config import QualificationConfig, load_config
from .procedure import Measurements, ScriptedOperator, qualification_steps, run_async, run_sync
from .result import Qualification, judge

__all__ = ["Measurements", "Qualification", "QualificationConfig", "ScriptedOperator", "judge", "load_config",
           "qualification_steps", "run_async", "run_sync"]
