"""``linerig calibrate``: a probe factor from runs in a reference medium, judged, stored and traced.

    linerig calibrate --probe SERIAL --reference water --run RUN_ID [--run RUN_ID ...] [--bath-C T]
    linerig calibrate --probe SERIAL --reference glycerol --csv FILE.csv [--probe-profile PROFILE.toml]
    linerig calibrate --probe SERIAL --history
    linerig calibrate --probe SERIAL --spacing SENSOR --reference agar-water --run RUN_ID [--run ...] [--bath-C T]

The runs are reduced without any factor (the factor must come from the raw probe reading). The bath
temperature defaults to the mean baseline temperature of the runs. Every calibration is stored, rejected ones
too, so the history shows a probe's whole life; only accepted ones are applied to later runs.

With ``--spacing`` each pulse is fitted for the dual needle's spacing with the medium's ρc held at its IAPWS-95
value (``workflows.spacing``); the mean of the pulses is judged and stored the same way, and an accepted one is
applied to the probe's later runs by the daemon and by every re-reduction from the store.
"""

from __future__ import annotations

import argparse
import json
import math
from pathlib import Path

import numpy as np
import sqlite_utils

from linerig.daemon.probe import ProbeProfile, ProbeProfileError, load_probe_profile
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.data import ReductionError, RunData
from linerig.daemon.reduction.pulse import PulseFitError
from linerig.daemon.report.cli import add_db_option, db_path, fail, write_report
from linerig.daemon.report.model import Report
from linerig.daemon.report.sources import (
    SourceError,
    calibration_history,
    load_run,
    open_db,
    probe_profiles,
    record_calibration,
)
from linerig.daemon.runcsv import RunCsvError, read_run_csv
from linerig.daemon.store.spacings import TABLE, record_spacing, spacing_at, spacing_history
from linerig.daemon.workflows.calibration import (
    FACTOR_LIMITS,
    MAX_FACTOR_U_REL,
    MAX_REPEAT_CV,
    MEDIA,
    VALID_DAYS,
    CalibrationError,
    CalibrationOutcome,
    Measurement,
    calibration_status,
    evaluate_calibration,
    reference_value,
)
from linerig.daemon.workflows.spacing import (
    SPACING_MEDIA,
    SpacingOutcome,
    SpacingPulse,
    baseline_temperature_C,
    evaluate_spacing,
    heat_capacity_reference,
    measure_spacing,
)

CMD = "calibrate"


def add_parser(subparsers: argparse._SubParsersAction) -> None:  # type: ignore[type-arg]
    p = subparsers.add_parser(CMD, help="probe factor from runs in a reference medium; calibration history",
                              description="Calibrate a probe against a reference medium of known conductivity "
                                          f"({', '.join(MEDIA)}). Acceptance: factor within {FACTOR_LIMITS[0]:.2f}–"
                                          f"{FACTOR_LIMITS[1]:.2f}, u(F)/F ≤ {100 * MAX_FACTOR_U_REL:.0f} %, repeat "
                                          f"runs within {100 * MAX_REPEAT_CV:.1f} %; valid {VALID_DAYS} days.")
    p.add_argument("--probe", metavar="SERIAL", help="probe serial number (needed except with --media)")
    p.add_argument("--reference", choices=tuple(MEDIA), help="reference medium")
    p.add_argument("--run", type=int, action="append", default=[], metavar="RUN_ID",
                   help="a run in the reference medium (repeat the option for several)")
    p.add_argument("--csv", type=Path, action="append", default=[], metavar="FILE.csv",
                   help="a run CSV in the reference medium (repeatable)")
    p.add_argument("--probe-profile", type=Path, metavar="PROFILE.toml",
                   help="probe profile for CSV runs (default: the one stored with the probe)")
    p.add_argument("--bath-C", type=float, metavar="T", help="bath temperature (default: mean baseline of the runs)")
    p.add_argument("--sensor", default=None, help="sensor to calibrate (default: the first on the heater)")
    p.add_argument("--spacing", metavar="SENSOR",
                   help="calibrate the spacing of this radial sensor from heat pulses in water or agar-gelled water "
                        "(ρc known from IAPWS-95) instead of the probe factor")
    add_db_option(p)
    p.add_argument("--dry-run", action="store_true", help="evaluate but do not store")
    p.add_argument("--history", action="store_true", help="show the probe's calibrations and exit")
    p.add_argument("--media", action="store_true", help="list the reference media with their sources and exit")
    p.add_argument("--report", type=Path, metavar="FILE.html|FILE.pdf", help="write a calibration report")
    p.add_argument("--json", action="store_true")
    p.set_defaults(func=run)


