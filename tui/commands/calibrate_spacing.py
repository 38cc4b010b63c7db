"""``linerig calibrate --spacing SENSOR``: a dual needle's effective spacing from pulses in gelled water.

    linerig calibrate --probe SERIAL --spacing needle8 --reference agar-water --run RUN_ID [--run ...] [--bath-C T]
    linerig calibrate --probe SERIAL --spacing needle8 --reference agar-water --csv FILE.csv [--probe-profile P]

Each pulse is fitted for the spacing with the medium's ρc held at its IAPWS-95 value (``workflows.spacing``); the
mean of the pulses is judged, stored (accepted or not) and, when accepted, applied to the probe's later runs by
the daemon and by every re-reduction from the store. Exit codes as ``linerig calibrate``.
"""

from __future__ import annotations

import argparse
import json
import math

import numpy as np
import sqlite_utils

from linerig.daemon.probe import ProbeProfile, ProbeProfileError, load_probe_profile
from linerig.daemon.reduction.data import ReductionError, RunData
from linerig.daemon.reduction.live import DEFAULT_POWER_U_REL
from linerig.daemon.reduction.methods.pulse import spacing_fit
from linerig.daemon.reduction.pulse import PulseFitError
from linerig.daemon.reduction.record import HeatingRecord, SensorRecord
from linerig.daemon.report.cli import fail
from linerig.daemon.report.sources import SourceError, load_run, probe_profiles
from linerig.daemon.runcsv import RunCsvError, read_run_csv
from linerig.daemon.store.spacings import TABLE, record_spacing, spacing_at, spacing_history
from linerig.daemon.workflows.calibration import CalibrationError
from linerig.daemon.workflows.spacing import (
    SPACING_MEDIA,
    SpacingOutcome,
    SpacingPulse,
    evaluate_spacing,
    heat_capacity_reference,
)

CMD = "calibrate"


def print_history(serial: str, hist: list[dict[str, object]]) -> None:
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


def _pulse(data: RunData, probe: ProbeProfile, sensor: str, rho_c: float, rho_c_u_rel: float,
           run_id: int | None, flags: tuple[str, ...]) -> SpacingPulse:
    rec = SensorRecord.of(data, HeatingRecord.of(data), sensor, probe)
    fit = spacing_fit(rec, rho_c, rho_c_u_rel, DEFAULT_POWER_U_REL)
    return SpacingPulse(fit.spacing_m, fit.spacing_u_m, run_id, tuple(sorted({*fit.flags, *flags})))


def _bath_C(data: RunData, sensor: str) -> float | None:
    base = data.temps_C[sensor][data.time_s < 0] if sensor in data.temps_C else np.zeros(0)
    return float(np.mean(base)) if base.size else None


def run_spacing(args: argparse.Namespace, db: sqlite_utils.Database) -> int:
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
        baths = [b for b in (_bath_C(d, sensor) for d, *_ in loaded) if b is not None]
        bath = args.bath_C if args.bath_C is not None else (float(np.mean(baths)) if baths else None)
        ref = heat_capacity_reference(args.reference, bath)
        u_rel = ref.rho_c_u_J_per_m3K / ref.rho_c_J_per_m3K
        pulses = [_pulse(d, p, sensor, ref.rho_c_J_per_m3K, u_rel, rid, flags) for d, p, rid, flags in loaded]
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
    _report(out, pulses, cal_id, args.json)
    return 0 if out.accepted else 1


def _report(out: SpacingOutcome, pulses: list[SpacingPulse], cal_id: int | None, as_json: bool) -> None:
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
