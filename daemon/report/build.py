"""Assemble reports from runs, sites and workflow results (content only; html.py and pdf.py write it).

Every report opens with an identification block (report number, software version, equipment, operator) and a
method statement (the practice followed and where linerig departs from it), and closes with the flags in words,
the uncertainty convention (± is always U, k = 2), the cautions for that kind of test and a sign-off block.
"""

from __future__ import annotations

import datetime as dt
import json
import math
import re
from collections.abc import Sequence
from typing import Any

from linerig.daemon.probe import ProbeProfile
from linerig.daemon.reduction.api import RunReduction, SensorResult
from linerig.daemon.reduction.data import RunData
from linerig.daemon.workflows.calibration import CalibrationStatus
from linerig.daemon.workflows.profiles import ProfilePoint, group_profiles, row_label, sensor_depth_m, summarise_depths

from . import plots
from .model import Block, Bullets, Figure, Heading, Para, Report, SignOff, Table
from .text import (
    CAUTIONS_BY_KIND,
    DEVIATIONS,
    FLAGS,
    METHOD,
    PRACTICE,
    REFERENCES,
    SIGN_OFF,
    UNCERTAINTY_STATEMENT,
    WORKFLOW_REFERENCES,
)

META_FIELDS = (
    ("site", "Site"), ("location", "Location / borehole"), ("depth_m", "Depth of probe tip below ground (m)"),
    ("sample", "Sample"), ("material", "Material"), ("moisture_pct", "Moisture (% dry mass)"),
    ("dry_density_kg_per_m3", "Dry density (kg/m³)"), ("created_utc", "Started (UTC)"),
    ("ended_utc", "Ended (UTC)"), ("state", "Final state"), ("end_reason", "End reason"), ("notes", "Notes"),
)
PM = "± U (k = 2)"   # the one label for ± on every surface


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


def when(v: Any) -> str:
    """An ISO timestamp for people: "2031-05-12 14:23 UTC"."""
    text = str(v or "")
    try:
        t = dt.datetime.fromisoformat(text)
    except ValueError:
        return text or "—"
    return t.strftime("%Y-%m-%d %H:%M") + (" UTC" if t.utcoffset() is not None or "T" in text else "")


def software_version() -> str:
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("linerig")
    except PackageNotFoundError:
        return "unknown (not installed)"


def report_number(code: str, subject: Any = "", at: dt.datetime | None = None) -> str:
    """LR-<kind>-<subject>-<UTC date and minute>: unique per subject and minute, readable on the phone."""
    at = at or dt.datetime.now(dt.UTC)
    sub = re.sub(r"[^A-Za-z0-9]+", "", str(subject))[:16]
    return "-".join(x for x in ("LR", code, sub, at.strftime("%Y%m%d-%H%M")) if x)


def identification(rep: Report, test: str, source: str, rows: Sequence[tuple[str, str]] = ()) -> None:
    rep.add(Heading("Identification"), Table(("item", "value"), (
        ("Report number", rep.number), ("Test", test), ("Software", f"linerig {software_version()}"),
        ("Generated", when(now_utc())), *((("Source", source),) if source else ()), *rows)))


def equipment_rows(meta: dict[str, Any], probe: ProbeProfile | None) -> list[tuple[str, str]]:
    """Probe, front end and operator, as recorded with the run."""
    serial = meta.get("probe_serial") or (probe.serial if probe else None)
    name = probe.name if probe else None
    fe = " ".join(str(meta[k]) for k in ("frontend_model",) if meta.get(k))
    fe_serial, fw = meta.get("frontend_serial"), meta.get("frontend_firmware")
    front = ", ".join(x for x in (fe or None, f"serial {fe_serial}" if fe_serial else None,
                                  f"firmware {fw}" if fw else None) if x)
    return [("Probe", f"{name or 'probe'}, serial {serial}" if serial else (name or "not recorded")),
            ("Front end", front or "not recorded (offline record or older linerig)"),
            ("Operator", str(meta.get("operator") or "not recorded"))]


def method_statement(kind: str, extra: Sequence[str] = ()) -> list[Block]:
    return [Heading("Method statement"), Para(PRACTICE[kind]),
            Para("Where this report departs from that practice:"), Bullets((*DEVIATIONS[kind], *extra))]


