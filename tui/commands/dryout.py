"""``linerig dryout``: thermal resistivity against moisture for one material, fitted with published soil models.

Points come from a CSV (moisture_pct, dry_density_kg_per_m3, then k_W_per_mK or resistivity_mK_per_W or
resistivity_Ccm_per_W, optional k_u_W_per_mK) or from the database: runs of one --material with moisture and
dry density recorded. Gives the fitted curves, the critical moisture by the tangent construction of IEEE Std
442-2017 Annex F, and the resistivity at a chosen critical moisture.
"""

from __future__ import annotations

import argparse
import csv
import json
import math
from pathlib import Path

import numpy as np

from linerig.daemon.report import plots
from linerig.daemon.report.build import f, workflow_report, workflow_tail
from linerig.daemon.report.cli import add_db_option, db_path, fail, write_report
from linerig.daemon.report.model import Figure, Heading, Para, Report, Table
from linerig.daemon.report.sources import SourceError, open_db
from linerig.daemon.store.queries import run_detail
from linerig.daemon.workflows.dryout import (
    CK_DRY,
    CK_KAPPA_UNFROZEN,
    DESIGN_CAUTION,
    MODELS,
    CriticalMoisture,
    DesignValue,
    DryoutError,
    DryoutFit,
    DryoutPoint,
    Material,
    critical_moisture,
    design_value,
    fit_dryout,
)

CMD = "dryout"


def add_parser(subparsers: argparse._SubParsersAction) -> None:  # type: ignore[type-arg]
    p = subparsers.add_parser(CMD, help="resistivity against moisture: model fits and critical moisture",
                              description="Dry-out curve of one material: fits Johansen (1975), Côté & Konrad "
                                          "(2005) and Lu et al. (2007), finds the critical moisture (IEEE 442-2017 "
                                          "Annex F) and reads the resistivity at a chosen moisture. "
                                          + DESIGN_CAUTION)
    p.add_argument("--csv", type=Path, metavar="FILE.csv", help="moisture series as CSV")
    p.add_argument("--material", help="use the database runs of this material instead")
    p.add_argument("--site", help="with --material: only runs of this site")
    add_db_option(p)
    p.add_argument("--model", choices=(*MODELS, "all"), default="all")
    p.add_argument("--particle-density", type=float, default=2650.0, metavar="KG_PER_M3",
                   help="density of the solids (default 2650, quartz-rich mineral soil)")
    p.add_argument("--quartz", type=float, default=0.6, help="quartz fraction of the solids (start value)")
    p.add_argument("--fine", action="store_true", help="fine soil (silt, clay) rather than coarse")
    p.add_argument("--ck-soil", choices=tuple(CK_KAPPA_UNFROZEN), default=None,
                   help="Côté–Konrad soil class (default: medium-fine-sand, or silt-clay with --fine)")
    p.add_argument("--ck-dry", choices=tuple(CK_DRY), default="natural-mineral", help="Côté–Konrad dry class")
    p.add_argument("--split", type=float, metavar="PCT", help="moisture separating the dry and moist segments")
    p.add_argument("--critical-moisture", type=float, metavar="PCT",
                   help="read the resistivity here (default: the Annex F critical moisture)")
    p.add_argument("--design-density", type=float, metavar="KG_PER_M3",
                   help="dry density for the reading (default: the densest series)")
    p.add_argument("--plot", type=Path, metavar="FILE.png")
    p.add_argument("--report", type=Path, metavar="FILE.html|FILE.pdf")
    p.add_argument("--json", action="store_true")
    p.set_defaults(func=run)


def read_points_csv(path: Path) -> list[DryoutPoint]:
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as e:
        raise DryoutError(f"{path}: cannot read ({e.strerror or e})") from e
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise DryoutError(f"{path}: empty")
    rd = csv.DictReader(lines)
    cols = set(rd.fieldnames or [])
    for need in ("moisture_pct", "dry_density_kg_per_m3"):
        if need not in cols:
            raise DryoutError(f"{path}: header needs a {need} column (has: {', '.join(sorted(cols))})")
    kcol = next((c for c in ("k_W_per_mK", "resistivity_mK_per_W", "resistivity_Ccm_per_W") if c in cols), None)
    if kcol is None:
        raise DryoutError(f"{path}: header needs k_W_per_mK, resistivity_mK_per_W or resistivity_Ccm_per_W")
    pts = []
    for i, row in enumerate(rd, start=1):
        try:
            w = float(row["moisture_pct"])
            rho_d = float(row["dry_density_kg_per_m3"])
            v = float(row[kcol])
            u = float(row["k_u_W_per_mK"]) if row.get("k_u_W_per_mK") not in (None, "") else None
        except (TypeError, ValueError):
            raise DryoutError(f"{path}: data row {i}: a value is not a number") from None
        if not all(math.isfinite(x) for x in (w, rho_d, v)) or v <= 0:
            raise DryoutError(f"{path}: data row {i}: values must be finite and the conductivity > 0")
        k = v if kcol == "k_W_per_mK" else (1 / v if kcol == "resistivity_mK_per_W" else 100 / v)
        pts.append(DryoutPoint(w, rho_d, k, u))
    return pts


