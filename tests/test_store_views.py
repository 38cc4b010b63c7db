"""The store's views (sensor_readings, sensor_results) against the daemon's own readers and the results export.

A real store made by the daemon's writer holds two runs: one as linerigd records it (each power reading the mean
over the interval ending at its sample, time zero from the front end) and one held-power run; results come from
the reduction itself. The views must give the same times, temperatures, power and figures as the code that reads
the JSON columns.
"""

from __future__ import annotations

import json
import math
import sqlite3
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pytest
import sqlite_utils

from linerig.daemon.controller import estimate_dict
from linerig.daemon.probe import ProbeProfile, SensorPosition
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.live import replay
from linerig.daemon.reduction.synthetic import Medium, make_run
from linerig.daemon.report.export import result_rows
from linerig.daemon.store.queries import run_arrays, run_detail
from linerig.daemon.store.schema import MIGRATIONS, migrate
from linerig.daemon.store.writer import SAMPLE_COLUMNS, Store

HEAT_START_DEVICE_S = 5000.25


def _add_run(store: Store, *, site: str, probe: str, timing: str | None, heat_start: float | None,
             with_gap: bool = False) -> int:
    data = make_run(Medium(1.3, 2.4e6), q_W_per_m=8.0, heat_s=300.0, recover_s=60.0, baseline_s=60.0,
                    noise_K=0.002, rng=np.random.default_rng(5), sensor="needle")
    far = data.temps_C["needle"] * 0.5 + 6.0  # a second sensor, so rows multiply by sensor
    run_id = store.create_run({"site": site, "location": "BH2", "depth_m": 1.2, "sample": "invented loam",
                               "probe_serial": probe, "sensor_names": json.dumps(["needle", "far"]),
                               "heat_start_device_s": heat_start, "q_timing": timing, "heater_length_m": 0.1})
    t0 = heat_start or 0.0
    for n, (t, q, a, b) in enumerate(zip(data.time_s, data.q_W_per_m, data.temps_C["needle"], far, strict=True)):
        temps = [float(a), None if with_gap and n == 7 else float(b)]  # an open thermocouple reads null
        row = {"run_id": run_id, "n": n, "seq": n, "device_ms": int((t + t0) * 1000), "device_s": float(t + t0),
               "phase": "heating" if t >= 0 else "settling", "heater_on": int(q > 0), "heater_V": None,
               "heater_A": None, "supply_V": 12.4, "q_W_per_m": float(q), "cj_C": 19.5,
               "temps_C": json.dumps(temps), "faults": "[0,0]"}
        store.add_sample(tuple(row[c] for c in SAMPLE_COLUMNS))
    store.flush(wait=True)
    needle = ProbeProfile(name="invented needle", radius_mm=0.635, sensors=(SensorPosition("needle"),))
    _, live = replay(data.time_s, data.temps_C["needle"], data.q_W_per_m, needle, "needle")
    store.add_result(run_id, "needle", {**estimate_dict(live[-1]), "flags": ["drift", "short window"]},
                     source="live")  # as linerigd keeps the live estimate at heater-off
    store.add_result(run_id, "needle", reduce_run(data).sensors["needle"].to_json(), source="final")
    return run_id


@pytest.fixture
def store(tmp_path: Path) -> Iterator[tuple[Store, int, int]]:
    s = Store(tmp_path / "views.db")
    try:
        rec = _add_run(s, site="Invented Fen", probe="NX-7", timing="reading", heat_start=HEAT_START_DEVICE_S,
                          with_gap=True)
        held = _add_run(s, site="Other Hill", probe="NX-8", timing=None, heat_start=0.0)
        yield s, rec, held
    finally:
        s.close()


def _readings(db: sqlite_utils.Database, run_id: int, sensor: str) -> list[dict[str, object]]:
    return list(db.query("SELECT * FROM sensor_readings WHERE run_id = ? AND sensor = ? ORDER BY n",
                         [run_id, sensor]))


