"""``linerig profile --site SITE [--borehole B]``: thermal resistivity against depth, per borehole.

Depth of a reading (sensor depth) = the run's probe-tip depth minus the sensor's distance from the tip (probe
profile), so a rod with sensors along it and repeated insertions in a deepened hole land on the same axis.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path

from linerig.daemon.report import plots
from linerig.daemon.report.cli import add_central_option, add_db_option, fail, run_source
from linerig.daemon.report.sources import RunSource, SourceError
from linerig.daemon.workflows.profiles import group_profiles, points_from_runs, summarise_depths
from linerig.tui.tables import print_table

CMD = "profile"


def add_parser(subparsers: argparse._SubParsersAction) -> None:  # type: ignore[type-arg]
    p = subparsers.add_parser(CMD, help="thermal resistivity against depth per site and borehole",
                              description="Resistivity against depth from field runs (runs.location names the "
                                          "borehole, runs.depth_m the probe-tip depth).")
    p.add_argument("--site", help="site name as recorded with the runs (omit to list the sites)")
    p.add_argument("--borehole", help="only this borehole (runs.location)")
    add_db_option(p)
    add_central_option(p)
    p.add_argument("--plot", type=Path, metavar="FILE.png", help="write the depth plot")
    p.add_argument("--json", action="store_true", help="print the points as JSON")
    p.add_argument("--tolerance-m", type=float, default=0.05, help="pool readings this close in depth (m)")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from linerig.daemon.central.errors import CentralError

    if not (args.tolerance_m >= 0 and math.isfinite(args.tolerance_m)):
        return fail(CMD, f"--tolerance-m must be a finite distance >= 0 m, got {args.tolerance_m}")
    try:
        with run_source(args) as src:
            return _profile(args, src)
    except CentralError as e:
        print(f"linerig {CMD}: error: {e}", file=sys.stderr)
        return e.exit_code
    except SourceError as e:
        return fail(CMD, str(e))


def _profile(args: argparse.Namespace, src: RunSource) -> int:
    if not args.site:
        sites = src.list_sites()
        if not sites:
            return fail(CMD, "no run in the database has a site; record the site with each field run")
        rigs = any("rigs" in s for s in sites)  # read from the central database: how many rigs measured each
        print_table("Sites", ("site", "runs", "boreholes", *(("rigs",) if rigs else ())),
                    [(str(s["site"]), str(s["runs"]), str(s["boreholes"]), *((str(s["rigs"]),) if rigs else ()))
                     for s in sites], right=(1, 2, 3))
        return 0
    runs = src.site_runs(args.site, args.borehole)
    if not runs:
        known = ", ".join(s["site"] for s in src.list_sites()) or "none"
        return fail(CMD, f"no runs for site {args.site!r}" + (f" borehole {args.borehole!r}" if args.borehole else "")
                    + f" (sites on record: {known})")
    pts = points_from_runs(runs, src.probe_profiles())
    if not pts:
        return fail(CMD, f"site {args.site!r}: no run has both a depth and a result")
    groups = group_profiles(pts)
    if args.json:
        print(json.dumps({"site": args.site, "depth": "sensor depth below ground, m (tip depth minus the sensor's "
                                                        "distance from the tip)",
                          "boreholes": {bh: [p.to_dict() for p in v] for (_s, bh), v in groups.items()}}, indent=2))
    else:
        for (_s, bh), v in groups.items():
            print_table(f"{args.site} — borehole {bh} (sensor depth = tip depth − sensor's distance from the tip)",
                        ("sensor depth m", "run", "sensor", "k W/(m·K)", "ρ °C·cm/W", "U(ρ) (k = 2)", "flags"),
                        [(f"{p.depth_m:.2f}", p.run_label, p.sensor, f"{p.k_W_per_mK:.4f}",
                          f"{100 * p.resistivity_mK_per_W:.1f}",
                          f"{200 * p.resistivity_u_mK_per_W:.1f}" if p.resistivity_u_mK_per_W else "—",
                          ", ".join(p.flags) or "—") for p in v], right=(0, 1, 3, 4, 5))
            summ = summarise_depths(v, args.tolerance_m)
            if any(d.n > 1 for d in summ):
                print_table(f"pooled within {args.tolerance_m:g} m", ("sensor depth m", "readings", "mean ρ °C·cm/W",
                                                                      "highest ρ °C·cm/W"),
                            [(f"{d.depth_m:.2f}", str(d.n), f"{100 * d.resistivity_mK_per_W:.1f}",
                              f"{100 * d.worst_mK_per_W:.1f}") for d in summ], right=(0, 1, 2, 3))
    if args.plot:
        title = f"{args.site}" + (f", borehole {args.borehole}" if args.borehole else "")
        try:
            plots.save_plot(plots.depth_profile(groups, f"Thermal resistivity against depth — {title}"), args.plot)
        except (OSError, ValueError) as e:
            return fail(CMD, f"cannot write plot {args.plot}: {getattr(e, 'strerror', None) or e}")
    return 0