def points_from_db(db_file: Path, material: str, site: str | None) -> list[DryoutPoint]:
    db = open_db(db_file)
    sql = "SELECT id FROM runs WHERE material = ? AND moisture_pct IS NOT NULL"
    params: list[object] = [material]
    if site:
        sql += " AND site = ?"
        params.append(site)
    pts = []
    skipped_density = 0
    for r in db.query(sql + " ORDER BY id", params):
        d = run_detail(db, r["id"])
        if not d or not d.get("results"):
            continue
        if d.get("dry_density_kg_per_m3") is None:
            skipped_density += 1
            continue
        res = next(iter(d["results"].values()))
        if res.get("k_W_per_mK"):
            pts.append(DryoutPoint(float(d["moisture_pct"]), float(d["dry_density_kg_per_m3"]),
                                   float(res["k_W_per_mK"]), res.get("k_u_W_per_mK"), int(d["id"])))
    if not pts:
        extra = f" ({skipped_density} without a dry density)" if skipped_density else ""
        raise DryoutError(f"no reduced runs of material {material!r} with moisture and dry density{extra}")
    return pts


def analyse(pts: list[DryoutPoint], args: argparse.Namespace) -> tuple[dict[str, DryoutFit],
                                                                       CriticalMoisture | None, list[str],
                                                                       DesignValue | None, float]:
    ck_soil = args.ck_soil or ("silt-clay" if args.fine else "medium-fine-sand")
    mat = Material(rho_s=args.particle_density, quartz=args.quartz, coarse=not args.fine, ck_soil=ck_soil,
                   ck_dry=args.ck_dry)
    models = MODELS if args.model == "all" else (args.model,)
    fits = {m: fit_dryout(pts, m, mat) for m in models}
    dens = sorted({p.dry_density_kg_per_m3 for p in pts})
    design_rho_d = args.design_density if args.design_density is not None else dens[-1]
    if not (0 < design_rho_d < args.particle_density):
        raise DryoutError(f"--design-density must lie between 0 and the particle density "
                          f"({args.particle_density:g} kg/m³), got {design_rho_d:g}")
    if args.critical_moisture is not None and not (args.critical_moisture >= 0 and
                                                   math.isfinite(args.critical_moisture)):
        raise DryoutError(f"--critical-moisture must be a moisture content >= 0 %, got {args.critical_moisture}")
    notes: list[str] = []
    crit = None
    series = [p for p in pts if p.dry_density_kg_per_m3 == design_rho_d]
    if not series:
        notes.append(f"no series at ρ_d {design_rho_d:g} kg/m³: the Annex F tangents are drawn through every point "
                     f"(dry densities {', '.join(f'{d:g}' for d in dens)})")
        series = pts
    try:
        crit = critical_moisture(np.array([p.moisture_pct for p in series]),
                                 np.array([p.resistivity_mK_per_W for p in series]), args.split)
    except DryoutError as e:
        notes.append(f"critical moisture not found: {e}")
    w_read = args.critical_moisture if args.critical_moisture is not None else (crit.moisture_pct if crit else None)
    best = min(fits.values(), key=lambda x: x.rms_rel)
    dv = design_value(best, w_read, design_rho_d) if w_read is not None else None
    return fits, crit, notes, dv, design_rho_d