def test_readings_are_one_row_per_sample_and_sensor_as_the_run_reader_sees_them(
        store: tuple[Store, int, int]) -> None:
    s, rec, held = store
    db = s.reader
    for run_id in (rec, held):
        n = db.execute("SELECT count(*) FROM samples WHERE run_id = ?", [run_id]).fetchone()[0]
        assert db.execute("SELECT count(*) FROM sensor_readings WHERE run_id = ?", [run_id]).fetchone()[0] == 2 * n
        arrays = run_arrays(db, run_id)
        for sensor in ("needle", "far"):
            rows = _readings(db, run_id, sensor)
            np.testing.assert_allclose([r["time_s"] for r in rows], arrays["time_s"], atol=1e-9)
            temps = np.array([math.nan if r["temperature_C"] is None else r["temperature_C"] for r in rows])
            np.testing.assert_array_equal(np.isnan(temps), np.isnan(arrays["temps_C"][sensor]))
            np.testing.assert_allclose(temps, arrays["temps_C"][sensor], equal_nan=True)
        rows = _readings(db, run_id, "needle")
        raw = [r[0] for r in db.execute("SELECT q_W_per_m FROM samples WHERE run_id = ? ORDER BY n", [run_id])]
        assert [r["q_W_per_m"] for r in rows] == raw  # the power as the sample recorded it ...
        if run_id == held:  # ... which for a held-power run is what the reduction reads
            np.testing.assert_allclose(raw, arrays["q_W_per_m"])
    first = _readings(db, rec, "far")[0]
    assert (first["site"], first["location"], first["probe_serial"], first["q_timing"]) == (
        "Invented Fen", "BH2", "NX-7", "reading")
    assert first["time_s"] == pytest.approx(-60.0) and first["device_s"] == pytest.approx(HEAT_START_DEVICE_S - 60)
    assert _readings(db, rec, "far")[7]["temperature_C"] is None


def test_results_have_the_figures_as_columns_matching_the_results_export(store: tuple[Store, int, int]) -> None:
    s, rec, held = store
    db = s.reader
    rows = list(db.query("SELECT * FROM sensor_results WHERE run_id = ? ORDER BY result_id", [rec]))
    assert [(r["source"], r["latest"]) for r in rows] == [("live", 0), ("final", 1)]
    live = rows[0]
    assert live["flags"] == "drift;short window" and live["method"] is None
    stored = json.loads(next(iter(db.query("SELECT data FROM results WHERE id = ?", [live["result_id"]])))["data"])
    assert live["k_W_per_mK"] == stored["k_W_per_mK"] and live["resistivity_mK_per_W"] == pytest.approx(
        1 / stored["k_W_per_mK"])
    alpha = stored.get("alpha_m2_per_s")  # the live estimate no longer carries α; older files' rows do (below)
    assert live["alpha_mm2_per_s"] == (None if alpha is None else pytest.approx(alpha * 1e6))
    assert [live["window_start_s"], live["window_end_s"]] == stored["window_s"]
    latest = rows[1]
    export = result_rows([run_detail(db, rec)])  # the export reads the JSON; the view must agree with it
    assert len(export) == 1
    for col in ("k_W_per_mK", "k_u_W_per_mK", "resistivity_mK_per_W", "resistivity_Ccm_per_W", "alpha_mm2_per_s",
                "rho_c_MJ_per_m3K", "window_start_s", "window_end_s", "stable_at_s", "method", "calibration_factor",
                "site", "location", "probe_serial", "sensor"):
        want = export[0][col]
        if isinstance(want, float):
            assert latest[col] == pytest.approx(want), col
        else:
            assert latest[col] == want, col
    assert (latest["flags"] or "") == export[0]["flags"]
    assert latest["k_W_per_mK"] == pytest.approx(1.3, rel=0.03)  # the invented loam's k, through the reduction
    assert latest["resistivity_mK_per_W"] == pytest.approx(1 / latest["k_W_per_mK"])
    # "what did probe X read at site Y": plain SQL, no JSON
    hits = list(db.query("SELECT run_id, sensor, k_W_per_mK FROM sensor_results WHERE probe_serial = 'NX-8' "
                         "AND site = 'Other Hill' AND latest"))
    assert [(h["run_id"], h["sensor"]) for h in hits] == [(held, "needle")]


