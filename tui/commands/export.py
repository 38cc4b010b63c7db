"""``linerig export``: samples and results from the database as CSV or JSON (stdout unless -o)."""

from __future__ import annotations

import argparse
from pathlib import Path

from linerig.daemon.report.cli import add_db_option, db_path, fail, write_text
from linerig.daemon.report.export import results_csv, results_json, run_json, samples_raw_csv, samples_run_csv
from linerig.daemon.report.sources import SourceError, load_run, open_db, probe_profiles, series_runs, site_runs
from linerig.daemon.store.queries import list_runs, run_detail

CMD = "export"


def add_parser(subparsers: argparse._SubParsersAction) -> None:  # type: ignore[type-arg]
    p = subparsers.add_parser(CMD, help="samples and results as CSV or JSON",
                              description="Export from the database. Samples of one run as a run CSV (readable by "
                                          "`linerig reduce`), every stored sample column (--raw), or JSON; results "
                                          "of runs, a site or a series as CSV or JSON.")
    p.add_argument("run_ids", type=int, nargs="*", metavar="RUN_ID", help="run(s) to export")
    add_db_option(p)
    p.add_argument("--site", help="all runs of a site")
    p.add_argument("--borehole", help="with --site: one borehole")
    p.add_argument("--series", type=int, metavar="ID", help="all runs of a series (cycles)")
    p.add_argument("--what", choices=("samples", "results"), default="results", help="what to export")
    p.add_argument("--format", choices=("csv", "json"), default="csv")
    p.add_argument("--raw", action="store_true", help="samples: every stored column, not the run CSV format")
    p.add_argument("-o", "--output", type=Path, metavar="FILE", help="write here instead of stdout")
    p.add_argument("--list", action="store_true", help="list recent runs and exit")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    try:
        db = open_db(db_path(args))
    except SourceError as e:
        return fail(CMD, str(e))
    if args.list:
        import io

        from linerig.tui.tables import print_table

        rows = list_runs(db, 200, args.site)
        buf = io.StringIO()
        print_table(f"Runs in {db_path(args)}", ("run", "started (UTC)", "state", "site", "borehole", "tip depth m",
                                                 "sample"),
                    [(str(r["id"]), str(r["created_utc"] or "")[:16].replace("T", " "), str(r["state"] or ""),
                      str(r["site"] or "—"), str(r["location"] or "—"),
                      f"{r['depth_m']:.2f}" if r.get("depth_m") is not None else "—", str(r["sample"] or ""))
                     for r in rows], right=(0, 5), file=buf)
        try:
            write_text(buf.getvalue(), args.output)
        except OSError as e:
            return fail(CMD, f"cannot write {args.output}: {e}")
        return 0
    try:
        if args.what == "samples":
            if len(args.run_ids) != 1 or args.site or args.series is not None:
                return fail(CMD, "samples are exported one run at a time: give exactly one RUN_ID")
            rec = load_run(db, args.run_ids[0])
            if rec.data is None:
                return fail(CMD, f"run {rec.run_id} has no samples")
            if args.format == "json":
                text = run_json(rec)
            else:
                text = samples_raw_csv(db, rec) if args.raw else samples_run_csv(rec)
        else:
            if args.site:
                runs = site_runs(db, args.site, args.borehole)
            elif args.series is not None:
                runs = series_runs(db, args.series)
            elif args.run_ids:
                runs = []
                for rid in args.run_ids:
                    d = run_detail(db, rid)
                    if d is None:
                        return fail(CMD, f"no run {rid} in the database (see `linerig export --list`)")
                    runs.append(d)
            else:
                return fail(CMD, "say what to export: RUN_ID..., --site SITE or --series ID (or --list)")
            if not runs:
                return fail(CMD, "no runs matched")
            text = results_json(runs) if args.format == "json" else results_csv(runs, probe_profiles(db))
    except SourceError as e:
        return fail(CMD, str(e))
    try:
        write_text(text, args.output)
    except OSError as e:
        return fail(CMD, f"cannot write {args.output}: {e}")
    return 0