def run(args: argparse.Namespace) -> int:
    if (args.csv is None) == (args.material is None):
        return fail(CMD, "give either --csv FILE.csv or --material NAME (database runs)")
    try:
        pts = read_points_csv(args.csv) if args.csv else points_from_db(db_path(args), args.material, args.site)
        fits, crit, notes, dv, rho_d = analyse(pts, args)
    except (DryoutError, SourceError) as e:
        return fail(CMD, str(e))
    name = str(args.csv) if args.csv else f"material {args.material}"
    if args.json:
        print(json.dumps({"source": name, "points": [p.__dict__ for p in pts],
                          "fits": {m: ft.to_dict() for m, ft in fits.items()},
                          "critical_moisture": crit.to_dict() if crit else None,
                          "design_value": dv.__dict__ if dv else None, "notes": notes}, indent=2))
    else:
        print(f"Dry-out curve, {name}: {len(pts)} points, dry densities "
              + ", ".join(f"{d:.0f}" for d in sorted({p.dry_density_kg_per_m3 for p in pts})) + " kg/m³")
        for m, ft in fits.items():
            sh = f", shape {ft.params.shape:.3g}" if ft.params.shape is not None else ""
            print(f"  {m:<12} λ_s {ft.params.lambda_s:.3f} W/(m·K){sh}, dry scale {ft.params.dry_scale:.3f}; "
                  f"rms misfit {100 * ft.rms_rel:.1f} % (free: {', '.join(ft.free)})")
        if crit:
            print(f"critical moisture (IEEE 442-2017 Annex F tangents, ρ_d {rho_d:.0f}): {crit.moisture_pct:.2f} % "
                  f"(the tangents meet at {100 * crit.resistivity_mK_per_W:.0f} °C·cm/W)"
                  + (f"  [{', '.join(crit.flags)}]"
                                                                       if crit.flags else ""))
        for n in notes:
            print(f"note: {n}")
        if dv:
            print(f"resistivity at {dv.moisture_pct:.2f} % and ρ_d {dv.dry_density_kg_per_m3:.0f} kg/m³ "
                  f"({dv.model}): {dv.resistivity_mK_per_W:.3f} m·K/W = {100 * dv.resistivity_mK_per_W:.0f} °C·cm/W")
        print(f"caution: {DESIGN_CAUTION}")
        print("model parameters are quoted from memory of Johansen (1975), Côté & Konrad (2005) and Lu et al. "
              "(2007): likely, not normative")
    if args.plot or args.report:
        curves = {}
        wmax = max(p.moisture_pct for p in pts) * 1.1
        ws = np.linspace(0.05, wmax, 200)
        for m, ft in fits.items():
            for d in sorted({p.dry_density_kg_per_m3 for p in pts}):
                curves[f"{m}, ρ_d {d:.0f}"] = (ws, ft.resistivity_mK_per_W(ws, d))
        fig = plots.dryout(pts, curves, f"Dry-out curve — {Path(name).name if args.csv else name}", crit, dv)
        try:
            if args.plot:
                plots.save_plot(fig, args.plot)
            if args.report:
                write_report(_report(name, pts, fits, crit, dv, notes, plots.svg_bytes(fig)), args.report)
        except (ValueError, OSError) as e:
            return fail(CMD, str(e))
    return 0


def _report(name: str, pts: list[DryoutPoint], fits: dict[str, DryoutFit], crit: CriticalMoisture | None,
            dv: DesignValue | None, notes: list[str], svg: bytes) -> Report:
    short = Path(name).name if name.endswith(".csv") else name   # the full path is the source row
    rep = workflow_report(f"Dry-out curve — {short}", "Thermal resistivity against moisture (dry-out curve)",
                          "dryout", "D", Path(short).stem, name, (("Points", str(len(pts))),))
    rep.add(Heading("Points"), Table(("moisture %", "ρ_d kg/m³", "k W/(m·K)", "U (k = 2)", "ρ °C·cm/W", "run"), tuple(
        (f(p.moisture_pct, 3), f(p.dry_density_kg_per_m3), f(p.k_W_per_mK),
         f(2 * p.k_u_W_per_mK if p.k_u_W_per_mK is not None else None, 2), f(100 / p.k_W_per_mK),
         str(p.run_id or "—")) for p in sorted(pts, key=lambda p: (p.dry_density_kg_per_m3, p.moisture_pct)))),
        Heading("Model fits"), Table(("model", "λ_s W/(m·K)", "shape", "dry scale", "rms misfit", "free"), tuple(
            (m, f(ft.params.lambda_s), f(ft.params.shape), f(ft.params.dry_scale), f"{100 * ft.rms_rel:.1f} %",
             ", ".join(ft.free)) for m, ft in fits.items()),
            "λ = λ_dry + Ke·(λ_sat − λ_dry); shape is κ (Côté & Konrad) or α (Lu et al.). Parameters are quoted "
            "from memory of the papers: likely, not normative."),
        Figure(svg, "Resistivity against moisture with the fitted models, the Annex F tangents and the reading."))
    if crit:
        rep.add(Para(f"Critical moisture (IEEE 442-2017 Annex F, intersection of the tangents to the dry and moist "
                     f"segments): {crit.moisture_pct:.2f} % at {100 * crit.resistivity_mK_per_W:.0f} °C·cm/W."))
    for n in notes:
        rep.add(Para(n, "note"))
    if dv:
        rep.add(Para(f"Resistivity at {dv.moisture_pct:.2f} % moisture and ρ_d {dv.dry_density_kg_per_m3:.0f} kg/m³ "
                     f"({dv.model}): {dv.resistivity_mK_per_W:.3f} m·K/W ({100 * dv.resistivity_mK_per_W:.0f} "
                     "°C·cm/W)."))
    rep.add(Para(DESIGN_CAUTION, "caution"))
    return workflow_tail(rep, "dryout")
