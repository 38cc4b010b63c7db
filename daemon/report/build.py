"""Assemble reports from runs, sites and workflow results (content only; html.py and pdf.py write it)."""

from __future__ import annotations

import datetime as dt
import json
import math
from collections.abc import Sequence
from typing import Any

from linerig.daemon.probe import ProbeProfile
from linerig.daemon.reduction.api import RunReduction
from linerig.daemon.reduction.data import RunData
from linerig.daemon.workflows.calibration import CalibrationStatus
from linerig.daemon.workflows.profiles import ProfilePoint, group_profiles, row_label, summarise_depths

from . import plots
from .model import Bullets, Figure, Heading, Para, Report, Table
from .text import CAUTIONS, FLAGS, METHOD, REFERENCES, WORKFLOW_REFERENCES

META_FIELDS = (
    ("site", "Site"), ("location", "Location / borehole"), ("depth_m", "Depth of probe tip (m)"),
    ("sample", "Sample"), ("material", "Material"), ("moisture_pct", "Moisture (% dry mass)"),
    ("dry_density_kg_per_m3", "Dry density (kg/m³)"), ("probe_serial", "Probe"), ("operator", "Operator"),
    ("created_utc", "Started (UTC)"), ("ended_utc", "Ended (UTC)"), ("state", "Final state"),
    ("end_reason", "End reason"), ("notes", "Notes"),
)


def f(v: Any, digits: int = 4) -> str:
    if v is None:
        return "—"
    try:
        x = float(v)
    except (TypeError, ValueError):
        return str(v)
    return "—" if not math.isfinite(x) else f"{x:.{digits}g}"


def now_utc() -> str:
    return dt.datetime.now(dt.UTC).isoformat(timespec="seconds")


def _common_tail(rep: Report, flags_seen: set[str], extra_refs: Sequence[str] = ()) -> None:
    if flags_seen:
        rep.add(Heading("Quality flags"),
                Bullets(tuple(f"{fl}: {FLAGS.get(fl, 'see the method notes')}" for fl in sorted(flags_seen))))
    rep.add(Heading("Method"), Para(METHOD), Heading("References"), Bullets((*REFERENCES, *extra_refs), "small"),
            Heading("Cautions"), Bullets(CAUTIONS, "caution"))


def calibration_blocks(status: CalibrationStatus | None, row: dict[str, Any] | None, factor_used: float | None
                       ) -> list[Any]:
    """Traceability: which calibration, against what reference, from which source, valid until when."""
    out: list[Any] = [Heading("Calibration traceability")]
    if factor_used is not None:
        out.append(Para(f"Probe factor applied to the results: {factor_used:.4f}."))
    if row is None:
        out.append(Para("No accepted calibration was on record for this probe when the run was made: results are "
                        "as measured (factor 1) unless stated above.", "note"))
        return out
    notes: dict[str, Any] = {}
    try:
        notes = json.loads(row.get("notes") or "{}")
    except (TypeError, ValueError):
        notes = {}
    pairs = [
        ("Calibration id", str(row.get("id"))), ("Made (UTC)", str(row.get("created_utc") or "—")),
        ("Reference medium", str(row.get("reference") or "—")),
        ("Reference k (W/(m·K))", f"{f(row.get('reference_k_W_per_mK'), 5)} ± "
                                  f"{f(notes.get('reference_k_u_W_per_mK'), 2)} (u)"),
        ("Source of the reference value", str(notes.get("reference_source") or "—")),
        ("Measured k (W/(m·K))", f(row.get("measured_k_W_per_mK"), 5)),
        ("Factor", f"{f(row.get('factor'), 5)} ± {f(row.get('factor_u'), 2)} (u)"),
        ("Calibration runs", ", ".join(str(x) for x in notes.get("run_ids", [])) or str(row.get("run_id") or "—")),
        ("Valid until (UTC)", str(row.get("expires_utc") or "—")),
    ]
    out.append(Table(("item", "value"), tuple(pairs)))
    if status is not None:
        out.append(Para(f"Status at the time of the run: {status.message}.",
                        "caution" if status.state in ("expired", "none") else "note"))
    return out