def _raw_measurement(data: RunData, probe: object, sensor: str | None, run_id: int | None) -> tuple[Measurement,
                                                                                                   float | None]:
    red = reduce_run(data, probe, calibration_factor=1.0)  # type: ignore[arg-type]
    name = sensor or next(iter(red.sensors))
    if name not in red.sensors:
        raise ReductionError(f"no sensor {name!r} in the run (it has: {', '.join(red.sensors)})")
    r = red.sensors[name]
    if not r.k_W_per_mK:
        raise ReductionError(f"run {run_id or ''}: sensor {name} gave no conductivity ({', '.join(r.flags)})")
    k_u = r.k_u_W_per_mK or 0.0
    base = data.temps_C[name][data.time_s < 0]
    return Measurement(r.k_W_per_mK, k_u, run_id, tuple(r.flags)), (float(np.mean(base)) if base.size else None)


def _print_history(serial: str, hist: list[dict[str, object]]) -> None:
    from linerig.tui.tables import print_table

    st = calibration_status(hist)
    print(f"probe {serial}: {st.message}")
    if not hist:
        return
    print_table(f"Calibrations of probe {serial}", ("id", "made", "reference", "factor F", "U (k = 2)", "accepted",
                                                     "valid until"),
                [(str(c["id"]), str(c["created_utc"])[:10], str(c["reference"]), f"{float(c['factor']):.4f}",  # type: ignore[arg-type]
                  f"{2 * float(c['factor_u'] or 0):.4f}", "yes" if c["accepted"] else "no",  # type: ignore[arg-type]
                  str(c.get("expires_utc") or "")[:10]) for c in hist], right=(0, 3, 4))


