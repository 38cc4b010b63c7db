"""``linerig cylinder FILE.csv``: diffusivity from a surface-step test (specimen in a mould moved into a bath or
oven, centre temperature logged), by fitting the classical series solution (infinite cylinder; finite cylinder as
its product with the slab solution).

CSV: ``time_s`` (s, step at 0 unless --step-at), ``T_centre_C``, optionally ``T_bath_C`` (measured surroundings:
each change becomes a step, so heating then cooling in a second bath is one fit). ``#`` lines are comments.
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
from linerig.daemon.report.cli import add_db_option, fail, write_report
from linerig.daemon.report.model import Figure, Heading, Para, Report, Table
from linerig.daemon.workflows.cylinder import (
    CylinderFit,
    CylinderTestError,
    SurfaceSteps,
    fit_cylinder,
    fourier_at_fraction,
    model_centre_C,
)

CMD = "cylinder"


def add_parser(subparsers: argparse._SubParsersAction) -> None:  # type: ignore[type-arg]
    p = subparsers.add_parser(CMD, help="diffusivity from a surface-step test on a specimen in a mould",
                              description="Fit the classical series solution for the centre of a cylinder whose "
                                          "surface steps to the bath temperature (Carslaw & Jaeger 1959; Newman's "
                                          "product rule for a finite cylinder).")
    p.add_argument("file", type=Path, metavar="FILE.csv")
    p.add_argument("--radius-mm", type=float, required=True, help="inside radius of the mould")
    p.add_argument("--height-mm", type=float, help="specimen height (omit for an infinite cylinder)")
    p.add_argument("--bath-C", type=float, help="bath temperature, when the CSV has no T_bath_C column")
    p.add_argument("--step-at", type=float, default=0.0, metavar="S", help="time of the step with --bath-C")
    p.add_argument("--initial-C", type=float, help="initial specimen temperature (default: fitted)")
    p.add_argument("--fit-bath", action="store_true", help="fit the last bath level too")
    p.add_argument("--no-lag", action="store_true", help="do not fit a time lag (mould wall, transfer)")
    p.add_argument("--k", type=float, metavar="W_PER_MK", help="conductivity from a needle: gives ρc = k/α")
    p.add_argument("--plot", type=Path, metavar="FILE.png")
    p.add_argument("--report", type=Path, metavar="FILE.html|FILE.pdf")
    p.add_argument("--json", action="store_true")
    add_db_option(p)  # accepted for symmetry with the other offline commands; the record is a CSV
    p.set_defaults(func=run)


def read_record(path: Path) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as e:
        raise CylinderTestError(f"{path}: cannot read ({e.strerror or e})") from e
    lines = [(i, ln) for i, ln in enumerate(text.splitlines(), start=1) if ln.strip() and not ln.startswith("#")]
    if not lines:
        raise CylinderTestError(f"{path}: empty")
    header = next(csv.reader([lines[0][1]]))
    for need in ("time_s", "T_centre_C"):
        if need not in header:
            raise CylinderTestError(f"{path}: line {lines[0][0]}: header needs {need} (has: {', '.join(header)})")
    it, ic = header.index("time_s"), header.index("T_centre_C")
    ib = header.index("T_bath_C") if "T_bath_C" in header else None
    t, c, b = [], [], []
    for line_no, ln in lines[1:]:
        cells = next(csv.reader([ln]))
        try:
            t.append(float(cells[it]))
            c.append(float(cells[ic]))
            if ib is not None:
                b.append(float(cells[ib]) if cells[ib].strip() else math.nan)
        except (ValueError, IndexError):
            raise CylinderTestError(f"{path}: line {line_no}: a value is missing or not a number") from None
    return np.array(t), np.array(c), (np.array(b) if ib is not None else None)


def run(args: argparse.Namespace) -> int:
    for opt, v, positive in (("--k", args.k, True), ("--initial-C", args.initial_C, False),
                             ("--bath-C", args.bath_C, False), ("--step-at", args.step_at, False),
                             ("--height-mm", args.height_mm, True)):
        if v is not None and (not math.isfinite(v) or (positive and v <= 0)):
            return fail(CMD, f"{opt} must be a finite number{' > 0' if positive else ''}, got {v}")
    try:
        t, centre, bath = read_record(args.file)
        if bath is not None and args.bath_C is None:
            start = float(np.nanmean(bath[t < 0])) if np.any(t < 0) else None
            steps = SurfaceSteps.from_record(t, bath, start_C=start)
        elif args.bath_C is not None:
            steps = SurfaceSteps.single(args.bath_C, args.step_at)
        else:
            return fail(CMD, f"{args.file}: no T_bath_C column: give --bath-C (and --step-at if the step is not at 0)")
        if steps.times_s.size == 0:
            return fail(CMD, f"{args.file}: the bath temperature never changes: there is no step to fit")
        r = args.radius_mm * 1e-3
        h = args.height_mm * 1e-3 if args.height_mm else None
        fit = fit_cylinder(t, centre, r, steps, h, initial_C=args.initial_C, fit_lag=not args.no_lag,
                           fit_bath=args.fit_bath)
    except CylinderTestError as e:
        return fail(CMD, str(e))
    rho_c = args.k / fit.alpha_m2_per_s if args.k else None
    if args.json:
        print(json.dumps({**fit.to_dict(), "rho_c_MJ_per_m3K": rho_c / 1e6 if rho_c else None,
                          "steps": {"times_s": steps.times_s.tolist(), "levels_C": steps.levels_C.tolist()}},
                         indent=2))
    else:
        print(f"{args.file}: {fit.geometry}, R = {args.radius_mm:g} mm, {fit.n} samples, "
              f"{steps.times_s.size} surface step(s)")
        print(f"diffusivity α = {fit.alpha_mm2_per_s:.4f} ± {2 * fit.alpha_u_m2_per_s * 1e6:.4f} mm²/s (U, k = 2)")
        print(f"initial {fit.initial_C:.3f} °C, time lag {fit.lag_s:.1f} s, "
              f"residual rms {1e3 * fit.resid_rms_K:.1f} mK")
        if fit.alpha_fo50_m2_per_s:
            print(f"half-time check: t₅₀ = {fit.t50_s:.0f} s, Fo₅₀ = {fourier_at_fraction(0.5, _hd(args)):.5f} → "
                  f"α = {fit.alpha_fo50_m2_per_s * 1e6:.4f} mm²/s (ignores the lag)")
        if rho_c:
            print(f"with k = {args.k:g} W/(m·K): ρc = {rho_c / 1e6:.3f} MJ/(m³·K)")
        print("flags: " + (", ".join(fit.flags) or "none"))
        print("note: a finite bath heat-transfer coefficient or a thick mould wall makes α read low")
    if args.plot or args.report:
        model = model_centre_C(t, fit.alpha_m2_per_s, args.radius_mm * 1e-3, _hd(args),
                               SurfaceSteps(steps.times_s, np.r_[steps.levels_C[:-1], fit.final_level_C]),
                               fit.initial_C, fit.lag_s)
        fig = plots.cylinder(t, centre, model, f"Surface-step test — {args.file.name}")
        try:
            if args.plot:
                plots.save_plot(fig, args.plot)
            if args.report:
                write_report(_report(args, fit, steps, plots.svg_bytes(fig), rho_c), args.report)
        except (ValueError, OSError) as e:
            return fail(CMD, str(e))
    return 0


def _hd(args: argparse.Namespace) -> float | None:
    return args.height_mm / (2 * args.radius_mm) if args.height_mm else None


def _report(args: argparse.Namespace, fit: CylinderFit, steps: SurfaceSteps, svg: bytes, rho_c: float | None
            ) -> Report:
    rep = workflow_report(f"Surface-step cylinder test — {args.file.name}",
                          "Diffusivity of a moulded specimen from a surface step (no probe)", "cylinder", "Y",
                          args.file.stem, str(args.file),
                          (("Specimen", f"cylinder R = {args.radius_mm:g} mm"
                            + (f", H = {args.height_mm:g} mm" if args.height_mm else ", long (infinite)")),))
    rep.add(Heading("Result"), Table(("item", "value"), (
        ("geometry", fit.geometry), ("radius mm", f(args.radius_mm)), ("height mm", f(args.height_mm)),
        ("diffusivity α mm²/s ± U (k = 2)", f"{fit.alpha_mm2_per_s:.4f} ± {2e6 * fit.alpha_u_m2_per_s:.4f}"),
        ("half-time estimate α mm²/s", f(None if fit.alpha_fo50_m2_per_s is None else fit.alpha_fo50_m2_per_s * 1e6)),
        ("initial temperature °C", f(fit.initial_C, 5)), ("time lag s", f(fit.lag_s, 3)),
        ("surface steps", "; ".join(f"{a:g} s → {b:.2f} °C" for a, b in zip(steps.times_s, steps.levels_C,
                                                                             strict=True))),
        ("ρc MJ/(m³·K)", f(rho_c / 1e6 if rho_c else None)), ("residual rms mK", f(1e3 * fit.resid_rms_K, 3)),
        ("flags", ", ".join(fit.flags) or "none"))),
        Figure(svg, "Centre temperature with the fitted series solution, and residuals."),
        Para("Model: uniform initial temperature, surface held at the bath temperature from each step on (perfect "
             "contact, thin mould wall). Centre response 1 − θ = Σ 2/(λₙJ₁(λₙ))·exp(−λₙ²Fo) for the infinite "
             "cylinder, multiplied by the slab series for a finite height (Newman's rule); steps superposed. "
             "A finite heat-transfer coefficient at the surface or a thick mould makes α read low.", "note"))
    return workflow_tail(rep, "cylinder", set(fit.flags))
