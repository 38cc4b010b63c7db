"""``linerig start``: start a run and, with --wait, follow it to the end."""

from __future__ import annotations

import argparse
import asyncio
import json
import sys
from typing import Any

from linerig.tui.client import Client, DaemonError

MAX_STOP_TOLERANCE_PCT = 20.0
"""The daemon's ceiling (``controller.MAX_STOP_TOLERANCE``) in per cent, kept here so ``start`` stays light."""
METADATA = ("site", "location", "depth_m", "sample", "material", "moisture_pct", "dry_density_kg_per_m3",
            "sample_radius_m", "notes", "operator")
NUMERIC = ("depth_m", "moisture_pct", "dry_density_kg_per_m3", "sample_radius_m")


def add_parser(sub: argparse._SubParsersAction) -> None:  # type: ignore[type-arg]
    p = sub.add_parser("start", help="start a measurement run")
    p.add_argument("--heat-s", type=float, help="heating time, s")
    p.add_argument("--recover-s", type=float, help="recovery (cooling) logging time, s")
    p.add_argument("--power", type=float, dest="power_W_per_m", help="heater power per metre, W/m")
    p.add_argument("--baseline-s", type=float, help="minimum baseline before heating, s")
    p.add_argument("--auto-stop", action="store_true",
                   help="stop heating by itself once k is predicted within the stop tolerance of a full heating")
    p.add_argument("--stop-tolerance", type=float, metavar="PCT",
                   help="the change of k an early stop may cause, %% (default 2; the stop verdict is judged on it)")
    p.add_argument("--cycles", type=int, help="heating–recovery cycles")
    p.add_argument("--reequilibrate-s", type=float, metavar="S",
                   help="with --cycles: extra wait before each later cycle's baseline, s (the ground must cool back; "
                        "several times the heating time is usual)")
    p.add_argument("--min-rest-ratio", type=float, metavar="N",
                   help="with --cycles: a later cycle heats only N heating times after the last switch-off "
                        "(default 4, which keeps the earlier heating's residual under 1 %% of k; 0 for no minimum)")
    p.add_argument("--max-drift", type=float, dest="max_drift_K_per_min", metavar="K_PER_MIN",
                   help="baseline drift that counts as settled, K/min")
    p.add_argument("--settle-timeout-s", type=float, metavar="S",
                   help="longest wait for a settled baseline before heating anyway, s")
    p.add_argument("--sensor", help="sensor that drives the live fit and the stop verdict")
    p.add_argument("--pulse", action="store_true",
                   help="a heat pulse read at the probe's radial sensor (the daemon's preset \"pulse\", from the probe "
                        "profile's [pulse] table unless rig.toml defines one); --heat-s is the pulse, --recover-s the "
                        "decay recorded after it")
    p.add_argument("--preset", help="a run preset from the daemon's rig.toml [presets] (options given here override "
                                    "it)")
    p.add_argument("--meta", action="append", default=[], metavar="KEY=VALUE",
                   help=f"run metadata ({', '.join(METADATA)})")
    p.add_argument("--wait", action="store_true", help="follow the run to its end")
    p.add_argument("--json", action="store_true", help="print the result as JSON")
    p.set_defaults(func=run)


PLAN_OPTIONS = ("heat_s", "recover_s", "power_W_per_m", "baseline_s", "cycles", "reequilibrate_s", "min_rest_ratio",
                "max_drift_K_per_min", "settle_timeout_s", "sensor", "preset")


class StartOptionError(ValueError):
    """A --meta item the daemon would refuse; the message names it and says what to give."""