def run(args: argparse.Namespace) -> int:
    if args.media:
        for m in MEDIA.values():
            print(f"{m.name}: {m.description}; {m.valid_C[0]:g}–{m.valid_C[1]:g} °C\n  source: {m.source}")
            for n in m.notes:
                print(f"  note: {n}")
        return 0
    if not args.probe:
        return fail(CMD, "give --probe SERIAL (the probe being calibrated; `linerig probes` lists them)")
    try:
        db = open_db(db_path(args), write=not (args.history or args.dry_run))
    except SourceError as e:
        return fail(CMD, str(e))
    hist = calibration_history(db, args.probe)
    if args.history:
        spacings = spacing_history(db, args.probe)
        if args.json:
            print(json.dumps({"factor": hist, "spacing": spacings} if spacings else hist, indent=2))
        else:
            _print_history(args.probe, hist)
            _print_spacing_history(args.probe, spacings)
        return 0
    if args.spacing:
        if not args.reference:
            return fail(CMD, "give --reference agar-water (or water): the spacing needs a medium of known ρc")
        return _run_spacing(args, db)
    if not args.reference:
        return fail(CMD, f"give --reference ({', '.join(MEDIA)})")
    if not args.run and not args.csv:
        return fail(CMD, "give at least one --run RUN_ID or --csv FILE.csv recorded in the reference medium")
    twice = sorted({str(x) for x in args.run if args.run.count(x) > 1}
                   | {str(x) for x in args.csv if [c.resolve() for c in args.csv].count(x.resolve()) > 1})
    if twice:
        return fail(CMD, f"{', '.join(twice)} given more than once: each repeat must be its own insertion")
    meas: list[Measurement] = []
    bases: list[float] = []
    try:
        for rid in args.run:
            rec = load_run(db, rid)
            if rec.data is None:
                return fail(CMD, f"run {rid} has no samples")
            if rec.detail.get("probe_serial") and rec.detail["probe_serial"] != args.probe:
                return fail(CMD, f"run {rid} was made with probe {rec.detail['probe_serial']}, not {args.probe}")
            m, b = _raw_measurement(rec.data, rec.probe, args.sensor, rid)
            meas.append(m)
            if b is not None:
                bases.append(b)
        if args.csv:
            probe = load_probe_profile(args.probe_profile) if args.probe_profile else None
            if probe is None:
                from linerig.daemon.report.sources import probe_profiles

                probe = probe_profiles(db).get(args.probe)
            if probe is None:
                return fail(CMD, f"no profile stored for probe {args.probe}: give --probe-profile PROFILE.toml, so "
                                 "the factor comes from the same reduction as the probe's own runs")
            for path in args.csv:
                m, b = _raw_measurement(read_run_csv(path), probe, args.sensor, None)
                meas.append(m)
                if b is not None:
                    bases.append(b)
        bath = args.bath_C if args.bath_C is not None else (float(np.mean(bases)) if bases else None)
        ref = reference_value(args.reference, bath)
        prev = calibration_status(hist)
        out = evaluate_calibration(args.probe, ref, meas, previous_factor=prev.factor)
    except (SourceError, RunCsvError, ReductionError, ProbeProfileError, CalibrationError) as e:
        return fail(CMD, str(e))
    cal_id = None
    if not args.dry_run:
        cal_id = record_calibration(db, out, {"bath_C": bath, "csv": [str(p) for p in args.csv],
                                              "bath_from": "option" if args.bath_C is not None else "baseline"})
    if args.json:
        print(json.dumps({"id": cal_id, **out.to_dict()}, indent=2,
                         default=lambda o: None if isinstance(o, float) and not math.isfinite(o) else str(o)))
    else:
        from linerig.tui.tables import print_table

        print(f"probe {args.probe} in {ref.label}: reference k = {ref.k_W_per_mK:.4f} ± {2 * ref.k_u_W_per_mK:.4f} "
              f"W/(m·K) (± U, k = 2)\n  source: {ref.source}")
        print_table("Runs in the reference medium (raw, no factor)", ("run", "k W/(m·K)", "U (k = 2)", "flags"),
                    [(str(m.run_id if m.run_id is not None else "csv"), f"{m.k_W_per_mK:.4f}",
                      f"{2 * m.k_u_W_per_mK:.4f}", ", ".join(m.flags) or "none") for m in meas], right=(1, 2))
        cv = f", repeat spread {100 * out.repeat_cv:.2f} %" if out.repeat_cv is not None else ""
        print(f"measured k = {out.measured_k_W_per_mK:.4f} ± {2 * out.measured_k_u_W_per_mK:.4f} W/(m·K) "
              f"(± U, k = 2; {out.n_runs} run(s){cv})")
        print(f"factor F = {out.factor:.4f} ± {2 * out.factor_u:.4f} (± U, k = 2; standard u = {out.factor_u:.4f})")
        print(("ACCEPTED" if out.accepted else "NOT ACCEPTED") + (f" — stored as calibration {cal_id}" if cal_id
                                                                   else " — not stored (--dry-run)"))
        for r in out.reasons:
            print(f"  reason: {r}")
        for w in out.warnings:
            print(f"  warning: {w}")
        if out.accepted:
            print(f"valid until {out.expires_utc[:10]}; recalibrate before then (12-month interval, common "
                  "practice)")
    if args.report:
        try:
            write_report(_report(out, meas, cal_id, bath, args, db), args.report)
        except (ValueError, OSError) as e:
            return fail(CMD, str(e))
        print(f"report written to {args.report}")
    return 0 if out.accepted else 1


