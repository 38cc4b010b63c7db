"""``linerig calibrate``: a probe factor from runs in a reference medium, judged, stored and traced.

    linerig calibrate --probe SERIAL --reference water --run RUN_ID [--run RUN_ID ...] [--bath-C T]
    linerig calibrate --probe SERIAL --reference glycerol --csv FILE.csv [--probe-profile PROFILE.toml]
    linerig calibrate --probe SERIAL --history
    linerig calibrate --probe SERIAL --spacing SENSOR --reference agar-water --run RUN_ID   (calibrate_spacing.py)

The runs are reduced without any factor (the factor must come from the raw probe reading). The bath
temperature defaults to the mean baseline temperature of the runs. Every calibration is stored, rejected ones
too, so the history shows a probe's whole life; only accepted ones are applied to later runs.
"""

from __future__ import annotations

import argparse
import json
import math
from pathlib import Path

import numpy as np

from linerig.daemon.probe import ProbeProfileError, load_probe_profile
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.data import ReductionError, RunData
from linerig.daemon.report.cli import add_db_option, db_path, fail
from linerig.daemon.report.sources import SourceError, calibration_history, load_run, open_db, record_calibration
from linerig.daemon.runcsv import RunCsvError, read_run_csv
from linerig.daemon.store.spacings import spacing_history
from linerig.daemon.workflows.calibration import (
    FACTOR_LIMITS,
    MAX_FACTOR_U_REL,
    MAX_REPEAT_CV,
    MEDIA,
    VALID_DAYS,
    CalibrationError,
    Measurement,
    calibration_status,
    evaluate_calibration,
    reference_value,
)
from linerig.tui.commands.calibrate_spacing import print_history as print_spacing_history
from linerig.tui.commands.calibrate_spacing import run_spacing

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
    st = calibration_status(hist)
    print(f"probe {serial}: {st.message}")
    if not hist:
        return
    print(f"{'id':>4}  {'made':<10}  {'reference':<26}  {'factor':>7}  {'u':>6}  {'ok':<3}  valid until")
    for c in hist:
        print(f"{c['id']:>4}  {str(c['created_utc'])[:10]:<10}  {str(c['reference'])[:26]:<26}  "
              f"{float(c['factor']):>7.4f}  {float(c['factor_u'] or 0):>6.4f}  "  # type: ignore[arg-type]
              f"{'yes' if c['accepted'] else 'no':<3}  {str(c.get('expires_utc') or '')[:10]}")


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
            print_spacing_history(args.probe, spacings)
        return 0
    if args.spacing:
        if not args.reference:
            return fail(CMD, "give --reference agar-water (or water): the spacing needs a medium of known ρc")
        return run_spacing(args, db)
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
        print(f"probe {args.probe} in {ref.label}: reference k = {ref.k_W_per_mK:.4f} ± {ref.k_u_W_per_mK:.4f} "
              f"W/(m·K) (u)\n  source: {ref.source}")
        for m in meas:
            print(f"  run {m.run_id if m.run_id is not None else 'csv'}: k = {m.k_W_per_mK:.4f} ± "
                  f"{m.k_u_W_per_mK:.4f}  {', '.join(m.flags)}")
        cv = f", repeat spread {100 * out.repeat_cv:.2f} %" if out.repeat_cv is not None else ""
        print(f"measured k = {out.measured_k_W_per_mK:.4f} ± {out.measured_k_u_W_per_mK:.4f} ({out.n_runs} run(s)"
              f"{cv})")
        print(f"factor F = {out.factor:.4f} ± {out.factor_u:.4f} (u; U = {2 * out.factor_u:.4f} at k = 2)")
        print(("ACCEPTED" if out.accepted else "NOT ACCEPTED") + (f" — stored as calibration {cal_id}" if cal_id
                                                                   else " — not stored (--dry-run)"))
        for r in out.reasons:
            print(f"  reason: {r}")
        for w in out.warnings:
            print(f"  warning: {w}")
        if out.accepted:
            print(f"valid until {out.expires_utc[:10]}; recalibrate before then (12-month interval, common "
                  "practice)")
    return 0 if out.accepted else 1