def metadata(items: list[str]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for item in items:
        key, sep, value = item.partition("=")
        if not sep or key not in METADATA:
            raise StartOptionError(f"--meta {item!r}: use KEY=VALUE with KEY one of {', '.join(METADATA)}")
        try:
            out[key] = float(value) if key in NUMERIC else value
        except ValueError:
            raise StartOptionError(f"--meta {key} must be a number, got {value!r}") from None
    return out


def start_request(args: argparse.Namespace) -> dict[str, Any]:
    """The fields of the daemon's ``start`` request (daemon/API.md) from the options given."""
    req: dict[str, Any] = {k: getattr(args, k) for k in PLAN_OPTIONS if getattr(args, k) is not None}
    if args.pulse:
        if args.preset is not None and args.preset != "pulse":
            raise StartOptionError(f"--pulse runs the preset \"pulse\"; it cannot go with --preset {args.preset}")
        if args.auto_stop:
            raise StartOptionError("--auto-stop does not go with --pulse: a pulse heats for its planned time")
        req["preset"] = "pulse"
    if args.auto_stop:
        req["auto_stop"] = True
    if args.stop_tolerance is not None:
        if not 0 < args.stop_tolerance <= MAX_STOP_TOLERANCE_PCT:
            raise StartOptionError(f"--stop-tolerance must be a percentage above 0 and at most "
                                   f"{MAX_STOP_TOLERANCE_PCT:g}, got {args.stop_tolerance:g}")
        req["stop_tolerance"] = args.stop_tolerance / 100.0
    req["metadata"] = metadata(args.meta)
    return req


async def _run(args: argparse.Namespace) -> int:
    try:
        request = start_request(args)
    except StartOptionError as e:
        print(f"linerig start: {e}", file=sys.stderr)
        return 2
    async with Client(args.socket) as client:
        if args.wait:
            await client.request("subscribe")
        reply = await client.request("start", **request)
        run_id = reply["run_id"]
        if not args.wait:
            print(json.dumps({"run_id": run_id}) if args.json else f"run {run_id} started")
            return 0
        if reply.get("series_id") is not None:
            return await _follow_series(client, reply["series_id"], args.json)
        final = None
        async for ev in client.events():
            if ev.get("run_id") != run_id:
                continue
            if ev["event"] == "state" and not args.json:
                print(f"run {run_id}: {ev['state']} — {ev['reason']}", file=sys.stderr)
            if ev["event"] == "run_finished":
                final = ev
                break
        out = await _run_outcome(client, run_id, final["state"] if final else None)
        if args.json:
            print(json.dumps(out, indent=2))
        else:
            _print_run(out)
        return 0 if out["state"] == "done" else 1


async def _run_outcome(client: Client, run_id: int, state: str | None) -> dict[str, Any]:
    detail = (await client.request("run", run_id=run_id))["run"]
    return {"run_id": run_id, "state": state or detail["state"], "end_reason": detail.get("end_reason"),
            "results": detail["results"]}


async def _follow_series(client: Client, series_id: int, as_json: bool) -> int:
    """Every cycle of a series is its own run: follow them all until the series ends."""
    runs: list[dict[str, Any]] = []
    state = "unknown"
    async for ev in client.events():
        if ev.get("series_id") != series_id:
            continue
        if ev["event"] == "state" and not as_json:
            print(f"cycle {ev.get('cycle')}/{ev.get('cycles')} run {ev['run_id']}: {ev['state']} — {ev['reason']}",
                  file=sys.stderr)
        elif ev["event"] == "run_finished":
            runs.append(await _run_outcome(client, ev["run_id"], ev["state"]))
        elif ev["event"] == "series_finished":
            state = ev["state"]
            break
    if as_json:
        print(json.dumps({"series_id": series_id, "state": state, "runs": runs}, indent=2))
    else:
        print(f"series {series_id} {state}: {len(runs)} cycle(s)")
        for out in runs:
            _print_run(out)
    return 0 if state == "done" and all(r["state"] == "done" for r in runs) else 1


def _print_run(out: dict[str, Any]) -> None:
    print(f"run {out['run_id']} {out['state']}: {out['end_reason']}")
    for name, r in out["results"].items():
        if r.get("k_W_per_mK") is not None:
            extra = ""
            if r.get("rho_c_MJ_per_m3K") is not None and r.get("method") == "pulse":
                extra = (f", α = {r['alpha_mm2_per_s']:.3f} mm²/s, ρc = {r['rho_c_MJ_per_m3K']:.3f} ± "
                         f"{2 * (r.get('rho_c_u_MJ_per_m3K') or 0):.3f} MJ/(m³·K) (± U)")
            print(f"  {name}: k = {r['k_W_per_mK']:.3f} ± {2 * (r['k_u_W_per_mK'] or 0):.3f} W/(m·K) (± U, k = 2), "
                  f"ρ = {r['resistivity_mK_per_W']:.3f} m·K/W{extra}, flags: {', '.join(r['flags']) or 'none'}")


def run(args: argparse.Namespace) -> int:
    try:
        return asyncio.run(_run(args))
    except DaemonError as exc:
        print(f"linerig start: {exc}", file=sys.stderr)
        return 2
