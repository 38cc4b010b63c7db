"""From a record's parameters to its clean time series, its model error and its `true` block."""

from __future__ import annotations

import copy
import math
import time
from dataclasses import dataclass, fields
from typing import Any

import numpy as np

from .fv_axi import AxiGrid, AxiSensor, Medium, ProbeLayer, ResolvedProbe, build_axi
from .fv_planar import DualNeedle, NeedleLayers, PlanarGrid, build_planar
from .materials import Solid
from .stepper import LinearThermalSystem, PowerHistory, Solution, StepControl, integrate

__all__ = ["RecordResult", "run_record", "solve"]


def _solid(d: dict[str, Any]) -> Solid:
    return Solid(d["key"], float(d["k_W_per_mK"]), float(d["rho_c_J_per_m3K"]), "record parameters")


def _dc(cls: type, d: dict[str, Any]) -> Any:
    names = {f.name for f in fields(cls)}
    unknown = set(d) - names
    if unknown:
        raise ValueError(f"unknown {cls.__name__} keys: {sorted(unknown)}")
    return cls(**d)


def _axi_system(p: dict[str, Any], scale: float = 1.0) -> tuple[LinearThermalSystem, tuple[str, ...], int]:
    pr = p["probe"]
    layers = tuple(ProbeLayer(lay["r_out_m"], _solid(lay["material"]), lay["cells"]) for lay in pr["layers"])
    gap = pr.get("gap")
    probe = ResolvedProbe(layers=layers, heated_z_m=tuple(pr["heated_z_m"]), top_m=pr["top_m"],
                          tip_cap_m=pr["tip_cap_m"],
                          gap=None if gap is None else ProbeLayer(gap["r_out_m"], _solid(gap["material"]),
                                                                  gap["cells"]))
    medium = Medium(tuple(_solid(m) for m in p["medium"]["layers"]), tuple(p["medium"]["tops_m"]))
    sensors = tuple(AxiSensor(s["name"], s["r_m"], s["z_m"]) for s in p["sensors"])
    grid = _dc(AxiGrid, {**p["grid"], "scale": p["grid"].get("scale", 1.0) * scale})
    model = build_axi(probe, medium, sensors, grid)
    return model.system, tuple(s.name for s in sensors), model.k.size


def _planar_system(p: dict[str, Any], scale: float = 1.0) -> tuple[LinearThermalSystem, tuple[str, ...], int]:
    def needle(d: dict[str, Any] | None) -> NeedleLayers | None:
        if d is None:
            return None
        return NeedleLayers(tuple((lay["r_out_m"], _solid(lay["material"]), lay["cells"]) for lay in d["layers"]))

    dual = DualNeedle(needle(p["heater"]), needle(p.get("sensor_needle")), p["spacing_m"])  # type: ignore[arg-type]
    grid = _dc(PlanarGrid, {**p["grid"], "scale": p["grid"].get("scale", 1.0) * scale})
    model = build_planar(dual, _solid(p["medium"]), grid)
    return model.system, model.sensors, model.system.cap.size


def power_history(p: dict[str, Any]) -> PowerHistory:
    return PowerHistory(tuple(p["power"]["t_s"]), tuple(p["power"]["q_W_per_m"]))


def solve(p: dict[str, Any], *, scale: float = 1.0, coarse_time: bool = False) -> tuple[Solution, tuple[str, ...], int]:
    """Run one record's physics. scale < 1 coarsens the grid; coarse_time doubles every step length."""
    build = _axi_system if p["solver"] == "axisymmetric" else _planar_system
    system, names, ncell = build(p, scale)
    tc = dict(p["time"])
    if coarse_time:
        tc.update(ratio=2 * tc["ratio"], max_s=2 * tc["max_s"], store_s=2 * tc["store_s"],
                  first_units=2 * tc["first_units"])
    sol = integrate(system, power_history(p), p["t_end_s"], _dc(StepControl, tc))
    return sol, names, ncell


@dataclass
class RecordResult:
    t_s: np.ndarray
    dT: dict[str, np.ndarray]
    true: dict[str, Any]
    stats: dict[str, Any]


def _log_slope(t: np.ndarray, y: np.ndarray) -> np.ndarray:
    return np.gradient(y, np.log(t))