def closing(rep: Report, flags_seen: set[str], cautions: str, refs: Sequence[str] = (), method: bool = False
            ) -> Report:
    """Flags in words, the uncertainty convention, method and references, cautions for the test, sign-off."""
    if flags_seen:
        rep.add(Heading("Quality flags"), Table(("flag", "what it means"), tuple(
            (fl, FLAGS.get(fl, "see the method notes")) for fl in sorted(flags_seen))))
    rep.add(Heading("Uncertainty"), Para(UNCERTAINTY_STATEMENT))
    if method:
        rep.add(Heading("Method"), Para(METHOD))
    rep.add(Heading("References"), Bullets((*REFERENCES, *refs) if method else tuple(refs) or REFERENCES, "small"),
            Heading("Cautions"), Bullets(CAUTIONS_BY_KIND[cautions], "caution"),
            Heading("Sign-off"), SignOff(statement=SIGN_OFF))
    return rep


def alpha_shown(r: SensorResult) -> float | None:
    """α in mm²/s, or None where the fit sits at a bound of its search (then it says nothing about the ground)."""
    from linerig.daemon.reduction.linesource import ALPHA_MAX, ALPHA_MIN

    a = r.alpha_m2_per_s
    if a is None or not math.isfinite(a) or a <= ALPHA_MIN * 1.001 or a >= ALPHA_MAX * 0.999:
        return None
    return a * 1e6


def calibration_blocks(status: CalibrationStatus | None, row: dict[str, Any] | None, factor_used: float | None
                       ) -> list[Any]:
    """Traceability: which calibration, against what reference, from which source, valid until when."""
    out: list[Any] = [Heading("Calibration")]
    if factor_used is not None:
        out.append(Para(f"Probe factor applied to the results: {factor_used:.4f}."))
    if row is None:
        out.append(Para("No accepted calibration was on record for this probe when the run was made: results are "
                        "as measured (factor 1) unless stated above.", "caution"))
        return out
    notes: dict[str, Any] = {}
    try:
        notes = json.loads(row.get("notes") or "{}")
    except (TypeError, ValueError):
        notes = {}
    ref_u, fu = notes.get("reference_k_u_W_per_mK"), row.get("factor_u")
    pairs = [
        ("Calibration id", str(row.get("id"))), ("Made", when(row.get("created_utc"))),
        ("Reference medium", str(row.get("reference") or "—")),
        (f"Reference k W/(m·K) {PM}", f"{f(row.get('reference_k_W_per_mK'), 5)} ± "
                                      f"{f(2 * ref_u if ref_u is not None else None, 2)}"),
        ("Source of the reference value", str(notes.get("reference_source") or "—")),
        ("Measured k W/(m·K)", f(row.get("measured_k_W_per_mK"), 5)),
        (f"Factor F {PM}", f"{f(row.get('factor'), 5)} ± {f(2 * fu if fu is not None else None, 2)}"),
        ("Calibration runs", ", ".join(str(x) for x in notes.get("run_ids", [])) or str(row.get("run_id") or "—")),
        ("Valid until", when(row.get("expires_utc"))),
    ]
    out.append(Table(("item", "value"), tuple(pairs)))
    if status is not None:
        out.append(Para(f"Status at the time of the run: {status.message}.",
                        "caution" if status.state in ("expired", "none") else "note"))
    return out


def is_field(meta: dict[str, Any]) -> bool:
    """A probe in the ground (a site or a depth recorded) rather than a specimen or a bath on the bench."""
    return bool(meta.get("site") or meta.get("depth_m") is not None or meta.get("kind") == "field")


def depth_text(meta: dict[str, Any], probe: ProbeProfile | None, sensor: str) -> str:
    d = meta.get("depth_m")
    if d is None:
        return "—"
    return f"{sensor_depth_m(float(d), probe, sensor):.2f}"


