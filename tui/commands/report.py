"""``linerig report``: a self-contained HTML or PDF report of a run (from the database or a run CSV) or of a site.

The run is reduced again from its samples with the same code as the daemon, so the plots show exactly the fit
behind the numbers; the calibration current when the run was made is applied and traced.
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path

from linerig.daemon.probe import ProbeProfileError
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.data import ReductionError
from linerig.daemon.report import plots
from linerig.daemon.report.build import run_report, site_report
from linerig.daemon.report.cli import add_db_option, db_path, fail, write_report
from linerig.daemon.report.model import Para
from linerig.daemon.report.sources import (
    RunRecord,
    SourceError,
    calibration_history,
    cycle_data,
    list_sites,
    load_run,
    open_db,
    probe_profiles,
    reduce_record,
    site_runs,
)
from linerig.daemon.runcsv import RunCsvError, read_run_csv
from linerig.daemon.workflows.profiles import points_from_runs

CMD = "report"


def add_parser(subparsers: argparse._SubParsersAction) -> None:  # type: ignore[type-arg]
    p = subparsers.add_parser(CMD, help="HTML or PDF report of a run, a run CSV or a site",
                              description="Write a self-contained report (metadata, results with uncertainty and "
                                          "flags, plots, calibration traceability, method, references, cautions). "
                                          "The format follows the output name: .html or .pdf.")
    p.add_argument("run_id", type=int, nargs="?", metavar="RUN_ID", help="a run in the database")
    p.add_argument("--csv", type=Path, metavar="FILE.csv", help="report on a run CSV instead")
    p.add_argument("--site", help="report on every run of a site")
    p.add_argument("--borehole", help="with --site: one borehole")
    add_db_option(p)
    p.add_argument("-o", "--output", type=Path, metavar="FILE.html|FILE.pdf",
                   help="where to write (default: run-<id>.html, <csv name>.html or site-<name>.html)")
    p.add_argument("--probe", type=Path, metavar="PROFILE.toml", help="with --csv: the probe profile")
    p.add_argument("--calibration-factor", type=float, default=1.0, help="with --csv: probe factor to apply")
    p.add_argument("--calibration-factor-u", type=float, default=0.0, help="with --csv: its standard uncertainty")
    p.add_argument("--run-plots", action="store_true", help="with --site: add each run's fit plot")
    p.set_defaults(func=run)


def _safe(name: str) -> str:
    return "".join(c if c.isalnum() or c in "-_" else "-" for c in name).strip("-") or "site"


def run(args: argparse.Namespace) -> int:
    chosen = sum(x is not None and x is not False for x in (args.run_id, args.csv, args.site))
    if chosen != 1:
        return fail(CMD, "give exactly one of RUN_ID, --csv FILE.csv or --site SITE")
    try:
        if args.csv is not None:
            rep, default = _csv_report(args)
        elif args.site:
            rep, default = _site_report(args)
        else:
            rep, default = _run_report(args)
    except (SourceError, RunCsvError, ReductionError, ProbeProfileError) as e:
        return fail(CMD, str(e))
    out = args.output or Path(default)
    try:
        kind = write_report(rep, out)
    except (ValueError, OSError) as e:
        return fail(CMD, str(e))
    print(f"{kind} report written to {out}")
    return 0


def _csv_report(args: argparse.Namespace) -> tuple[object, str]:
    from linerig.daemon.probe import load_probe_profile

    probe = load_probe_profile(args.probe) if args.probe else None
    data = read_run_csv(Path(args.csv))
    if not args.calibration_factor > 0:
        raise ReductionError(f"--calibration-factor must be > 0, got {args.calibration_factor}")
    if not (args.calibration_factor_u >= 0 and math.isfinite(args.calibration_factor_u)):
        raise ReductionError(f"--calibration-factor-u must be a finite number >= 0, got {args.calibration_factor_u}")
    red = reduce_run(data, probe, calibration_factor=args.calibration_factor,
                     calibration_factor_u=args.calibration_factor_u)
    comments = [ln[1:].strip() for ln in Path(args.csv).read_text(encoding="utf-8").splitlines()
                if ln.startswith("#")]
    meta = {"notes": " / ".join(comments)} if comments else {}
    rep = run_report(meta, data, red, probe, source=str(args.csv))
    return rep, f"{Path(args.csv).stem}.html"


def _run_report(args: argparse.Namespace) -> tuple[object, str]:
    db = open_db(db_path(args))
    rec = load_run(db, args.run_id)
    red = None
    parts = cycle_data(rec)
    if len(parts) > 1:   # several heating cycles in one run: report the last, point to `linerig cycles`
        rec = RunRecord(rec.run_id, rec.detail, parts[-1][1], rec.probe, rec.calibrations, None)
    if rec.data is not None:
        try:
            red = reduce_record(rec)
        except ReductionError:
            red = None   # e.g. an aborted run with no heating: the report still shows what was stored
    status = rec.calibration_at_run()
    row = next((c for c in rec.calibrations if c.get("id") == status.calibration_id), None)
    rep = run_report(rec.detail, rec.data, red, rec.probe, calibration=status, calibration_row=row,
                     stored=rec.stored_results, source=str(db_path(args)))
    if len(parts) > 1:
        rep.blocks.insert(0, Para(f"This run holds {len(parts)} heating–recovery cycles; the results and plots "
                                  f"below are for the last one. `linerig cycles {args.run_id}` summarises them all "
                                  "(mean, repeatability, outliers).", "caution"))
    return rep, f"run-{args.run_id}.html"


def _site_report(args: argparse.Namespace) -> tuple[object, str]:
    db = open_db(db_path(args))
    runs = site_runs(db, args.site, args.borehole)
    if not runs:
        if args.borehole and site_runs(db, args.site):
            holes = sorted({str(r.get("location")) for r in site_runs(db, args.site) if r.get("location")})
            raise SourceError(f"no runs in borehole {args.borehole!r} of site {args.site!r} "
                              f"(its boreholes: {', '.join(holes) or 'none recorded'})")
        known = ", ".join(s["site"] for s in list_sites(db)) or "none"
        raise SourceError(f"no runs for site {args.site!r} (sites on record: {known})")
    pts = points_from_runs(runs, probe_profiles(db))  # sensor depths from each run's probe profile
    serials = sorted({str(r.get("probe_serial")) for r in runs if r.get("probe_serial")})
    cals = [c for s in serials for c in calibration_history(db, s)]
    figs: dict[int, bytes] = {}
    if args.run_plots:
        for r in runs:
            rec = load_run(db, int(r["id"]))
            if rec.data is None:
                continue
            try:
                red = reduce_record(rec)
            except ReductionError:
                continue
            first = next(iter(red.sensors.values()))
            figs[rec.run_id] = plots.svg_bytes(plots.heating_fit(rec.data, first, rec.probe))
    rep = site_report(args.site, runs, pts, cals, args.borehole, figs, probe_profiles(db))
    name = _safe(args.site) + (f"-{_safe(args.borehole)}" if args.borehole else "")
    return rep, f"site-{name}.html"


