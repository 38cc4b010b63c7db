"""Write replay_rod.json: a fixed daemon conversation for the UI's snapshot tests (run by hand, output committed).

An invented three-sensor rod in an invented test pit. Temperatures follow the ideal line source,
ΔT = q/(4πk)·E1(r²/4αt) (Carslaw & Jaeger 1959 §10.4; E1 from scipy.special.exp1), plus seeded noise; the
estimates come from the daemon's own live reducer at the time of writing. The file is committed so the
snapshots do not move when the reducer is tuned.

    .venv/bin/python tests/snapshots/make_replay.py
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
from scipy.special import exp1

from linerig.daemon.reduction.live import LiveReducer

K, RHO_C, Q, T0 = 1.20, 2.0e6, 5.0, 11.80
ALPHA = K / RHO_C
SENSORS = {"heater": 0.635e-3, "r6": 6.0e-3, "r12": 12.0e-3}
BASELINE_S, HEAT_UNTIL_S = 60, 240
START_DEV = 1000.0


def temps(t: float, rng: np.random.Generator) -> list[float]:
    out = []
    for r in SENSORS.values():
        rise = Q / (4 * math.pi * K) * float(exp1(r * r / (4 * ALPHA * t))) if t > 0 else 0.0
        out.append(round(T0 + rise + float(rng.normal(0, 0.003)), 4))
    return out


def main() -> None:
    rng = np.random.default_rng(20240611)
    limits = {"max_power_W_per_m": 60.0, "power_tolerance": 0.15, "max_rise_K": 12.0, "max_probe_C": 85.0,
              "max_heating_s": 3600.0, "heater_ohm_tolerance": 0.25, "min_supply_V": 10.5,
              "max_bad_frames_per_min": 20, "stale_after_s": 2.0, "lease_s": 1.0}
    plan = {"heat_s": 600.0, "recover_s": 600.0, "power_W_per_m": Q, "baseline_s": float(BASELINE_S),
            "settle_timeout_s": 600.0, "max_drift_K_per_min": 0.02, "auto_stop": False, "cycles": 1,
            "reequilibrate_s": 0.0, "sensor": "heater"}
    idle = {"device_s": START_DEV, "temps_C": temps(0, rng), "faults": [0, 0, 0], "sensors": list(SENSORS),
            "q_W_per_m": 0.0, "heater_on": False, "heater_V": 0.0, "heater_A": 0.0, "supply_V": 12.61, "cj_C": 17.2}
    status = {"link_up": True, "identity": {"model": "rod front end", "serial": "FE-0042", "firmware": "1.3",
                                            "protocol": 1, "n_channels": 3, "boot_id": "0A1B2C3D"},
              "heater_armed": False, "fault": None, "store_failed": None, "device_s": START_DEV,
              "last_sample": idle, "probe": {"name": "three-sensor rod", "serial": "ROD-0003",
                                             "sensors": list(SENSORS)},
              "limits": limits, "simulated_material": None, "run": None, "counters": {}}
    run_id = 17
    events: list[dict] = [{"event": "state", "run_id": run_id, "state": "checking", "reason": "run requested"}]
    red = LiveReducer(None, "heater")
    dev = START_DEV
    heat_on = START_DEV + 1 + BASELINE_S
    events.append({"event": "state", "run_id": run_id, "state": "settling", "reason": "pre-checks passed",
                   "device_s": START_DEV + 1})
    for i in range(1, BASELINE_S + 1 + HEAT_UNTIL_S + 1):
        dev = START_DEV + i
        t = dev - heat_on
        if abs(t) < 1e-9:
            events.append({"event": "state", "run_id": run_id, "state": "heating",
                           "reason": "baseline settled: drift 0.0041 K/min", "device_s": dev})
        on = t >= 0
        q = Q * (1 + float(rng.normal(0, 0.0005))) if on else 0.0
        tc = temps(t, rng)
        phase = "heating" if on else "settling"
        events.append({"event": "sample", "run_id": run_id, "phase": phase, "t_s": t if on else None,
                       "device_s": dev, "temps_C": tc, "faults": [0, 0, 0], "sensors": list(SENSORS),
                       "q_W_per_m": round(q, 4), "heater_on": on, "heater_V": 6.32 if on else 0.0,
                       "heater_A": 0.0791 if on else 0.0, "supply_V": 12.58 if on else 12.61, "cj_C": 17.2})
        est = red.add(t, tc[0] + 273.15, q)
        if est is not None and on and t > 0:
            d = {k: float(f"{v:.6g}") if isinstance(v, float) else v for k, v in est.to_dict().items()}
            d["window_s"] = [float(f"{v:.6g}") for v in d["window_s"]]
            events.append({"event": "estimate", "run_id": run_id, **d})
    detail = {"id": run_id, "created_utc": "2031-05-14T09:12:03.000+00:00",
              "ended_utc": "2031-05-14T09:33:10.000+00:00", "state": "done", "end_reason": "recovery logged",
              "kind": "single", "probe_serial": "ROD-0003",
              "sensor_names": json.dumps(list(SENSORS)), "heater_length_m": 0.15, "site": "Kestrel Lane test pit",
              "location": "TP-2", "depth_m": 1.1, "sample": "K-7", "material": "silty sand", "moisture_pct": 14.5,
              "dry_density_kg_per_m3": 1640.0, "notes": "overcast, pit shaded", "operator": "field crew B",
              "plan": plan, "n_samples": 1262,
              "events": [
                  {"wall_utc": "2031-05-14T09:12:03", "device_s": 1000.0, "kind": "state", "state": "checking",
                   "reason": "run requested", "data": None},
                  {"wall_utc": "2031-05-14T09:12:04", "device_s": 1001.0, "kind": "state", "state": "settling",
                   "reason": "pre-checks passed", "data": None},
                  {"wall_utc": "2031-05-14T09:13:04", "device_s": 1061.0, "kind": "state", "state": "heating",
                   "reason": "baseline settled: drift 0.0041 K/min", "data": None},
                  {"wall_utc": "2031-05-14T09:19:52", "device_s": 1469.0, "kind": "operator", "state": None,
                   "reason": "operator asked to stop heating", "data": None},
                  {"wall_utc": "2031-05-14T09:19:53", "device_s": 1470.0, "kind": "state", "state": "recovering",
                   "reason": "heating stopped early: estimate stabilised", "data": None},
                  {"wall_utc": "2031-05-14T09:29:53", "device_s": 2070.0, "kind": "state", "state": "done",
                   "reason": "recovery logged", "data": None}],
              "results": {"heater": {"k_W_per_mK": 1.197, "k_u_W_per_mK": 0.014, "resistivity_mK_per_W": 0.8354,
                                     "alpha_mm2_per_s": 0.61, "rho_c_MJ_per_m3K": 1.96, "window_s": [41.0, 409.0],
                                     "stable_at_s": 188.0, "method": "late-time line", "flags": [],
                                     "source": "final"},
                          "r6": {"k_W_per_mK": 1.21, "k_u_W_per_mK": 0.03, "resistivity_mK_per_W": 0.826,
                                 "alpha_mm2_per_s": 0.59, "rho_c_MJ_per_m3K": 2.05, "window_s": [120.0, 409.0],
                                 "stable_at_s": None, "method": "late-time line", "flags": ["window_short"],
                                 "source": "final"}}}
    runs = [{"id": 17, "created_utc": "2031-05-14T09:12:03.000+00:00", "ended_utc": "2031-05-14T09:33:10.000+00:00",
             "state": "done", "end_reason": "recovery logged", "site": "Kestrel Lane test pit", "location": "TP-2",
             "sample": "K-7", "material": "silty sand", "probe_serial": "ROD-0003", "depth_m": 1.1, "sensor": "heater",
             "k_W_per_mK": 1.197, "k_u_W_per_mK": 0.014},
            {"id": 16, "created_utc": "2031-05-14T08:31:40.000+00:00", "ended_utc": "2031-05-14T08:40:02.000+00:00",
             "state": "faulted", "end_reason": "supply voltage 10.31 V is below 10.50 V (battery low)",
             "site": "Kestrel Lane test pit", "location": "TP-1", "sample": "K-6", "material": "clayey silt",
             "probe_serial": "ROD-0003", "depth_m": 0.9, "sensor": "heater", "k_W_per_mK": None, "k_u_W_per_mK": None},
            {"id": 15, "created_utc": "2031-05-13T15:02:11.000+00:00", "ended_utc": "2031-05-13T15:25:40.000+00:00",
             "state": "done", "end_reason": "recovery logged", "site": "Heron Farm verge", "location": "BH-4",
             "sample": "H-2", "material": "gravelly sand", "probe_serial": "ROD-0003", "depth_m": 1.3,
             "sensor": "heater", "k_W_per_mK": 0.954, "k_u_W_per_mK": 0.012},
            {"id": 14, "created_utc": "2031-05-12T10:44:00.000+00:00", "ended_utc": "2031-05-12T10:45:30.000+00:00",
             "state": "aborted", "end_reason": "operator abort", "site": "calibration bench", "location": None,
             "sample": "calibration", "material": "glycerol", "probe_serial": "ROD-0003", "depth_m": None,
             "sensor": None, "k_W_per_mK": None, "k_u_W_per_mK": None}]
    probes = {"probes": [{"serial": "ROD-0003", "name": "three-sensor rod", "kind": "rod",
                          "added_utc": "2031-02-01T08:00:00"},
                         {"serial": "LN-0101", "name": "short lab needle", "kind": "single",
                          "added_utc": "2030-11-20T08:00:00"}],
              "active": {"serial": "ROD-0003", "name": "three-sensor rod", "kind": "rod"}}
    cals = {"calibrations": [
        {"id": 6, "probe_serial": "ROD-0003", "run_id": 13, "created_utc": "2031-05-12T11:20:00",
         "reference": "glycerol", "reference_k_W_per_mK": 0.286, "measured_k_W_per_mK": 0.291, "factor": 0.9828,
         "factor_u": 0.0061, "accepted": 1, "notes": None, "expires_utc": "2031-11-12"},
        {"id": 4, "probe_serial": "ROD-0003", "run_id": 9, "created_utc": "2031-03-02T10:05:00",
         "reference": "agar-gelled water", "reference_k_W_per_mK": 0.598, "measured_k_W_per_mK": 0.604,
         "factor": 0.9901, "factor_u": 0.0072, "accepted": 1, "notes": None, "expires_utc": "2031-09-02"},
        {"id": 2, "probe_serial": "ROD-0003", "run_id": 3, "created_utc": "2031-02-01T09:40:00",
         "reference": "glycerol", "reference_k_W_per_mK": 0.286, "measured_k_W_per_mK": 0.279, "factor": 1.0251,
         "factor_u": 0.0094, "accepted": 0, "notes": "bubble at the tip", "expires_utc": None}]}
    doc = {"status": status, "events": events, "replies": {"runs": {"runs": runs}, "run": {"run": detail},
                                                           "probes": probes, "calibrations": cals}}
    out = Path(__file__).with_name("replay_rod.json")
    out.write_text(json.dumps(doc, separators=(",", ":"), default=lambda o: o.item()) + "\n")
    n_est = sum(e["event"] == "estimate" for e in events)
    stable = next((e["t_s"] for e in events if e["event"] == "estimate" and e["stable"]), None)
    print(f"wrote {out}: {len(events)} events, {n_est} estimates, steady from {stable} s")


if __name__ == "__main__":
    main()