def run_report(meta: dict[str, Any], data: RunData | None, red: RunReduction | None, probe: ProbeProfile | None,
               *, calibration: CalibrationStatus | None = None, calibration_row: dict[str, Any] | None = None,
               stored: dict[str, dict[str, Any]] | None = None, source: str = "") -> Report:
    """One run: metadata, results with uncertainty and flags, plots, calibration traceability, method, cautions."""
    rid = meta.get("id")
    title = f"Thermal resistivity measurement — run {rid}" if rid is not None else "Thermal resistivity measurement"
    rep = Report(title, f"linerig report, generated {now_utc()}" + (f" from {source}" if source else ""))
    rows = tuple((label, f(meta[key]) if isinstance(meta.get(key), float) else str(meta[key]))
                 for key, label in META_FIELDS if meta.get(key) not in (None, ""))
    rep.add(Heading("Run"), Table(("item", "value"), rows or (("source", source or "—"),)))
    if probe is not None:
        rep.add(Para(f"Probe {probe.name} ({probe.serial or 'no serial'}): radius {probe.radius_mm:g} mm, heater "
                     f"length {f(probe.heater_length_mm)} mm, sensors "
                     + ", ".join(f"{s.name} at {s.radial_mm:g} mm" for s in probe.sensors) + ".", "note"))
    flags_seen: set[str] = set()
    if red is not None:
        res_rows = []
        for name, r in red.sensors.items():
            j = r.to_json()
            flags_seen.update(r.flags)
            res_rows.append((
                name, f(j["k_W_per_mK"]), f(j["k_U_W_per_mK"], 2), f(j["resistivity_mK_per_W"]),
                f(j["resistivity_Ccm_per_W"]), f(j["alpha_mm2_per_s"], 3), f(j["rho_c_MJ_per_m3K"], 3),
                "—" if not r.window_s else f"{r.window_s[0]:.0f}–{r.window_s[1]:.0f}", f(r.stable_at_s),
                r.method, ", ".join(r.flags) or "none"))
        rep.add(Heading("Results"), Table(
            ("sensor", "k W/(m·K)", "U (k=2)", "ρ m·K/W", "ρ °C·cm/W", "α mm²/s", "ρc MJ/(m³·K)", "window s",
             "stable at s", "method", "flags"), tuple(res_rows),
            "U is the expanded uncertainty with coverage factor 2 (JCGM 100:2008). α and ρc only where the geometry "
            "allows them (a sensor at a known distance, or the single-probe intercept with its large uncertainty)."))
        for name, r in red.sensors.items():
            extra = [r.method_reason, *r.notes]
            j = r.to_json()
            alt = [f"{lbl} {f(j[key])}" for key, lbl in (("k_line_W_per_mK", "line"), ("k_model_W_per_mK", "model"),
                                                         ("k_recovery_W_per_mK", "cooling"),
                                                         ("k_joint_W_per_mK", "heating+cooling")) if j.get(key)]
            if alt:
                extra.append("k by each method (W/(m·K)): " + "; ".join(alt))
            if r.u_budget_rel:
                extra.append("uncertainty budget (relative, standard): " + "; ".join(
                    f"{k} {100 * v:.2f} %" for k, v in r.u_budget_rel.items()))
            rep.add(Para(f"{name}: " + " ".join(x.rstrip(".") + "." for x in extra if x), "note"))
        if stored:
            diffs = []
            for name, s in stored.items():
                k_new = red.sensors[name].k_W_per_mK if name in red.sensors else None
                k_old = s.get("k_W_per_mK")
                if k_new and k_old and abs(k_new / k_old - 1) > 0.005:
                    diffs.append(f"{name}: stored {f(k_old)} vs now {f(k_new)}")
            if diffs:
                rep.add(Para("The stored live result differs from this offline reduction by more than 0.5 % ("
                             + "; ".join(diffs) + "); the table shows the offline reduction.", "caution"))
        if data is not None:
            rep.add(Heading("Plots"))
            for name, r in red.sensors.items():
                if r.line is not None or r.baseline is not None:
                    rep.add(Figure(plots.heating_fit(data, r), f"{name}: temperature rise against ln t with the "
                                   "fitted line (solid in the window, dashed outside) and residuals in the window."))
                png = plots.estimate_history(data, r, probe)
                if png:
                    rep.add(Figure(png, f"{name}: the live estimate against time (live rule replayed) with ±U."))
                png = plots.cooling(data, r)
                if png:
                    rep.add(Figure(png, f"{name}: recovery after the heater went off."))
    elif stored:
        rep.add(Heading("Results (as stored)"), Table(
            ("sensor", "k W/(m·K)", "u", "ρ m·K/W", "method", "flags"),
            tuple((n, f(s.get("k_W_per_mK")), f(s.get("k_u_W_per_mK"), 2), f(s.get("resistivity_mK_per_W")),
                   str(s.get("method") or "—"), ", ".join(s.get("flags") or []) or "none") for n, s in stored.items())))
        for s in stored.values():
            flags_seen.update(s.get("flags") or [])
    rep.add(*calibration_blocks(calibration, calibration_row, _factor(red, stored)))
    events = meta.get("events") or []
    if events:
        rep.add(Heading("Events"), Table(("device time s", "kind", "state", "reason"), tuple(
            (f(e.get("device_s"), 6), str(e.get("kind") or ""), str(e.get("state") or ""), str(e.get("reason") or ""))
            for e in events)))
    _common_tail(rep, flags_seen)
    return rep


