"""``linerig report``: a self-contained HTML or PDF report of a run (from the database or a run CSV) or of a site.

The run is reduced again from its samples with the same code as the daemon, so the plots show exactly the fit
behind the numbers; the calibration current when the run was made is applied and traced.
"""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

from linerig.daemon.probe import ProbeProfileError
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.data import ReductionError
from linerig.daemon.report import plots
from linerig.daemon.report.build import run_report, site_report
from linerig.daemon.report.cli import add_central_option, add_db_option, db_path, fail, run_source, write_report
from linerig.daemon.report.model import Para
from linerig.daemon.report.sources import (
    RunRecord,
    RunSource,
    SourceError,
    cycle_data,
    load_run,
    open_db,
    reduce_record,
)
from linerig.daemon.runcsv import PROBE_PROFILE, RunCsvError, read_run_file
from linerig.daemon.workflows.profiles import points_from_runs, row_label

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
    add_central_option(p)
    p.add_argument("-o", "--output", type=Path, metavar="FILE.html|FILE.pdf",
                   help="where to write (default: run-<id>.html, <csv name>.html or site-<name>.html)")
    p.add_argument("--probe", type=Path, metavar="PROFILE.toml", help="with --csv: the probe profile")
    p.add_argument("--calibration-factor", type=float,
                   help="with --csv: probe factor to apply (default: the file's calibration_factor, else 1)")
    p.add_argument("--calibration-factor-u", type=float,
                   help="with --csv: its standard uncertainty (default: the file's, else 0)")
    p.add_argument("--run-plots", action="store_true", help="with --site: add each run's fit plot")
    p.set_defaults(func=run)


def _safe(name: str) -> str:
    return "".join(c if c.isalnum() or c in "-_" else "-" for c in name).strip("-") or "site"


def run(args: argparse.Namespace) -> int:
    from linerig.daemon.central.errors import CentralError

    chosen = sum(x is not None and x is not False for x in (args.run_id, args.csv, args.site))
    if chosen != 1:
        return fail(CMD, "give exactly one of RUN_ID, --csv FILE.csv or --site SITE")
    if args.central is not None and not args.site:
        return fail(CMD, "--central goes with --site (a site across rigs); for one run, give --db of its rig")
    try:
        if args.csv is not None:
            rep, default = _csv_report(args)
        elif args.site:
            with run_source(args) as src:
                rep, default = _site_report(args, src)
        else:
            rep, default = _run_report(args)
    except CentralError as e:
        print(f"linerig {CMD}: error: {e}", file=sys.stderr)
        return e.exit_code
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
    from linerig.tui.commands.reduce import calibration_to_apply, file_probe

    data, header = read_run_file(Path(args.csv))
    probe = load_probe_profile(args.probe) if args.probe else file_probe(header, str(args.csv))
    if args.calibration_factor is not None and not args.calibration_factor > 0:
        raise ReductionError(f"--calibration-factor must be > 0, got {args.calibration_factor}")
    fu = args.calibration_factor_u
    if fu is not None and not (fu >= 0 and math.isfinite(fu)):
        raise ReductionError(f"--calibration-factor-u must be a finite number >= 0, got {fu}")
    factor, factor_u = calibration_to_apply(args, header, str(args.csv), probe, CMD)
    red = reduce_run(data, probe, calibration_factor=factor, calibration_factor_u=factor_u)
    comments = [ln[1:].strip() for ln in Path(args.csv).read_text(encoding="utf-8").splitlines()
                if ln.startswith("#") and PROBE_PROFILE not in ln]
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


def _site_report(args: argparse.Namespace, src: RunSource) -> tuple[object, str]:
    runs = src.site_runs(args.site, args.borehole)
    if not runs:
        if args.borehole and src.site_runs(args.site):
            holes = sorted({str(r.get("location")) for r in src.site_runs(args.site) if r.get("location")})
            raise SourceError(f"no runs in borehole {args.borehole!r} of site {args.site!r} "
                              f"(its boreholes: {', '.join(holes) or 'none recorded'})")
        known = ", ".join(s["site"] for s in src.list_sites()) or "none"
        raise SourceError(f"no runs for site {args.site!r} (sites on record: {known})")
    probes = src.probe_profiles()
    pts = points_from_runs(runs, probes)  # sensor depths from each run's probe profile
    serials = sorted({str(r.get("probe_serial")) for r in runs if r.get("probe_serial")})
    cals = [c for s in serials for c in src.calibration_history(s)]
    figs: dict[str, bytes] = {}
    if args.run_plots:
        for r in runs:
            rec = src.load_run(r)
            if rec.data is None:
                continue
            try:
                red = reduce_record(rec)
            except ReductionError:
                continue
            first = next(iter(red.sensors.values()))
            figs[row_label(r)] = plots.svg_bytes(plots.heating_fit(rec.data, first, rec.probe))
    rep = site_report(args.site, runs, pts, cals, args.borehole, figs, probes)
    name = _safe(args.site) + (f"-{_safe(args.borehole)}" if args.borehole else "")
    return rep, f"site-{name}.html"