def _model_error(p: dict[str, Any], t: np.ndarray, vals: np.ndarray, tc: np.ndarray, vc: np.ndarray,
                 names: tuple[str, ...]) -> dict[str, dict[str, float | None]]:
    """Richardson estimate from a half-resolution twin (second order: error ≈ (fine − coarse)/3)."""
    common, ib, ic = np.intersect1d(np.round(t, 9), np.round(tc, 9), return_indices=True)
    keep = common > 0
    ib, ic, tt = ib[keep], ic[keep], common[keep]
    out: dict[str, dict[str, float | None]] = {}
    th = float(p["t_heat_s"])
    qs = np.asarray(p["power"]["q_W_per_m"], dtype=float)
    jumps = np.abs(np.diff(np.concatenate(([0.0], qs))))
    big_changes = np.asarray(p["power"]["t_s"], dtype=float)[(jumps > 0.05 * np.max(np.abs(qs)))]
    big_changes = big_changes[big_changes > 0]
    for n, name in enumerate(names):
        d = (vals[ib, n] - vc[ic, n]) / 3.0
        peak = float(np.max(np.abs(vals[:, n]))) or 1.0
        e: dict[str, float | None] = {"abs_K": float(np.max(np.abs(d))), "rel_to_max": float(np.max(np.abs(d)) / peak)}
        if th >= 60.0:
            w = (tt >= 0.1 * th) & (tt <= th)
            for c in big_changes:  # the first moments after a power step are a time-step matter, not a slope
                w &= ~((tt > c) & (tt < 1.2 * c))
            if np.count_nonzero(w) > 5:
                # relative to the mean log-slope over the window (the local one passes zero when power drops)
                sd = _log_slope(tt[w], d[w])
                yb = vals[ib, n][w]
                mean_slope = (yb[-1] - yb[0]) / math.log(tt[w][-1] / tt[w][0])
                e["slope_rel_heating"] = float(np.max(np.abs(sd)) / abs(mean_slope))
            else:
                e["slope_rel_heating"] = None
        else:
            e["slope_rel_heating"] = None
            i = int(np.argmax(vals[ib, n]))
            e["peak_rel"] = float(abs(d[i]) / max(vals[ib, n][i], 1e-300))
        out[name] = e
    return out


def _departure(t: np.ndarray, y: np.ndarray, y_twin: np.ndarray, t_heat: float) -> float | None:
    """First heating time (after 5 % of it) where the log-slope leaves the twin's by more than 1 %."""
    w = (t > 0.05 * t_heat) & (t <= t_heat)
    if np.count_nonzero(w) < 5:
        return None
    s = _log_slope(t[w], y[w])
    s2 = _log_slope(t[w], y_twin[w])
    bad = np.abs(s / s2 - 1.0) > 0.01
    return float(t[w][np.argmax(bad)]) if bad.any() else None


def _contact(layer: dict[str, Any] | None, a: float, k_med: float) -> dict[str, Any]:
    if layer is None:
        return {"layer": None, "thickness_m": 0.0, "R_c_m2K_per_W": 0.0, "h": 0.0}
    b = layer["r_out_m"]
    kg = layer["material"]["k_W_per_mK"]
    rc = a * math.log(b / a) / kg
    return {"layer": layer["material"]["key"], "thickness_m": b - a, "k_W_per_mK": kg,
            "rho_c_J_per_m3K": layer["material"]["rho_c_J_per_m3K"], "R_c_m2K_per_W": rc, "h": k_med * rc / a,
            "note": "R_c = a·ln(b/a)/k_layer per m² of the probe surface; h = k·R_c/a (Jaeger's contact parameter)"}


def _probe_summary(layers: list[dict[str, Any]]) -> dict[str, Any]:
    s, r_in = 0.0, 0.0
    for lay in layers:
        s += math.pi * (lay["r_out_m"] ** 2 - r_in**2) * lay["material"]["rho_c_J_per_m3K"]
        r_in = lay["r_out_m"]
    return {"radius_m": r_in, "heat_capacity_J_per_mK": s, "heat_capacity_J_per_m3K": s / (math.pi * r_in**2),
            "layers": [{"r_out_m": lay["r_out_m"], **lay["material"]} for lay in layers]}


def _medium_props(m: dict[str, Any]) -> dict[str, Any]:
    k, c = m["k_W_per_mK"], m["rho_c_J_per_m3K"]
    return {"material": m["key"], "k_W_per_mK": k, "rho_c_J_per_m3K": c, "alpha_m2_per_s": k / c}