def _report(out: CalibrationOutcome, meas: list[Measurement], cal_id: int | None, bath: float | None,
            args: argparse.Namespace, db: object) -> Report:
    """The calibration as a report: reference, runs, factor ± U, acceptance, validity."""
    from linerig.daemon.report.build import equipment_rows, f, when, workflow_report, workflow_tail
    from linerig.daemon.report.model import Bullets, Heading, Para, Table

    meta: dict[str, object] = {"probe_serial": out.probe_serial}
    probe = None
    if args.run:
        rec = load_run(db, args.run[0])  # type: ignore[arg-type]
        meta, probe = rec.detail, rec.probe
    ref = out.reference
    rep = workflow_report(f"Probe calibration — {out.probe_serial} in {ref.medium}",
                          "Probe factor from runs in a reference medium", "calibration", "K",
                          f"{out.probe_serial}{cal_id or ''}", str(db_path(args)),
                          (("Calibration id", str(cal_id) if cal_id else "not stored (--dry-run)"),
                           *equipment_rows(meta, probe)))
    rep.add(Heading("Reference"), Table(("item", "value"), (
        ("Medium", ref.label),
        ("Reference k W/(m·K) ± U (k = 2)", f"{ref.k_W_per_mK:.5f} ± {2 * ref.k_u_W_per_mK:.4f}"),
        ("Bath temperature", f"{bath:.2f} °C ({'given' if args.bath_C is not None else 'mean baseline of the runs'})"
         if bath is not None else "not known"),
        ("Source of the reference value", ref.source))))
    rep.add(Heading("Runs"), Table(("run", "k W/(m·K) (raw)", "U (k = 2)", "flags"), tuple(
        (str(m.run_id if m.run_id is not None else "csv"), f(m.k_W_per_mK, 5), f(2 * m.k_u_W_per_mK, 2),
         ", ".join(m.flags) or "none") for m in meas),
        "Raw: reduced without any factor, as the factor must come from the probe's own reading."))
    rep.add(Heading("Result"), Table(("item", "value"), (
        ("Measured k W/(m·K) ± U (k = 2)", f"{out.measured_k_W_per_mK:.5f} ± {2 * out.measured_k_u_W_per_mK:.4f}"),
        ("Repeat spread (CV)", f"{100 * out.repeat_cv:.2f} %" if out.repeat_cv is not None else "one run"),
        ("Factor F = k_reference / k_measured ± U (k = 2)", f"{out.factor:.5f} ± {2 * out.factor_u:.4f}"),
        ("Accepted", "yes" if out.accepted else "no"), ("Made", when(out.created_utc)),
        ("Valid until", when(out.expires_utc) if out.accepted else "—"))))
    limits = (f"Acceptance: F within {FACTOR_LIMITS[0]:.2f}–{FACTOR_LIMITS[1]:.2f} and u(F)/F ≤ "
              f"{100 * MAX_FACTOR_U_REL:.0f} % (common practice, no source); repeat runs within "
              f"{100 * MAX_REPEAT_CV:.1f} % (Manohar, Yarbrough & Booth 2000); valid {VALID_DAYS} days (common "
              "practice, no source).")
    rep.add(Para(limits, "note"))
    if out.reasons or out.warnings:
        rep.add(Bullets(tuple([f"reason: {r}" for r in out.reasons] + [f"warning: {w}" for w in out.warnings]),
                        "caution"))
    return workflow_tail(rep, "calibration", {fl for m in meas for fl in m.flags})


# --- the spacing of a dual needle (--spacing) ----------------------------------------------------------------
def _run_spacing(args: argparse.Namespace, db: sqlite_utils.Database) -> int:
    """The spacing calibration; ``args`` as parsed by ``linerig calibrate``."""
    sensor = args.spacing
    if not args.dry_run and TABLE not in db.table_names():
        return fail(CMD, f"{db.conn.execute('PRAGMA database_list').fetchone()[2]} has no spacing table: start "
                         "linerigd once to bring the schema up to date")
    if args.reference not in SPACING_MEDIA:
        return fail(CMD, f"--spacing needs a reference of known ρc: --reference {' or '.join(SPACING_MEDIA)}")
    if not args.run and not args.csv:
        return fail(CMD, "give at least one --run RUN_ID or --csv FILE.csv of a pulse in the reference medium")
    loaded: list[tuple[RunData, ProbeProfile, int | None, tuple[str, ...]]] = []
    try:
        for rid in args.run:
            rec = load_run(db, rid)
            if rec.data is None:
                return fail(CMD, f"run {rid} has no samples")
            if rec.detail.get("probe_serial") and rec.detail["probe_serial"] != args.probe:
                return fail(CMD, f"run {rid} was made with probe {rec.detail['probe_serial']}, not {args.probe}")
            if rec.probe is None:
                return fail(CMD, f"run {rid}: no profile stored for probe {args.probe}")
            stored = rec.stored_results.get(sensor) or {}
            loaded.append((rec.data, rec.probe, rid, tuple(f for f in stored.get("flags") or []
                                                              if f in ("not_settled", "noise_high"))))
        if args.csv:
            probe = load_probe_profile(args.probe_profile) if args.probe_profile else probe_profiles(db).get(
                args.probe)
            if probe is None:
                return fail(CMD, f"no profile stored for probe {args.probe}: give --probe-profile PROFILE.toml")
            loaded += [(read_run_csv(path), probe, None, ()) for path in args.csv]
        probe0 = loaded[0][1]
        if not probe0.has_sensor(sensor) or probe0.sensor(sensor).is_on_heater:
            radial = [s.name for s in probe0.sensors if not s.is_on_heater]
            return fail(CMD, f"--spacing {sensor}: not a radial sensor of probe {probe0.name!r} (radial sensors: "
                             f"{', '.join(radial) or 'none'})")
        baths = [b for b in (baseline_temperature_C(d, sensor) for d, *_ in loaded) if b is not None]
        bath = args.bath_C if args.bath_C is not None else (float(np.mean(baths)) if baths else None)
        ref = heat_capacity_reference(args.reference, bath)
        pulses = [measure_spacing(d, p, sensor, ref, rid, flags) for d, p, rid, flags in loaded]
        hist = spacing_history(db, args.probe)
        prev = spacing_at(hist, sensor, None)
        out = evaluate_spacing(args.probe, sensor, probe0.sensor(sensor).radial_m, ref, pulses,
                               previous_m=prev.spacing_m)
    except (SourceError, RunCsvError, ReductionError, ProbeProfileError, CalibrationError, PulseFitError) as e:
        return fail(CMD, str(e))
    cal_id = None
    if not args.dry_run:
        cal_id = record_spacing(db, out, {"bath_C": bath, "csv": [str(p) for p in args.csv],
                                          "bath_from": "option" if args.bath_C is not None else "baseline",
                                          "per_run_mm": [p.spacing_m * 1e3 for p in pulses]})
    _report_spacing(out, pulses, cal_id, args.json)
    return 0 if out.accepted else 1