def _result_rows(red: RunReduction, meta: dict[str, Any], probe: ProbeProfile | None) -> tuple[tuple[str, ...], ...]:
    rows = []
    for name, r in red.sensors.items():
        j = r.to_json()
        a = alpha_shown(r)
        rows.append((
            name, depth_text(meta, probe, name), f(j["k_W_per_mK"]), f(j["k_U_W_per_mK"], 2),
            f(j["resistivity_Ccm_per_W"]), f(a, 3), f(j["rho_c_MJ_per_m3K"] if a is not None else None, 3),
            "—" if not r.window_s else f"{r.window_s[0]:.0f}–{r.window_s[1]:.0f}", f(r.stable_at_s),
            r.method, ", ".join(r.flags) or "none"))
    return tuple(rows)


def run_deviations(red: RunReduction | None, meta: dict[str, Any]) -> list[str]:
    out = []
    state = str(meta.get("state") or "")
    if state in ("aborted", "faulted"):
        out.append(f"This run was {'aborted' if state == 'aborted' else 'stopped by a safety limit'} "
                   f"({meta.get('end_reason') or 'no reason recorded'}): its result rests on a shortened record.")
    if red is not None:
        for name, r in red.sensors.items():
            if r.method != "line":
                out.append(f"Sensor {name}: the result comes from the {r.method} fit, not the late-time slope "
                           f"({r.method_reason}).")
    return out