def test_an_older_file_gets_the_views_over_the_data_it_already_holds(tmp_path: Path) -> None:
    path = tmp_path / "v3.db"
    conn = sqlite3.connect(path, isolation_level=None)
    db = sqlite_utils.Database(conn)
    assert migrate(db, MIGRATIONS[:3]) == 3
    db["runs"].insert({"id": 1, "site": "Old Quarry", "sensor_names": '["tip"]', "heat_start_device_s": 10.0})
    db["samples"].insert_all([{"run_id": 1, "n": n, "device_s": 8.0 + n, "q_W_per_m": 0.0 if n < 2 else 9.5,
                               "temps_C": f"[{14.0 + n / 10}]"} for n in range(5)])
    db["results"].insert({"run_id": 1, "sensor": "tip", "k_W_per_mK": 0.95, "flags": "[]", "source": "live",
                          "data": json.dumps({"k_W_per_mK": 0.95, "alpha_m2_per_s": 1.1e-7, "window_s": [20, 150]})})
    db["results"].insert({"run_id": 1, "sensor": "tip", "method": "line", "k_W_per_mK": 0.9, "flags": "[]",
                          "data": json.dumps({"k_W_per_mK": 0.9, "window_s": [20, 200]}), "source": "final"})
    conn.close()
    s = Store(path)
    try:
        assert s.conn.execute("PRAGMA user_version").fetchone()[0] == len(MIGRATIONS)
        rows = list(s.reader.query("SELECT time_s, temperature_C, q_W_per_m FROM sensor_readings ORDER BY n"))
        assert [r["time_s"] for r in rows] == [-2.0, -1.0, 0.0, 1.0, 2.0]
        assert rows[4]["temperature_C"] == pytest.approx(14.4) and rows[2]["q_W_per_m"] == 9.5
        live, res = list(s.reader.query("SELECT * FROM sensor_results ORDER BY result_id"))
        assert (res["site"], res["k_W_per_mK"], res["window_end_s"], res["flags"], res["latest"]) == (
            "Old Quarry", 0.9, 200, None, 1)
        # a live estimate of an earlier linerig: α in m²/s and no resistivity, shown in the view's units
        assert (live["source"], live["latest"], live["method"]) == ("live", 0, None)
        assert live["alpha_mm2_per_s"] == pytest.approx(0.11) and live["resistivity_mK_per_W"] == pytest.approx(
            1 / 0.95)
    finally:
        s.close()


def test_a_run_that_never_heated_has_no_time_from_heater_on(tmp_path: Path) -> None:
    s = Store(tmp_path / "cold.db")
    try:
        run_id = s.create_run({"site": "Cold", "sensor_names": '["tip"]'})
        row = {"run_id": run_id, "n": 0, "seq": 0, "device_ms": 0, "device_s": 3.0, "phase": "settling",
               "heater_on": 0, "heater_V": None, "heater_A": None, "supply_V": None, "q_W_per_m": 0.0,
               "cj_C": None, "temps_C": "[12.5]", "faults": "[0]"}
        s.add_sample(tuple(row[c] for c in SAMPLE_COLUMNS))
        s.flush(wait=True)
        (r,) = list(s.reader.query("SELECT time_s, device_s, temperature_C FROM sensor_readings"))
        assert r == {"time_s": None, "device_s": 3.0, "temperature_C": 12.5}
    finally:
        s.close()
