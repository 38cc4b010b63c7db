"""``linerig cycles RUN_ID``: statistics over the repeat heating–recovery cycles of a sample.

A run that belongs to a series (several runs, one per cycle) is summarised from the series' stored results; a run
that holds several cycles itself is cut at each heater-on and every cycle is reduced on its own.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path
from typing import Any

import numpy as np

from linerig.daemon.probe import ProbeProfile
from linerig.daemon.reduction.data import ReductionError
from linerig.daemon.report import plots
from linerig.daemon.report.build import equipment_rows, f, workflow_report, workflow_tail
from linerig.daemon.report.cli import add_db_option, db_path, fail, write_report
from linerig.daemon.report.model import Bullets, Figure, Heading, Para, Report, Table
from linerig.daemon.report.sources import RunRecord, SourceError, cycle_data, load_run, open_db, series_runs
from linerig.daemon.workflows.cycles import (
    REPEATABILITY_FACTOR,
    CycleDataError,
    CycleSummary,
    CycleValue,
    summarise_cycles,
)

CMD = "cycles"


def add_parser(subparsers: argparse._SubParsersAction) -> None:  # type: ignore[type-arg]
    p = subparsers.add_parser(CMD, help="mean, spread, repeatability and outliers over repeat cycles",
                              description="Summarise the repeat heating–recovery cycles of a run (or of the series "
                                          "it belongs to): mean, standard deviation, repeatability limit "
                                          "r = 2.8·s_r (ISO 5725-6), Grubbs and modified-z outlier flags, "
                                          "and a cycle-to-cycle trend test.")
    p.add_argument("run_id", type=int, metavar="RUN_ID", help="a run of the sample")
    add_db_option(p)
    p.add_argument("--sensor", help="sensor to summarise (default: the first)")
    p.add_argument("--json", action="store_true", help="print JSON")
    p.add_argument("--plot", type=Path, metavar="FILE.png", help="write a plot of k per cycle")
    p.add_argument("--report", type=Path, metavar="FILE.html|FILE.pdf", help="write a report")
    p.set_defaults(func=run)


def collect(db_file: Path, run_id: int, sensor: str | None) -> tuple[list[CycleValue], str, str]:
    """Cycle values, the sensor used, and where they came from."""
    db = open_db(db_file)
    rec = load_run(db, run_id)
    series_id = rec.detail.get("series_id")
    if series_id is not None:
        runs = series_runs(db, int(series_id))
        if len(runs) >= 2:
            name = sensor or next((s for r in runs for s in (r.get("results") or {})), None)
            if name is None:
                raise CycleDataError(f"series {series_id}: no run has a result yet")
            vals = []
            first_start: float | None = None
            for i, r in enumerate(runs, start=1):
                res = (r.get("results") or {}).get(name)
                start = _start_C(load_run(db, int(r["id"])), name)
                if first_start is None:
                    first_start = start
                offset = None if start is None or first_start is None else start - first_start
                if res and res.get("k_W_per_mK"):
                    vals.append(CycleValue(int(r.get("cycle") or i), float(res["k_W_per_mK"]),
                                           res.get("k_u_W_per_mK"), int(r["id"]), offset, res.get("rise_K"),
                                           tuple(res.get("flags") or ())))
            return vals, name, f"series {series_id} ({len(runs)} runs)"
    parts = cycle_data(rec)
    if len(parts) < 2:
        raise CycleDataError(f"run {run_id} holds {len(parts)} heating cycle(s) and belongs to no series: "
                             "nothing to compare (plan the run with several cycles)")
    from linerig.daemon.report.sources import reduce_record

    vals = []
    first_base: float | None = None
    name = sensor
    for cyc, data in parts:
        sub = type(rec)(rec.run_id, rec.detail, data, rec.probe, rec.calibrations, None)
        try:
            red = reduce_record(sub, sensors=[name] if name else None)
        except ReductionError as e:
            print(f"linerig {CMD}: cycle {cyc} not reduced: {e}", file=sys.stderr)
            continue
        name = name or next(iter(red.sensors))
        r = red.sensors[name]
        base = r.baseline.at(0.0) if r.baseline is not None and r.baseline.present else None
        if first_base is None and base is not None:
            first_base = float(base)
        offset = None if base is None or first_base is None else float(base) - first_base
        if r.k_W_per_mK:
            vals.append(CycleValue(cyc, r.k_W_per_mK, r.k_u_W_per_mK, run_id, offset, r.rise_K, tuple(r.flags)))
    return vals, name or "?", f"run {run_id} ({len(parts)} cycles, each reduced on its own)"


START_SPAN_S = 30.0   # the start temperature of a cycle: mean of its last 30 s of baseline (common practice, no source)


def _start_C(rec: RunRecord, sensor: str) -> float | None:
    """Temperature at which a cycle's heating started, from the end of its stored baseline."""
    d = rec.data
    if d is None or sensor not in d.temps_C:
        return None
    base = (d.time_s < 0) & (d.time_s >= -START_SPAN_S) & np.isfinite(d.temps_C[sensor])
    return float(np.mean(d.temps_C[sensor][base])) if np.any(base) else None


