"""The loader and its instrument layer: the run CSV it writes is the project's format and says what it should."""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np
import pytest
from scipy.special import exp1

from linerig.daemon.runcsv import read_run_csv

from .loader import RefRecord, families, load, records

LN = "ln-moist-sand-600s"


@pytest.fixture(scope="module")
def rec() -> RefRecord:
    return load(LN)


def test_records_are_listed_by_family() -> None:
    names = records()
    assert LN in names
    fam = families()
    assert sum(fam.values()) == len(names)
    assert set(records("lab-needle-long")) <= set(names)
    with pytest.raises(KeyError):
        load("no-such-record")


def test_run_csv_is_the_project_format(rec: RefRecord, tmp_path: Path) -> None:
    path = rec.to_run_csv(tmp_path / "run.csv", seed=4)
    data = read_run_csv(path)  # the project's own reader (DESIGN.md "Interfaces")
    assert list(data.temps_C) == list(rec.sensors)
    t, q = data.time_s, data.q_W_per_m
    dt = rec.instrument.dt_s
    assert np.count_nonzero(t < 0) == round(rec.instrument.baseline_s / dt)
    assert np.allclose(np.diff(t), dt)
    assert np.all(q[t < 0] == 0.0)
    # q is held from its row to the next: the row at t = 0 carries the power switched on at t = 0
    assert q[t == 0.0][0] == rec.power_q[0]
    assert np.all(q[(t >= 0) & (t < rec.t_heat_s)] == rec.power_q[0])
    assert np.all(q[t >= rec.t_heat_s] == 0.0)
    text = path.read_text()
    assert text.startswith("# reference record " + LN)


def test_clean_instrument_gives_the_stored_physics(rec: RefRecord) -> None:
    run = rec.arrays(**{**vars(rec.instrument.clean()), "dt_s": 0.5})
    heat = run.time_s >= 0
    stored = np.interp(run.time_s[heat], rec.t_s, rec.dT["heater"])
    assert np.allclose(run.temps_C["heater"][heat] - rec.instrument.T0_C, stored, atol=1e-12)
    assert np.all(run.temps_C["heater"][~heat] == rec.instrument.T0_C)


def test_noise_layers_have_the_asked_statistics(rec: RefRecord) -> None:
    clean = rec.arrays(**vars(rec.instrument.clean())).temps_C["heater"]
    white = rec.arrays(seed=11, noise_K=0.01, ar_K=0.0, quantum_K=0.0).temps_C["heater"] - clean
    assert white.std() == pytest.approx(0.01, rel=0.08)
    assert abs(np.corrcoef(white[1:], white[:-1])[0, 1]) < 0.08
    ar = rec.arrays(seed=12, noise_K=0.0, ar_K=0.01, ar_phi=0.8, quantum_K=0.0).temps_C["heater"] - clean
    assert np.corrcoef(ar[1:], ar[:-1])[0, 1] == pytest.approx(0.8, abs=0.06)
    assert ar.std() == pytest.approx(0.01, rel=0.25)
    a = rec.arrays(seed=5).temps_C["heater"]
    assert np.array_equal(a, rec.arrays(seed=5).temps_C["heater"])
    assert not np.array_equal(a, rec.arrays(seed=6).temps_C["heater"])


def test_quantisation_and_drift(rec: RefRecord) -> None:
    y = rec.arrays(seed=1, quantum_K=0.004).temps_C["heater"]
    assert np.allclose(y / 0.004, np.round(y / 0.004), atol=1e-6)
    run = rec.arrays(**{**vars(rec.instrument.clean()), "drift_K_per_h": 0.36})
    base = run.time_s < 0
    slope = np.polyfit(run.time_s[base], run.temps_C["heater"][base], 1)[0]
    assert slope == pytest.approx(0.36 / 3600.0, rel=1e-9)


def test_time_zero_offset_artefact(rec: RefRecord) -> None:
    run = rec.arrays(**{**vars(rec.instrument.clean()), "t0_offset_samples": 2})
    on = np.nonzero(run.q_W_per_m > 0)[0][0]
    assert run.time_s[on] == 0.0  # the log says the heater came on here ...
    rise = run.temps_C["heater"] - rec.instrument.T0_C
    assert rise[on - 2] == 0.0  # ... it really came on two rows earlier (time_s = −2 dt) ...
    assert rise[on - 1] > 0.5  # ... and the temperature was already rising on the row before the log's zero
    assert np.all(rise[: on - 2] == 0.0)


def test_power_column_keeps_the_energy_of_a_sagging_supply() -> None:
    rec = load("ln-moist-sand-sag") if "ln-moist-sand-sag" in records() else None
    if rec is None:
        pytest.skip("sag record not generated yet")
    for dt in (1.0, 3.0):
        run = rec.arrays(dt_s=dt, q_noise_rel=0.0)
        sel = run.time_s >= 0
        energy = float(np.sum(run.q_W_per_m[sel][:-1] * dt))
        t_last = run.time_s[sel][-1]
        assert energy == pytest.approx(float(rec.power_energy(np.array([t_last]))[0]), rel=1e-12)


def _fake_e1_record(dt_store: float) -> RefRecord:
    # a record whose stored curve is the ideal line source (Carslaw & Jaeger 1959 §10.4), for interpolation checks
    q, k, alpha, r = 5.0, 1.0, 5e-7, 6.35e-4
    # stored like the solver stores: every short step after the switch-on (growing), then every dt_store
    t = np.concatenate(([0.0], np.geomspace(2.0**-10, 2.0, 50), np.arange(2.0, 100.0 + 1e-9, dt_store)))
    t = np.unique(t)
    y = np.zeros_like(t)
    y[1:] = q / (4 * np.pi * k) * exp1(r * r / (4 * alpha * t[1:]))
    params = {"name": "fake", "family": "test", "description": "E1", "power": {"t_s": [0.0], "q_W_per_m": [q]},
              "instrument": {}, "profile": "none.toml", "t_heat_s": 100.0}
    return RefRecord({"params": params, "true": {}, "sensors": ["heater"]}, {"t_s": t, "dT_heater": y})


def test_interpolation_between_stored_times_is_accurate() -> None:
    rec = _fake_e1_record(0.5)
    ts = rec.t_s[1:]
    tq = np.sqrt(ts[1:] * ts[:-1])  # between every pair of stored points
    want = 5.0 / (4 * np.pi) * exp1(6.35e-4**2 / (4 * 5e-7 * tq))
    got = rec.clean(tq)["heater"]
    assert np.max(np.abs(got - want)) < 2e-5  # K, on a 3 K rise


def test_csv_to_a_stream_and_out_of_range_requests(rec: RefRecord) -> None:
    buf = io.StringIO()
    assert rec.to_run_csv(buf, seed=0, dt_s=2.0, end_s=100.0) is None
    rows = [ln for ln in buf.getvalue().splitlines() if not ln.startswith("#")]
    assert rows[0] == "time_s,q_W_per_m,T_heater_C"
    assert float(rows[-1].split(",")[0]) == 100.0
    with pytest.raises(ValueError):
        rec.clean(np.array([rec.t_end_s + 1.0]))