def run_report(meta: dict[str, Any], data: RunData | None, red: RunReduction | None, probe: ProbeProfile | None,
               *, calibration: CalibrationStatus | None = None, calibration_row: dict[str, Any] | None = None,
               stored: dict[str, dict[str, Any]] | None = None, source: str = "") -> Report:
    """One run: identification, method, metadata, results with U and flags, plots, calibration, cautions."""
    rid = meta.get("id")
    field = is_field(meta)
    title = ("Thermal resistivity measurement" if field else "Thermal conductivity measurement") + (
        f" — run {rid}" if rid is not None else "")
    rep = Report(title, "Transient line-source (needle probe) test" + (" in the ground" if field else ""),
                 number=report_number("R", rid if rid is not None else "csv"), kind="field" if field else "lab")
    identification(rep, "needle probe, " + ("field" if field else "laboratory or bench"), source,
                   equipment_rows(meta, probe))
    rep.add(*method_statement("needle", run_deviations(red, meta)))
    rows = tuple((label, (f"{float(meta[key]):.3f}" if key == "depth_m" else
                          when(meta[key]) if key.endswith("_utc") else
                          f(meta[key]) if isinstance(meta.get(key), float) else str(meta[key])))
                 for key, label in META_FIELDS if meta.get(key) not in (None, ""))
    rep.add(Heading("Test"), Table(("item", "value"), rows or (("source", source or "—"),)))
    if probe is not None:
        rep.add(Para(f"Probe {probe.name} ({probe.serial or 'no serial'}): radius {probe.radius_mm:g} mm, heater "
                     f"length {f(probe.heater_length_mm)} mm, sensors "
                     + ", ".join(f"{s.name} at {s.radial_mm:g} mm from the axis"
                                 + (f", {s.axial_mm:g} mm from the tip" if s.axial_mm is not None else "")
                                 for s in probe.sensors) + ".", "note"))
    flags_seen: set[str] = set()
    if red is not None:
        for r in red.sensors.values():
            flags_seen.update(r.flags)
        rep.add(Heading("Results"), Table(
            ("sensor", "sensor depth m", "k W/(m·K)", "U (k = 2)", "ρ °C·cm/W", "α mm²/s", "ρc MJ/(m³·K)",
             "window s", "stable at s", "method", "flags"), _result_rows(red, meta, probe),
            "U is the expanded uncertainty of k, coverage factor k = 2 (about 95 %). Sensor depth = probe-tip depth "
            "minus the sensor's distance from the tip. α and ρc only where the record identifies them (a sensor at "
            "a known distance, or the probe model); none is shown where a fit stopped at a bound of its search."))
        for name, r in red.sensors.items():
            extra = [r.method_reason, *r.notes]
            j = r.to_json()
            alt = [f"{lbl} {f(j[key])}" for key, lbl in (("k_line_W_per_mK", "late-time line"),
                                                         ("k_model_W_per_mK", "probe model"),
                                                         ("k_recovery_W_per_mK", "cooling"),
                                                         ("k_joint_W_per_mK", "heating+cooling")) if j.get(key)]
            if alt:
                extra.append("k by each method (W/(m·K)): " + "; ".join(alt)
                             + f"; the reported value is the {r.method} result")
            if r.u_budget_rel:
                extra.append("uncertainty budget (relative, standard u before k = 2): " + "; ".join(
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
                rep.add(Para("The stored result differs from this offline reduction by more than 0.5 % ("
                             + "; ".join(diffs) + "); the table shows the offline reduction.", "caution"))
        if data is not None:
            rep.add(Heading("Plots"))
            for name, r in red.sensors.items():
                if r.line is not None or r.model is not None:
                    win = f", window {r.window_s[0]:.0f}–{r.window_s[1]:.0f} s" if r.window_s else ""
                    rep.add(Figure(plots.svg_bytes(plots.heating_fit(data, r, probe)),
                                   f"{name}: temperature rise against ln t with the fit behind the reported result "
                                   f"({r.method}{win}, k = {f(r.k_W_per_mK)} W/(m·K)): solid in the window, dashed "
                                   "outside; residuals in the window below."))
                fig = plots.estimate_history(data, r, probe)
                if fig is not None:
                    rep.add(Figure(plots.svg_bytes(fig), f"{name}: the live estimate against time (the live rule "
                                   "replayed; its window follows the data as they come) with ± U (k = 2). The "
                                   "reported result is the final reduction above, drawn dashed."))
                fig = plots.cooling(data, r)
                if fig is not None:
                    rep.add(Figure(plots.svg_bytes(fig), f"{name}: recovery after the heater went off."))
    elif stored:
        rep.add(Heading("Results (as stored)"), Table(
            ("sensor", "sensor depth m", "k W/(m·K)", "U (k = 2)", "ρ °C·cm/W", "method", "flags"),
            tuple((n, depth_text(meta, probe, n), f(s.get("k_W_per_mK")),
                   f(2 * s["k_u_W_per_mK"] if s.get("k_u_W_per_mK") is not None else None, 2),
                   f(100 / s["k_W_per_mK"] if s.get("k_W_per_mK") else None), str(s.get("method") or "—"),
                   ", ".join(s.get("flags") or []) or "none") for n, s in stored.items())))
        for s in stored.values():
            flags_seen.update(s.get("flags") or [])
    rep.add(*calibration_blocks(calibration, calibration_row, _factor(red, stored)))
    events = meta.get("events") or []
    if events:
        rep.add(Heading("Events"), Table(("device time s", "kind", "state", "reason"), tuple(
            (f(e.get("device_s"), 6), str(e.get("kind") or ""), str(e.get("state") or ""), str(e.get("reason") or ""))
            for e in events)))
    return closing(rep, flags_seen, "field" if field else "lab", method=True)


def _factor(red: RunReduction | None, stored: dict[str, dict[str, Any]] | None) -> float | None:
    if red is not None and red.sensors:
        return next(iter(red.sensors.values())).calibration_factor
    if stored:
        v = next(iter(stored.values())).get("calibration_factor")
        return float(v) if v else None
    return None


def site_report(site: str, runs: Sequence[dict[str, Any]], points: Sequence[ProfilePoint],
                calibrations: Sequence[dict[str, Any]], borehole: str | None = None,
                run_figures: dict[str, bytes] | None = None, probes: dict[str, ProbeProfile] | None = None
                ) -> Report:
    """A site (or one borehole): every run's result, depth profiles with plots, calibrations used, cautions."""
    what = f"{site}, borehole {borehole}" if borehole else site
    rep = Report(f"Thermal resistivity survey — {what}", "Transient line-source (needle probe) tests in the ground",
                 number=report_number("S", site + (borehole or "")), kind="field")
    operators = sorted({str(r.get("operator")) for r in runs if r.get("operator")})
    fronts = sorted({" ".join(str(r[k]) for k in ("frontend_serial", "frontend_firmware") if r.get(k))
                     for r in runs if r.get("frontend_serial")})
    identification(rep, "needle probe survey, field", "", (
        ("Site", site), ("Runs", str(len(runs))), ("Operators", ", ".join(operators) or "not recorded"),
        ("Front ends (serial firmware)", "; ".join(fronts) or "not recorded")))
    rep.add(*method_statement("needle", [d for r in runs for d in run_deviations(None, r)]))
    flags_seen: set[str] = set()
    rows = []
    probes = probes or {}
    for r in runs:
        probe = probes.get(str(r.get("probe_serial") or ""))
        for sensor, res in (r.get("results") or {}).items():
            flags_seen.update(res.get("flags") or [])
            k = res.get("k_W_per_mK")
            rows.append((row_label(r), when(r.get("created_utc")), str(r.get("location") or "—"),
                         depth_text(r, probe, sensor), str(r.get("probe_serial") or "—"), sensor, f(k),
                         f(2 * res["k_u_W_per_mK"] if res.get("k_u_W_per_mK") else None, 2),
                         f(100 / k if k else None), ", ".join(res.get("flags") or []) or "none"))
        if not r.get("results"):
            rows.append((row_label(r), when(r.get("created_utc")), str(r.get("location") or "—"),
                         f(r.get("depth_m"), 3), str(r.get("probe_serial") or "—"), "—", "—", "—", "—",
                         f"no result ({r.get('state') or '?'})"))
    rep.add(Heading("Runs"), Table(("run", "started", "borehole", "sensor depth m", "probe", "sensor", "k W/(m·K)",
                                    "U (k = 2)", "ρ °C·cm/W", "flags"), tuple(rows),
                                   "Sensor depth = probe-tip depth minus the sensor's distance from the tip."))
    groups = group_profiles(points)
    if groups:
        rep.add(Heading("Depth profiles"),
                Figure(plots.svg_bytes(plots.depth_profile(groups, f"Thermal resistivity against depth — {what}")),
                       "Resistivity against sensor depth below ground, per borehole, with ± U (k = 2) error bars. "
                       "A rod's sensors are placed at their distance from the tip; repeated insertions at the depth "
                       "of each run."))
        for (_s, bh), pts in groups.items():
            summ = summarise_depths(list(pts))
            rep.add(Heading(f"Borehole {bh}", 3), Table(
                ("sensor depth m", "readings", "mean ρ °C·cm/W", "spread (SD)", "highest ρ °C·cm/W"),
                tuple((f"{d.depth_m:.2f}", str(d.n), f(100 * d.resistivity_mK_per_W), f(100 * d.spread_mK_per_W, 2),
                       f(100 * d.worst_mK_per_W)) for d in summ),
                "Readings within 5 cm of depth pooled. The highest value at a depth is the thermally worst case."))
            for p in pts:
                flags_seen.update(p.flags)
    if run_figures:
        rep.add(Heading("Run plots"))
        for rid, svg in run_figures.items():
            rep.add(Figure(svg, f"Run {rid}: rise against ln t with the fit behind the reported result, and "
                                "residuals."))
    rep.add(Heading("Calibrations of the probes used"))
    if calibrations:
        rep.add(Table(("probe", "id", "made", "reference", "factor F", "U (k = 2)", "accepted", "valid until"), tuple(
            (str(c.get("probe_serial")), row_label(c), when(c.get("created_utc")),
             str(c.get("reference") or ""), f(c.get("factor"), 5),
             f(2 * c["factor_u"] if c.get("factor_u") is not None else None, 2),
             "yes" if c.get("accepted") else "no", when(c.get("expires_utc"))) for c in calibrations)))
    else:
        rep.add(Para("No calibration is on record for these probes: results are as measured.", "caution"))
    return closing(rep, flags_seen, "field", method=True)


def workflow_report(title: str, subtitle: str, kind: str, code: str, subject: Any, source: str,
                    rows: Sequence[tuple[str, str]] = (), deviations: Sequence[str] = ()) -> Report:
    """The opening of a workflow report (cycles, calibration, dry-out, cylinder): identification and method."""
    rep = Report(title, subtitle, number=report_number(code, subject), kind=kind)
    identification(rep, subtitle, source, rows)
    rep.add(*method_statement(kind, deviations))
    return rep


def workflow_tail(rep: Report, kind: str, flags: set[str] | None = None, cautions: str | None = None) -> Report:
    return closing(rep, flags or set(), cautions or kind, WORKFLOW_REFERENCES.get(kind, ()),
                   method=kind in ("cycles", "calibration"))
