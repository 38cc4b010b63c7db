"""Invented demo data: a made-up ground survey for a made-up "Examplemoor substation", and a lab programme on
its made-up backfill. Every number here is synthetic (probe model plus noise); no real site or sample.

    .venv/bin/python examples/examplemoor.py [OUT_DIR]

writes OUT_DIR/examplemoor.db (a linerig database: probes, a calibration, field runs in two boreholes, a
three-cycle run, a dry-out series) and refreshes the CSVs beside this script. Then try, for example:

    linerig report --db OUT_DIR/examplemoor.db --site "Examplemoor substation" -o site.html
    linerig profile --db OUT_DIR/examplemoor.db --site "Examplemoor substation" --plot profile.png
    linerig cycles --db OUT_DIR/examplemoor.db 10
    linerig dryout --csv examples/examplemoor/dryout_moor_sand.csv --critical-moisture 4
    linerig cylinder examples/examplemoor/cylinder_mould_FB3.csv --radius-mm 35 --height-mm 90
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np

from linerig.daemon.probe import ProbeProfile, SensorPosition
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.data import RunData
from linerig.daemon.reduction.synthetic import Medium, make_run
from linerig.daemon.runcsv import write_run_csv
from linerig.daemon.store.writer import Store
from linerig.daemon.workflows import cylinder as cyl
from linerig.daemon.workflows.calibration import Measurement, evaluate_calibration, reference_value
from linerig.daemon.workflows.dryout import Material, ModelParams, conductivity

SITE = "Examplemoor substation"
HERE = Path(__file__).resolve().parent / "examplemoor"

NEEDLE_TOML = """[probe]
name = "field needle FN-0412"
serial = "FN-0412"
kind = "single"
heater_length_mm = 150.0
radius_mm = 1.2
heat_capacity_MJ_per_m3K = 3.0
[[sensor]]
name = "heater"
radial_mm = 0.0
axial_mm = 75.0
"""
ROD_JUNCTIONS_MM = (300.0, 600.0, 900.0, 1200.0)   # from the tip; each junction is named after its distance
ROD_TOML = """[probe]
name = "profiling rod RX15-2"
serial = "RX15-2"
kind = "rod"
heater_length_mm = 1500.0
radius_mm = 4.0
heat_capacity_MJ_per_m3K = 3.5
""" + "".join(f"""[[sensor]]
name = "tip{z:.0f}"
radial_mm = 0.0
axial_mm = {z}
""" for z in ROD_JUNCTIONS_MM)
NEEDLE = ProbeProfile(name="field needle FN-0412", serial="FN-0412", radius_mm=1.2, heater_length_mm=150.0,
                      heat_capacity_MJ_per_m3K=3.0, sensors=(SensorPosition("heater", 0.0, 75.0),))
ROD = ProbeProfile(name="profiling rod RX15-2", serial="RX15-2", kind="rod", radius_mm=4.0, heater_length_mm=1500.0,
                   heat_capacity_MJ_per_m3K=3.5,
                   sensors=tuple(SensorPosition(f"tip{z:.0f}", 0.0, z) for z in ROD_JUNCTIONS_MM))
MOULD_R_M, MOULD_H_M = 0.035, 0.090   # the example's own mould: 70 mm bore, 90 mm high
SAND = Material(rho_s=2650.0, quartz=0.55, coarse=True, ck_soil="medium-fine-sand")
SAND_TRUE = ModelParams(lambda_s=4.6, shape=3.2, dry_scale=1.1)


def _store_run(store: Store, data: RunData, probe: ProbeProfile, meta: dict[str, object], *,
               factor: float = 1.0, factor_u: float = 0.0, phase: list[str] | None = None,
               reduce: bool = True) -> int:
    names = list(data.temps_C)
    rid = store.create_run({"kind": "field" if meta.get("depth_m") is not None else "lab",
                            "probe_serial": probe.serial, "sensor_names": json.dumps(names),
                            "heater_length_m": probe.length_m, "heat_start_device_s": 1000.0, "state": "done",
                            "end_reason": "recovery logged", **meta})
    t = data.time_s
    for i in range(t.size):
        q = float(data.q_W_per_m[i])
        ph = phase[i] if phase else ("settling" if t[i] < 0 else "heating" if q > 0 else "recovering")
        store.add_sample((rid, i, i, int((1000.0 + t[i]) * 1000), 1000.0 + float(t[i]), ph, int(q > 0),
                          None, None, None, q, 20.0, json.dumps([float(data.temps_C[n][i]) for n in names]), None))
    store.flush()
    store.event(rid, "state", "heating", "baseline settled", 1000.0)
    store.event(rid, "state", "done", "recovery logged", 1000.0 + float(t[-1]))
    if reduce:
        red = reduce_run(data, probe, calibration_factor=factor, calibration_factor_u=factor_u)
        for name, res in red.sensors.items():
            store.add_result(rid, name, res.to_json(), source="final")
    return rid


def _run(k: float, rho_c: float, probe: ProbeProfile, rng: np.random.Generator, *,
         sensors: tuple[str, ...] = ("heater",), ks: dict[str, float] | None = None, q: float = 6.0,
         t0_C: float = 11.0, heat_s: float = 300.0, noise_K: float = 0.003) -> RunData:
    temps = {}
    base = None
    for s in sensors:
        d = make_run(Medium((ks or {}).get(s, k), rho_c), q_W_per_m=q, radius_m=probe.radius_m,
                     probe_C=probe.heat_capacity_J_per_m3K, heat_s=heat_s, recover_s=heat_s, baseline_s=60.0,
                     dt_s=2.0, noise_K=noise_K, drift_K_per_h=0.02, t0_C=t0_C, rng=rng)
        temps[s] = d.temps_C["heater"]
        base = d
    assert base is not None
    return RunData(base.time_s, base.q_W_per_m, temps)


def build_demo_db(path: Path) -> dict[str, object]:
    """Create the demo database; returns the ids a demo or a test may want."""
    rng = np.random.default_rng(2024)
    path.unlink(missing_ok=True)
    store = Store(path)
    try:
        store.upsert_probe("FN-0412", NEEDLE.name, "single", NEEDLE_TOML)
        store.upsert_probe("RX15-2", ROD.name, "rod", ROD_TOML)
        bias = 0.96   # the invented needle reads 4 % high; its calibration corrects that
        # calibration in agar-gelled water at 20 °C: three runs
        kw = reference_value("agar-water", 20.0).k_W_per_mK
        cal_ids = [_store_run(store, _run(kw / bias, 4.18e6, NEEDLE, rng, q=5.0, t0_C=20.0,
                                   heat_s=600.0, noise_K=0.002), NEEDLE,
                              {"sample": "agar-gelled water, 20 °C bath", "material": "agar-water",
                               "notes": "calibration"}) for _ in range(3)]
        cal_meas = []
        for rid in cal_ids:
            j = json.loads(next(iter(store.db.query("SELECT data FROM results WHERE run_id = ?", [rid])))["data"])
            cal_meas.append(Measurement(j["k_W_per_mK"], j["k_u_W_per_mK"], rid, tuple(j["flags"])))
        from linerig.daemon.report.sources import record_calibration
        out = evaluate_calibration("FN-0412", reference_value("agar-water", 20.0), cal_meas)
        cal_id = record_calibration(store.db, out, {"bath_C": 20.0})
        factor, factor_u = out.factor, out.factor_u
        # borehole BH1: repeated insertions, deepened between runs; peat over clay over sand
        bh1 = []
        for depth, k in ((0.5, 0.55), (1.0, 0.80), (1.5, 1.15), (2.0, 1.60), (2.5, 1.75)):
            d = _run(k / bias, 2.6e6, NEEDLE, rng)
            bh1.append(_store_run(store, d, NEEDLE, {"site": SITE, "location": "BH1", "depth_m": depth + 0.075,
                                                     "sample": f"in situ, {depth:.1f} m", "operator": "demo"},
                                  factor=factor, factor_u=factor_u))
        # borehole BH2: the rod's tip pushed to 1.6 m, four junctions along it (1.3, 1.0, 0.7 and 0.4 m deep)
        ks = {"tip300": 1.45, "tip600": 1.15, "tip900": 0.80, "tip1200": 0.62}
        d = _run(1.0, 2.6e6, ROD, rng, sensors=tuple(ks), ks=ks)
        bh2 = _store_run(store, d, ROD, {"site": SITE, "location": "BH2", "depth_m": 1.6, "sample": "rod profile",
                                         "operator": "demo"})
        # one run, three heating-recovery cycles on the backfill FB-3
        parts, phase = [], []
        t_off = 0.0
        for _c in range(3):
            dc = _run(1.9 / bias, 2.9e6, NEEDLE, rng, t0_C=20.0)
            parts.append((dc.time_s - dc.time_s[0] + t_off, dc.q_W_per_m, dc.temps_C["heater"]))
            phase += ["settling" if x < 0 else "heating" if qq > 0 else "recovering"
                      for x, qq in zip(dc.time_s, dc.q_W_per_m, strict=True)]
            t_off = float(parts[-1][0][-1]) + 2.0
        t = np.concatenate([p[0] for p in parts])
        last_on = float(parts[-1][0][np.argmax(parts[-1][1] > 0)])
        multi = RunData(t - last_on, np.concatenate([p[1] for p in parts]),
                        {"heater": np.concatenate([p[2] for p in parts])})
        cyc = _store_run(store, multi, NEEDLE, {"sample": "FB-3 backfill, compacted", "material": "Moor sand backfill",
                                                "moisture_pct": 9.0, "dry_density_kg_per_m3": 1700.0,
                                                "notes": "three cycles"}, phase=phase, reduce=False)
        # dry-out series on the backfill: lab runs at several moistures and two densities
        dry = []
        for rho_d in (1600.0, 1750.0):
            for w in (0.5, 1.5, 3.0, 5.0, 8.0, 12.0):
                k = float(conductivity("cote-konrad", w / 100, rho_d, SAND, SAND_TRUE)) * float(rng.normal(1, 0.01))
                d = _run(k / bias, 2.4e6, NEEDLE, rng, q=4.0, t0_C=20.0)
                dry.append(_store_run(store, d, NEEDLE, {"sample": f"FB-3 at {w:g} %, {rho_d:.0f} kg/m³",
                                                         "material": "Moor sand backfill", "moisture_pct": w,
                                                         "dry_density_kg_per_m3": rho_d},
                                      factor=factor, factor_u=factor_u))
    finally:
        store.close()
    return {"calibration_runs": cal_ids, "calibration_id": cal_id, "bh1": bh1, "bh2": bh2, "cycles_run": cyc,
            "dryout_runs": dry}


def write_csvs(out: Path = HERE) -> None:
    """The moisture series, a cylinder-mould record and a field run, as CSV files."""
    rng = np.random.default_rng(7)
    out.mkdir(parents=True, exist_ok=True)
    lines = ["# Invented dry-out series, made-up Moor sand backfill FB-3 (synthetic: Côté-Konrad shape, 1 % noise)",
             "moisture_pct,dry_density_kg_per_m3,k_W_per_mK,k_u_W_per_mK"]
    for rho_d in (1600.0, 1750.0):
        for w in (0.3, 0.7, 1.5, 2.5, 4.0, 6.0, 9.0, 13.0, 17.0):
            k = float(conductivity("cote-konrad", w / 100, rho_d, SAND, SAND_TRUE)) * float(rng.normal(1, 0.01))
            lines.append(f"{w},{rho_d:.0f},{k:.4f},{0.015 * k:.4f}")
    (out / "dryout_moor_sand.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    # cylinder mould: 70 mm bore, 90 mm high (R = 35 mm, H/D = 1.29), heated in a 45 °C bath, then a 15 °C one
    t = np.arange(-60.0, 4800.0, 5.0)
    steps = cyl.SurfaceSteps(np.array([0.0, 2400.0]), np.array([45.0, 15.0]))
    centre = (cyl.model_centre_C(t, 4.1e-7, MOULD_R_M, MOULD_H_M / (2 * MOULD_R_M), steps, 18.0, lag_s=8.0)
              + rng.normal(0, 0.01, t.size))
    bath = np.where(t < 0, 18.0, np.where(t < 2400, 45.0, 15.0)) + rng.normal(0, 0.02, t.size)
    rows = ["# Invented surface-step test: FB-3 in a 70 mm x 90 mm mould (R 35 mm, H 90 mm), synthetic",
            "time_s,T_centre_C,T_bath_C"]
    rows += [f"{a:.1f},{b:.4f},{c:.3f}" for a, b, c in zip(t, centre, bath, strict=True)]
    (out / "cylinder_mould_FB3.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    d = _run(1.15, 2.6e6, NEEDLE, rng)
    write_run_csv(d, out / "run_BH1_1.5m.csv", [f"Invented field run, {SITE}, BH1, probe tip 1.575 m",
                                                "probe FN-0412 (radius 1.2 mm, heater 150 mm)"])
    (out / "FN-0412.toml").write_text(NEEDLE_TOML, encoding="utf-8")


if __name__ == "__main__":
    dest = Path(sys.argv[1]) if len(sys.argv) > 1 else Path(".")
    dest.mkdir(parents=True, exist_ok=True)
    ids = build_demo_db(dest / "examplemoor.db")
    write_csvs()
    print(json.dumps(ids, indent=2))