def print_summary(s: CycleSummary, sensor: str, origin: str) -> None:
    from linerig.tui.tables import print_table

    print_table(f"Repeat cycles, {origin}, sensor {sensor}", ("cycle", "run", "k W/(m·K)", "U (k = 2)",
                                                               "modified z", "flags"),
                [(str(v.cycle), str(v.run_id or "—"), f"{v.value:.4f}", f(2 * v.u if v.u else None, 2), f"{z:.2f}",
                  ", ".join(s.flags_by_cycle.get(v.cycle, ())) or "—") for v, z in zip(s.values, s.mod_z, strict=True)],
                right=(0, 1, 2, 3, 4))
    print(f"n = {s.n}; mean {s.mean:.4f} W/(m·K); s_r {s.sd:.4f} ({100 * s.cv:.2f} %); "
          f"standard error {s.sem:.4f}")
    print(f"repeatability limit r = {REPEATABILITY_FACTOR}·s_r = {s.repeatability_limit:.4f} W/(m·K) "
          "(ISO 5725-6: two cycles should differ by less than r, 95 % of the time)")
    if s.grubbs_G is not None:
        print(f"Grubbs G = {s.grubbs_G:.3f} (5 % critical {s.grubbs_crit_5:.3f}, 1 % critical "
              f"{s.grubbs_crit_1:.3f}; ISO 5725-2 §7.3.4)")
    else:
        print("Grubbs test needs 3 or more cycles")
    print(f"trend {s.trend_per_cycle:+.4f} W/(m·K) per cycle (p = {s.trend_p:.3f})")
    print("flags: " + (", ".join(s.flags) or "none"))


def build_report(s: CycleSummary, sensor: str, origin: str, svg: bytes, meta: dict[str, Any] | None = None,
                 probe: ProbeProfile | None = None, run_id: int | None = None) -> Report:
    meta = meta or {}
    rows = [("Sample", str(meta.get("sample") or "—")), ("Material", str(meta.get("material") or "—")),
            *equipment_rows(meta, probe)]
    rep = workflow_report(f"Repeat cycles — {origin}", "Repeat needle-probe cycles on one sample", "cycles", "C",
                          run_id if run_id is not None else origin, origin, rows)
    rep.add(Heading("Cycles"), Table(("cycle", "run", "k W/(m·K)", "U (k = 2)", "modified z", "flags"), tuple(
        (str(v.cycle), str(v.run_id or "—"), f(v.value), f(2 * v.u if v.u else None, 2), f"{z:.2f}",
         ", ".join(s.flags_by_cycle.get(v.cycle, ())) or "—") for v, z in zip(s.values, s.mod_z, strict=True))),
        Table(("statistic", "value"), (
            ("sensor", sensor), ("cycles", str(s.n)), ("mean k W/(m·K)", f(s.mean)),
            ("repeatability SD s_r", f(s.sd)), ("coefficient of variation", f"{100 * s.cv:.2f} %"),
            ("repeatability limit r = 2.8·s_r", f(s.repeatability_limit)),
            ("Grubbs G (5 % / 1 % critical)", f"{f(s.grubbs_G)} ({f(s.grubbs_crit_5)} / {f(s.grubbs_crit_1)})"),
            ("trend per cycle (p)", f"{f(s.trend_per_cycle)} ({f(s.trend_p, 3)})"),
            ("flags", ", ".join(s.flags) or "none"))),
        Figure(svg, "k per cycle with ± U (k = 2), the mean and the band mean ± r/2."),
        Para("Outliers are flagged, never removed: look for a cause (probe moved, power interrupted, not "
             "re-equilibrated) before leaving a cycle out.", "note"),
        Bullets(("Repeatability limit: ISO 5725-6 §4.1.4, r = 2.8·s_r.",
                 "Outliers: Grubbs' test (ISO 5725-2 §7.3.4; 5 % straggler, 1 % outlier) and the modified z-score "
                 "|M| > 3.5 (Iglewicz & Hoaglin 1993).",
                 "A steady trend across cycles suggests moisture driven from the probe by repeated heating "
                 "(ASTM D5334, error sources)."), "small"))
    flags = set(s.flags) | {fl for v in s.values for fl in v.result_flags}
    return workflow_tail(rep, "cycles", flags, cautions="field" if meta.get("site") or meta.get("depth_m") is not None
                         else "lab")


def run(args: argparse.Namespace) -> int:
    try:
        vals, sensor, origin = collect(db_path(args), args.run_id, args.sensor)
        s = summarise_cycles(vals)
    except (SourceError, CycleDataError, ReductionError) as e:
        return fail(CMD, str(e))
    if args.json:
        print(json.dumps({"sensor": sensor, "origin": origin, **s.to_dict()}, indent=2,
                         default=lambda o: None if isinstance(o, float) and not math.isfinite(o) else str(o)))
    else:
        print_summary(s, sensor, origin)
    if args.plot or args.report:
        flagged = [c for c, fl in s.flags_by_cycle.items() if any("outlier" in x or "straggler" in x for x in fl)]
        fig = plots.cycles([v.cycle for v in s.values], [v.value for v in s.values], [v.u for v in s.values],
                           s.mean, s.repeatability_limit, flagged, f"Repeat cycles, sensor {sensor}")
        try:
            if args.plot:
                plots.save_plot(fig, args.plot)
            if args.report:
                rec = load_run(open_db(db_path(args)), args.run_id)
                write_report(build_report(s, sensor, origin, plots.svg_bytes(fig), rec.detail, rec.probe,
                                          args.run_id), args.report)
        except (ValueError, OSError) as e:
            return fail(CMD, str(e))
    return 0
