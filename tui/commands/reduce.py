"""``linerig reduce FILE.csv``: thermal properties from a recorded run, as a table, JSON or a plot.

Exit codes: 0 result printed; 2 bad input (the message names the file, line/row and column, or the option).
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path

from linerig.daemon.logger_import import LoggerImportError, import_file, read_map
from linerig.daemon.probe import ProbeProfile, ProbeProfileError, load_probe_profile, sensor_mm, stored_profile
from linerig.daemon.reduction.api import METHODS, RunReduction, reduce_run
from linerig.daemon.reduction.data import ReductionError, RunData
from linerig.daemon.runcsv import (
    PROBE_PROFILE,
    PROBE_SERIAL,
    HeaderValue,
    RunCsvError,
    file_calibration,
    file_sample_radius_m,
    read_run_file,
)

EXIT_BAD_INPUT = 2


def add_parser(subparsers: argparse._SubParsersAction) -> None:  # type: ignore[type-arg]
    p = subparsers.add_parser("reduce", help="thermal conductivity (and more) from a run CSV",
                              description="Reduce a run CSV (time_s, q_W_per_m, T_<sensor>_C ...) to thermal "
                                          "conductivity, resistivity, diffusivity and heat capacity per sensor.")
    p.add_argument("file", metavar="FILE.csv", type=Path, help="run record (or a logger's export, with --map)")
    p.add_argument("--map", metavar="MAP.toml", type=Path,
                   help="FILE is a data logger's export: read it as `linerig import` does with this map")
    p.add_argument("--json", action="store_true", help="print JSON for machines instead of a table")
    p.add_argument("--probe", metavar="PROFILE.toml", type=Path, help="probe profile (geometry, heat capacity)")
    p.add_argument("--radius-mm", type=float, help="heated needle radius (overrides the profile)")
    p.add_argument("--length-mm", type=float, help="heater length (overrides the profile)")
    p.add_argument("--probe-heat-capacity", metavar="MJ_PER_M3K", type=float,
                   help="volumetric heat capacity of the needle (overrides the profile)")
    p.add_argument("--spacing", metavar="SENSOR=MM", action="append", default=[],
                   help="radial distance of a sensor from the heater axis (repeatable); a dual needle's calibrated "
                        "spacing (linerig calibrate --spacing) goes here")
    p.add_argument("--spacing-u", metavar="SENSOR=MM", action="append", default=[],
                   help="standard uncertainty of a sensor's spacing (default: the profile's radial_u_mm, else 1 %%)")
    p.add_argument("--sample-radius-mm", metavar="MM", type=float,
                   help="the probe sits on the axis of a sample this wide (a lab cell or core): the window ends "
                        "before its outer face bends the line (default: the file's sample_radius_m, else none)")
    p.add_argument("--calibration-factor", metavar="F", type=float,
                   help="probe factor to apply (default: the file's calibration_factor header, else 1)")
    p.add_argument("--calibration-factor-u", metavar="U", type=float,
                   help="standard uncertainty of the probe factor (default: the file's, else 0)")
    p.add_argument("--method", choices=METHODS, default="auto", help="reduction method (default: auto)")
    p.add_argument("--window", nargs=2, type=float, metavar=("START", "END"), help="fit window in s")
    p.add_argument("--max-rise", metavar="K", type=float, help="flag a temperature rise above this")
    p.add_argument("--bulk-density", metavar="KG_PER_M3", type=float, help="gives specific heat J/(kg·K)")
    p.add_argument("--plot", metavar="FILE.png", type=Path, help="write ΔT vs ln t, residuals and estimate history")
    p.set_defaults(func=run)


def _fail(msg: str) -> int:
    print(f"linerig reduce: error: {msg}", file=sys.stderr)
    return EXIT_BAD_INPUT


def build_probe(args: argparse.Namespace, from_file: ProbeProfile | None = None) -> ProbeProfile | None:
    """The profile from --probe (else the one the file carries), with the dimension options applied on top (or a
    profile made from them)."""
    probe = load_probe_profile(args.probe) if args.probe else from_file
    if args.radius_mm is not None:
        if not (args.radius_mm > 0 and math.isfinite(args.radius_mm)):
            raise ProbeProfileError(f"--radius-mm must be > 0, got {args.radius_mm}")
        probe = (ProbeProfile(name="command line", radius_mm=args.radius_mm) if probe is None
                 else _replace(probe, radius_mm=args.radius_mm))
    for opt, field in (("length_mm", "heater_length_mm"), ("probe_heat_capacity", "heat_capacity_MJ_per_m3K")):
        v = getattr(args, opt)
        if v is None:
            continue
        if not (v > 0 and math.isfinite(v)):
            raise ProbeProfileError(f"--{opt.replace('_', '-')} must be > 0, got {v}")
        if probe is None:
            raise ProbeProfileError(f"--{opt.replace('_', '-')} needs --radius-mm or --probe")
        probe = _replace(probe, **{field: v})
    for item in args.spacing:
        name, dist = sensor_mm(item, "--spacing", "far=6.0")
        if probe is None:
            raise ProbeProfileError("--spacing needs --radius-mm or --probe (the heater radius)")
        probe = probe.with_sensor(name, dist)
    for item in args.spacing_u:
        name, u = sensor_mm(item, "--spacing-u", "needle8=0.03")
        if probe is None or not probe.has_sensor(name) or probe.sensor(name).is_on_heater:
            raise ProbeProfileError(f"--spacing-u {item!r}: {name!r} is not a radial sensor of the probe (give "
                                    "--probe or --spacing for it)")
        probe = probe.with_sensor(name, probe.sensor(name).radial_mm, u, probe.sensor(name).spacing_calibrated)
    return probe


def in_sample(args: argparse.Namespace, meta: dict[str, HeaderValue], name: str,
              probe: ProbeProfile | None) -> ProbeProfile | None:
    """The probe in the sample --sample-radius-mm (else the file's ``sample_radius_m``) gives, said on stderr."""
    radius = args.sample_radius_mm * 1e-3 if args.sample_radius_mm is not None else None
    said = "--sample-radius-mm"
    if radius is None:
        radius, said = file_sample_radius_m(meta, name), name
    if radius is None or (probe is not None and probe.sample_radius_m == radius):
        return probe
    if probe is None:
        raise ProbeProfileError(f"a sample radius ({said}) needs --probe or --radius-mm (the probe's geometry)")
    _note(f"the probe sits in a sample of radius {radius * 1e3:g} mm ({said}): the window ends before its outer "
          "face bends the line")
    return probe.in_sample(radius)


def _replace(probe: ProbeProfile, **kw: float) -> ProbeProfile:
    from dataclasses import replace

    return replace(probe, **kw)


def _note(msg: str, cmd: str = "reduce") -> None:
    print(f"linerig {cmd}: {msg}", file=sys.stderr)


def file_probe(meta: dict[str, HeaderValue], name: str) -> ProbeProfile | None:
    """The probe profile a run CSV carries in its header (``probe_profile``), or None."""
    v = meta.get(PROBE_PROFILE)
    if v is None:
        return None
    try:
        return stored_profile(v.text, f"{name}: line {v.line}: {PROBE_PROFILE}")
    except (ValueError, TypeError) as e:  # json.JSONDecodeError and ProbeProfileError are ValueErrors
        raise ProbeProfileError(str(e) if isinstance(e, ProbeProfileError)
                                else f"{name}: line {v.line}: {PROBE_PROFILE} is not a probe profile ({e})") from e


def calibration_to_apply(args: argparse.Namespace, meta: dict[str, HeaderValue], name: str,
                         probe: ProbeProfile | None, cmd: str = "reduce") -> tuple[float, float]:
    """The probe factor and its u: the command line's, else the file's; every choice is said on stderr.

    A file that names its probe but no factor, a factor given against the file's, or a profile of another probe
    than the file's is reported as a warning, so a result is never calibrated (or not) without a word.
    """
    cal = file_calibration(meta, name)
    serial = meta[PROBE_SERIAL].text if PROBE_SERIAL in meta else None
    if probe is not None and probe.serial and serial and probe.serial != serial:
        _note(f"warning: {name} was recorded with probe {serial}, the profile given is probe {probe.serial}", cmd)
    if args.calibration_factor is not None:
        f = args.calibration_factor
        fu = args.calibration_factor_u if args.calibration_factor_u is not None else 0.0
        if cal is not None and (abs(cal.factor - f) > 1e-12 or abs(cal.factor_u - fu) > 1e-12):
            _note(f"warning: applying --calibration-factor {f:g} ± {fu:g}; {name} says its result carries "
                  f"{cal.factor:g} ± {cal.factor_u:g} ({cal.source or 'no source given'})", cmd)
        return f, fu
    if cal is not None:
        fu = args.calibration_factor_u if args.calibration_factor_u is not None else cal.factor_u
        _note(f"applying the probe factor {cal.factor:g} ± {fu:g} from {name}"
              + (f" (probe {serial})" if serial else "") + (f": {cal.source}" if cal.source else ""), cmd)
        return cal.factor, fu
    if serial:
        _note(f"warning: {name} names probe {serial} but no calibration_factor: k is as measured (factor 1); "
              "give --calibration-factor F if the probe has a calibration", cmd)
    return 1.0, args.calibration_factor_u or 0.0


def run(args: argparse.Namespace) -> int:
    try:
        # a logger's export (--map) carries no header metadata: the probe and factor come from the options
        data, meta = read_run_file(Path(args.file)) if args.map is None else (read_logger_file(args), {})
    except (RunCsvError, LoggerImportError, ProbeProfileError, ReductionError) as e:
        # ReductionError: values outside physical bounds
        return _fail(str(e))
    problem = option_problem(args)
    if problem:
        return _fail(problem)
    try:
        carried = None if args.probe else file_probe(meta, str(args.file))
        probe = build_probe(args, carried)
        if carried is not None and not args.probe:
            _note(f"probe profile {carried.serial or carried.name!r} from {args.file}")
        probe = in_sample(args, meta, str(args.file), probe)
        factor, factor_u = calibration_to_apply(args, meta, str(args.file), probe)
    except (ProbeProfileError, RunCsvError) as e:
        return _fail(str(e))
    try:
        red = reduce_run(data, probe, method=args.method, calibration_factor=factor, calibration_factor_u=factor_u,
                         window_s=tuple(args.window) if args.window else None, max_rise_K=args.max_rise,
                         bulk_density_kg_per_m3=args.bulk_density)
    except (ReductionError, ProbeProfileError) as e:
        return _fail(f"{args.file}: {e}")
    if args.json:
        print(json.dumps(red.to_json(), indent=2, allow_nan=False))
    else:
        print_table(red, str(args.file))
    if args.plot:
        try:
            plot(red, data, probe, args.plot)
        except (OSError, ValueError) as e:  # ValueError: matplotlib knows no format for the file's suffix
            return _fail(f"cannot write plot {args.plot}: {e}")
    return 0


def read_logger_file(args: argparse.Namespace) -> RunData:
    """The run in a logger export (``--map``), its choices said on stderr so --json stays clean. The heater length
    is the map's, else --length-mm, else the probe profile's."""
    length, said = args.length_mm, "--length-mm"
    if length is None and args.probe is not None:
        length, said = load_probe_profile(args.probe).heater_length_mm, f"the probe profile {args.probe}"
    imported = import_file(Path(args.file), read_map(args.map), length_mm=length, length_from=said)
    for c in imported.choices:
        print(f"linerig reduce: {c.text()}", file=sys.stderr)
    return imported.data


def option_problem(args: argparse.Namespace) -> str | None:
    """What is wrong with the numeric options, before any reduction is tried (None when nothing is)."""
    checks = (("--calibration-factor", args.calibration_factor, False),
              ("--calibration-factor-u", args.calibration_factor_u, True),
              ("--max-rise", args.max_rise, False), ("--bulk-density", args.bulk_density, False))
    for opt, v, zero_ok in checks:
        if v is None:
            continue
        if not math.isfinite(v) or v < 0 or (v == 0 and not zero_ok):
            return f"{opt} must be a finite number {'>= 0' if zero_ok else '> 0'}, got {v}"
    return None


def _fmt(v: float | None, digits: int = 4) -> str:
    return "—" if v is None or not math.isfinite(v) else f"{v:.{digits}g}"


def print_table(red: RunReduction, title: str) -> None:
    from rich.console import Console
    from rich.table import Table

    table = Table(title=f"Reduction of {title}")
    table.add_column("sensor")
    table.add_column("k W/(m·K)", justify="right")
    table.add_column("U (k=2)", justify="right")
    table.add_column("ρ °C·cm/W", justify="right")
    table.add_column("α mm²/s", justify="right")
    table.add_column("ρc MJ/(m³·K)", justify="right")
    table.add_column("window s", justify="right")
    table.add_column("stable at s", justify="right")
    table.add_column("method")
    table.add_column("flags")
    for name, r in red.sensors.items():
        j = r.to_json()
        win = r.window_s
        table.add_row(name, _fmt(r.k_W_per_mK), _fmt(r.k_U_W_per_mK, 2), _fmt(j["resistivity_Ccm_per_W"]),  # type: ignore[arg-type]
                      _fmt(j["alpha_mm2_per_s"], 3), _fmt(j["rho_c_MJ_per_m3K"], 3),  # type: ignore[arg-type]
                      f"{win[0]:.0f}–{win[1]:.0f}" if win else "—", _fmt(r.stable_at_s, 4), r.method,
                      ", ".join(r.flags) or "ok")
    # a pipe or a file gets a fixed width so the numbers are never cut to "…"
    console = Console() if sys.stdout.isatty() else Console(width=150)
    console.print(table)
    for name, r in red.sensors.items():
        console.print(f"[b]{name}[/b]: {r.method_reason}")
        for n in r.notes:
            console.print(f"  note: {n}")


def plot(red: RunReduction, data: RunData, probe: ProbeProfile | None, path: Path) -> None:
    """ΔT against ln t with the fitted line and window, its residuals, and the live estimate's history."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    import numpy as np

    from linerig.daemon.reduction.live import replay
    from linerig.daemon.report.plots import model_curve

    names = list(red.sensors)
    fig, axes = plt.subplots(3, len(names), figsize=(5.5 * len(names), 9), squeeze=False)
    t = data.time_s
    for c, name in enumerate(names):
        r = red.sensors[name]
        T = data.temps_C[name]
        dT = T - r.baseline.at(t) if r.baseline else T - T[0]
        heat = (t > 0) & (t <= (r.heating_s or t[-1]))
        ax, axr, axk = axes[0, c], axes[1, c], axes[2, c]
        ax.plot(np.log(t[heat]), dT[heat], ".", ms=2, label="ΔT")
        lt = np.log(t[heat])
        # the fit drawn is the one behind the reported k: its method and its window
        fit = (r.line.slope_K * lt + r.line.intercept_K if r.method == "line" and r.line is not None
               else model_curve(data, r, probe, t[heat]) if r.method in ("model", "radial") else None)
        if fit is not None and r.window_s is not None:
            ax.plot(lt, fit, "-", lw=1, label=f"{r.method} fit, k = {_fmt(r.k_W_per_mK)}")
            w = (t[heat] >= r.window_s[0]) & (t[heat] <= r.window_s[1])
            axr.plot(lt[w], (dT[heat] - fit)[w] * 1e3, ".", ms=2)
            for edge in r.window_s:
                if edge > 0:
                    ax.axvline(math.log(edge), color="grey", ls="--", lw=0.8)
        ax.set_title(f"{name}: {r.method}, k = {_fmt(r.k_W_per_mK)} W/(m·K)")
        ax.set_xlabel("ln(t / s)")
        ax.set_ylabel("ΔT (K)")
        ax.legend(fontsize=8)
        axr.axhline(0, color="grey", lw=0.8)
        axr.set_xlabel("ln(t / s)")
        axr.set_ylabel("residual (mK)")
        _, ests = replay(t, T, data.q_W_per_m, probe, name, calibration_factor=r.calibration_factor)
        if ests:
            et = np.array([e.t_s for e in ests])
            ek = np.array([e.k_W_per_mK for e in ests])
            eu = np.array([e.k_u_W_per_mK for e in ests])
            axk.plot(et, ek, "-", lw=1)
            axk.fill_between(et, ek - 2 * eu, ek + 2 * eu, alpha=0.2)
            if r.stable_at_s is not None:
                axk.axvline(r.stable_at_s, color="green", ls=":", label=f"stable at {r.stable_at_s:.0f} s")
                axk.legend(fontsize=8)
        axk.set_xlabel("t (s)")
        axk.set_ylabel("live k (W/(m·K))")
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