def true_block(p: dict[str, Any]) -> dict[str, Any]:
    """The answers a reduction should find, and what it needs to know about the probe."""
    sensors: dict[str, Any] = {}
    if p["solver"] == "axisymmetric":
        med = p["medium"]
        for s in p["sensors"]:
            i = int(np.searchsorted(np.asarray(med["tops_m"], dtype=float), s["z_m"], side="right"))
            sensors[s["name"]] = {"r_m": s["r_m"], "z_m": s["z_m"], "medium": _medium_props(med["layers"][i])}
        probe = _probe_summary(p["probe"]["layers"])
        pr = p["probe"]
        probe.update(heated_length_m=pr["heated_z_m"][1] - pr["heated_z_m"][0], heated_z_m=pr["heated_z_m"],
                     tip_cap_m=pr["tip_cap_m"], top_m=pr["top_m"])
        first = sensors[p["sensors"][0]["name"]]["medium"]
        contact = _contact(pr.get("gap"), probe["radius_m"], first["k_W_per_mK"])
        geometry = {"sample": {k: p["grid"][k] for k in ("r_out_m", "z_bottom_m", "z_top_m", "bc_outer",
                                                         "bc_bottom", "bc_top")},
                    "medium_layer_tops_m": med["tops_m"]}
        for s in p["sensors"]:
            if s["r_m"] > probe["radius_m"]:
                sensors[s["name"]]["radial_m"] = s["r_m"]
    else:
        mp = _medium_props(p["medium"])
        heater_lay = [lay for lay in p["heater"]["layers"] if lay["material"]["key"] != "air"]
        gap = next((lay for lay in p["heater"]["layers"] if lay["material"]["key"] == "air"), None)
        probe = _probe_summary(heater_lay)
        probe["heated_length_m"] = None
        probe["sensor_needle"] = _probe_summary([lay for lay in p["sensor_needle"]["layers"]
                                                 if lay["material"]["key"] != "air"])
        contact = _contact(gap, probe["radius_m"], mp["k_W_per_mK"])
        sensors = {"heater": {"r_m": 0.0, "medium": mp},
                   "needle": {"r_m": p["spacing_m"], "radial_m": p["spacing_m"], "medium": mp}}
        first = mp
        geometry = {"spacing_m": p["spacing_m"], "needles": "infinitely long (planar cross-section)"}
    return {"k_W_per_mK": first["k_W_per_mK"], "alpha_m2_per_s": first["alpha_m2_per_s"],
            "rho_c_J_per_m3K": first["rho_c_J_per_m3K"], "sensors": sensors, "probe": probe, "contact": contact,
            "geometry": geometry, "power": p["power"], "t_heat_s": p["t_heat_s"], "t_end_s": p["t_end_s"],
            "answer": p["answer"]}


def run_record(p: dict[str, Any], log: Any = None) -> RecordResult:
    """Solve a record, its half-resolution twin (model error) and any comparison twins (departure times)."""
    t0 = time.perf_counter()
    c0 = time.process_time()
    sol, names, ncell = solve(p)
    t1 = time.perf_counter()
    coarse, _, _ = solve(p, scale=0.5, coarse_time=True)
    t2 = time.perf_counter()
    true = true_block(p)
    err = _model_error(p, sol.t_s, sol.values, coarse.t_s, coarse.values, names)
    for n in names:
        true["sensors"][n]["model_error"] = err[n]
    for tw in p.get("twins", []):
        q = copy.deepcopy(p)
        if "grid" in tw:
            q["grid"] = tw["grid"]
        if "medium" in tw:
            q["medium"] = tw["medium"]
        tsol, _, _ = solve(q)
        if tsol.t_s.shape != sol.t_s.shape or not np.allclose(tsol.t_s, sol.t_s):
            raise RuntimeError("twin stored different times")
        key = tw["medium"]["layers"][0]["key"] if "medium" in tw else None
        for n, name in enumerate(names):
            if key is not None and true["sensors"][name]["medium"]["material"] != key:
                continue
            true["sensors"][name]["t_departure_1pct_s"] = _departure(sol.t_s, sol.values[:, n],
                                                                     tsol.values[:, n], p["t_heat_s"])
            true["sensors"][name]["departure_twin"] = tw["label"]
    t3 = time.perf_counter()
    stats = {"cells": ncell, "steps": sol.n_steps, "cpu_s": round(time.process_time() - c0, 1),
             "solve_s": round(t1 - t0, 2), "error_twin_s": round(t2 - t1, 2), "twins_s": round(t3 - t2, 2),
             "energy_residual_rel": sol.energy_residual_rel, "energy_in_J": sol.energy_in_J}
    if log:
        log(f"  {p['name']}: {ncell} cells, {sol.n_steps} steps, solve {t1 - t0:.1f} s, error twin {t2 - t1:.1f} s,"
            f" twins {t3 - t2:.1f} s, energy residual {sol.energy_residual_rel:.1e}")
    return RecordResult(sol.t_s, {n: sol.values[:, i] for i, n in enumerate(names)}, true, stats)
