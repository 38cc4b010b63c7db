"""A whole run recorded straight from the simulated rig, no serial link: for benches and reduction tests."""

from __future__ import annotations

import numpy as np

from linerig.daemon.reduction.data import RunData
from linerig.daemon.sim.rig_model import SimulatedRig


def recorded_run(rig: SimulatedRig, *, baseline_s: float, heat_s: float, recover_s: float, q_W_per_m: float,
                 dt_s: float = 1.0, sensor: str | None = None) -> RunData:
    """Baseline, heating at ``q_W_per_m`` from t = 0, recovery; one sensor's record (the first channel, column
    "heater", unless ``sensor`` names one) and the power the rig delivered over each step (held from each
    sample on, as the reduction takes it)."""
    channel = 0 if sensor is None else rig.channel_names.index(sensor)
    ts, qs, temps = [], [], []
    for i in range(round((baseline_s + heat_s + recover_s) / dt_s) + 1):
        t = i * dt_s - baseline_s
        if abs(t) < dt_s / 2:
            rig.set_heater(True, q_W_per_m)
        elif abs(t - heat_s) < dt_s / 2:
            rig.set_heater(False)
        s = rig.sample()
        ts.append(t)
        qs.append(s.delivered_W_per_m)
        temps.append(s.channels[channel].temp_C)
        rig.advance(dt_s)
    return RunData(np.array(ts), np.array(qs), {sensor or "heater": np.array(temps)})


def recorded_pulse(rig: SimulatedRig, *, baseline_s: float, pulse_s: float, record_s: float, q_W_per_m: float,
                   dt_s: float = 1.0) -> RunData:
    """Baseline, a pulse at ``q_W_per_m`` from t = 0 for ``pulse_s``, then the decay to ``record_s`` after heater on;
    every channel by its sensor name, and the power the rig delivered (held from each sample on)."""
    ts, qs, rows = [], [], []
    for i in range(round((baseline_s + record_s) / dt_s)):
        t = i * dt_s - baseline_s
        if abs(t) < dt_s / 2:
            rig.set_heater(True, q_W_per_m)
        elif abs(t - pulse_s) < dt_s / 2:
            rig.set_heater(False)
        s = rig.sample()
        ts.append(t)
        qs.append(s.delivered_W_per_m)
        rows.append([c.temp_C for c in s.channels])
        rig.advance(dt_s)
    temps = np.array(rows)
    return RunData(np.array(ts), np.array(qs), {name: temps[:, i] for i, name in enumerate(rig.channel_names)})