def _factor(red: RunReduction | None, stored: dict[str, dict[str, Any]] | None) -> float | None:
    if red is not None and red.sensors:
        return next(iter(red.sensors.values())).calibration_factor
    if stored:
        v = next(iter(stored.values())).get("calibration_factor")
        return float(v) if v else None
    return None


def site_report(site: str, runs: Sequence[dict[str, Any]], points: Sequence[ProfilePoint],
                calibrations: Sequence[dict[str, Any]], borehole: str | None = None,
                run_figures: dict[str, bytes] | None = None) -> Report:
    """A site (or one borehole): every run's result, depth profiles with plots, calibrations used, cautions."""
    what = f"{site}, borehole {borehole}" if borehole else site
    rep = Report(f"Thermal resistivity survey — {what}", f"linerig site report, generated {now_utc()}")
    flags_seen: set[str] = set()
    rows = []
    for r in runs:
        for sensor, res in (r.get("results") or {}).items():
            flags_seen.update(res.get("flags") or [])
            k = res.get("k_W_per_mK")
            rows.append((row_label(r), str(r.get("created_utc") or "")[:16], str(r.get("location") or "—"),
                         f(r.get("depth_m"), 3), str(r.get("sample") or "—"), sensor, f(k),
                         f(2 * res["k_u_W_per_mK"] if res.get("k_u_W_per_mK") else None, 2),
                         f(100 / k if k else None), ", ".join(res.get("flags") or []) or "none"))
        if not r.get("results"):
            rows.append((row_label(r), str(r.get("created_utc") or "")[:16], str(r.get("location") or "—"),
                         f(r.get("depth_m"), 3), str(r.get("sample") or "—"), "—", "—", "—", "—",
                         f"no result ({r.get('state') or '?'})"))
    rep.add(Heading("Runs"), Table(("run", "started", "borehole", "tip depth m", "sample", "sensor", "k W/(m·K)",
                                    "U (k=2)", "ρ °C·cm/W", "flags"), tuple(rows)))
    groups = group_profiles(points)
    if groups:
        rep.add(Heading("Depth profiles"),
                Figure(plots.depth_profile(groups, f"Thermal resistivity against depth — {what}"),
                       "Resistivity against depth below ground, per borehole, with ±U error bars. A rod's sensors "
                       "are placed at their height above the tip; repeated insertions at the depth of each run."))
        for (_s, bh), pts in groups.items():
            summ = summarise_depths(list(pts))
            rep.add(Heading(f"Borehole {bh}", 3), Table(
                ("depth m", "readings", "mean ρ °C·cm/W", "spread (SD)", "highest ρ °C·cm/W"),
                tuple((f(d.depth_m, 3), str(d.n), f(100 * d.resistivity_mK_per_W), f(100 * d.spread_mK_per_W, 2),
                       f(100 * d.worst_mK_per_W)) for d in summ),
                "Readings within 5 cm of depth pooled. The highest value at a depth is the thermally worst case."))
            for p in pts:
                flags_seen.update(p.flags)
    if run_figures:
        rep.add(Heading("Run plots"))
        for rid, png in run_figures.items():
            rep.add(Figure(png, f"Run {rid}: rise against ln t with the fitted line and residuals."))
    rep.add(Heading("Calibrations of the probes used"))
    if calibrations:
        rep.add(Table(("probe", "id", "made", "reference", "factor", "u", "accepted", "valid until"), tuple(
            (str(c.get("probe_serial")), row_label(c), str(c.get("created_utc") or "")[:10],
             str(c.get("reference") or ""), f(c.get("factor"), 5), f(c.get("factor_u"), 2),
             "yes" if c.get("accepted") else "no", str(c.get("expires_utc") or "")[:10]) for c in calibrations)))
    else:
        rep.add(Para("No calibration is on record for these probes: results are as measured.", "caution"))
    _common_tail(rep, flags_seen)
    return rep


def workflow_tail(rep: Report, kind: str, flags: set[str] | None = None) -> Report:
    _common_tail(rep, flags or set(), WORKFLOW_REFERENCES.get(kind, ()))
    return rep