def _report_spacing(out: SpacingOutcome, pulses: list[SpacingPulse], cal_id: int | None, as_json: bool) -> None:
    if as_json:
        print(json.dumps({"id": cal_id, **out.to_dict()}, indent=2,
                         default=lambda o: None if isinstance(o, float) and not math.isfinite(o) else str(o)))
        return
    ref = out.reference
    print(f"probe {out.probe_serial}, sensor {out.sensor}, in {ref.label}: reference ρc = "
          f"{ref.rho_c_J_per_m3K / 1e6:.4f} ± {ref.rho_c_u_J_per_m3K / 1e6:.4f} MJ/(m³·K) (u)\n  source: {ref.source}")
    for p in pulses:
        print(f"  run {p.run_id if p.run_id is not None else 'csv'}: spacing {p.spacing_m * 1e3:.4f} ± "
              f"{p.spacing_u_m * 1e3:.4f} mm  {', '.join(p.flags)}")
    cv = f", repeat spread {100 * out.repeat_cv:.2f} %" if out.repeat_cv is not None else ""
    print(f"effective spacing {out.spacing_m * 1e3:.4f} ± {out.spacing_u_m * 1e3:.4f} mm (u; nominal "
          f"{out.nominal_m * 1e3:.4g} mm; {out.n_runs} pulse(s){cv})")
    print(("ACCEPTED" if out.accepted else "NOT ACCEPTED") + (f" — stored as spacing calibration {cal_id}" if cal_id
                                                               else " — not stored (--dry-run)"))
    for r in out.reasons:
        print(f"  reason: {r}")
    for w in out.warnings:
        print(f"  warning: {w}")
    if out.accepted:
        print(f"applied to this probe's later runs (daemon and re-reductions); offline: linerig reduce ... --spacing "
              f"{out.sensor}={out.spacing_m * 1e3:.4f} --spacing-u {out.sensor}={out.spacing_u_m * 1e3:.4f}")


def _print_spacing_history(serial: str, hist: list[dict[str, object]]) -> None:
    if not hist:
        return
    sensors = sorted({str(h.get("sensor")) for h in hist})
    for s in sensors:
        print(spacing_at(hist, s, None).message)
    print(f"{'id':>4}  {'made':<10}  {'sensor':<8}  {'reference':<26}  {'spacing mm':>10}  {'u mm':>6}  {'ok':<3}  "
          "valid until")
    for c in hist:
        print(f"{c['id']:>4}  {str(c['created_utc'])[:10]:<10}  {str(c['sensor'])[:8]:<8}  "
              f"{str(c['reference'])[:26]:<26}  {float(c['spacing_m']) * 1e3:>10.4f}  "  # type: ignore[arg-type]
              f"{float(c['spacing_u_m'] or 0) * 1e3:>6.4f}  {'yes' if c['accepted'] else 'no':<3}  "  # type: ignore[arg-type]
              f"{str(c.get('expires_utc') or '')[:10]}")
