"""``linerig start``: start a run and, with --wait, follow it to the end."""

from __future__ import annotations

import argparse
import asyncio
import json
import sys
from typing import Any

from tui.client import Client, DaemonError

METADATA = ("site", "location", "depth_m", "sample", "material", "moisture_pct", "dry_density_kg_per_m3", "notes",
            "operator")


def add_parser(sub: argparse._SubParsersAction) -> None:  # type: ignore[type-arg]
    p = sub.add_parser("start", help="start a measurement run")
    p.add_argument("--heat-s", type=float, help="heating time, s")
    p.add_argument("--recover-s", type=float, help="recovery (cooling) logging time, s")
    p.add_argument("--power", type=float, dest="power_W_per_m", help="heater power per metre, W/m")
    p.add_argument("--baseline-s", type=float, help="minimum baseline before heating, s")
    p.add_argument("--auto-stop", action="store_true", help="stop heating when the estimate has stabilised")
    p.add_argument("--cycles", type=int, help="heating–recovery cycles")
    p.add_argument("--meta", action="append", default=[], metavar="KEY=VALUE",
                   help=f"run metadata ({', '.join(METADATA)})")
    p.add_argument("--wait", action="store_true", help="follow the run to its end")
    p.add_argument("--json", action="store_true", help="print the result as JSON")
    p.set_defaults(func=run)


def _metadata(items: list[str]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for item in items:
        key, sep, value = item.partition("=")
        if not sep or key not in METADATA:
            raise SystemExit(f"linerig start: --meta {item!r}: use KEY=VALUE with KEY one of {', '.join(METADATA)}")
        try:
            out[key] = float(value) if key in ("depth_m", "moisture_pct", "dry_density_kg_per_m3") else value
        except ValueError:
            raise SystemExit(f"linerig start: --meta {key} must be a number, got {value!r}") from None
    return out


async def _run(args: argparse.Namespace) -> int:
    plan = {k: getattr(args, k) for k in ("heat_s", "recover_s", "power_W_per_m", "baseline_s", "cycles")
            if getattr(args, k) is not None}
    if args.auto_stop:
        plan["auto_stop"] = True
    async with Client(args.socket) as client:
        if args.wait:
            await client.request("subscribe")
        reply = await client.request("start", metadata=_metadata(args.meta), **plan)
        run_id = reply["run_id"]
        if not args.wait:
            print(json.dumps({"run_id": run_id}) if args.json else f"run {run_id} started")
            return 0
        final = None
        async for ev in client.events():
            if ev.get("run_id") != run_id:
                continue
            if ev["event"] == "state" and not args.json:
                print(f"run {run_id}: {ev['state']} — {ev['reason']}", file=sys.stderr)
            if ev["event"] == "run_finished":
                final = ev
                break
        detail = (await client.request("run", run_id=run_id))["run"]
        out = {"run_id": run_id, "state": final["state"] if final else detail["state"],
               "end_reason": detail.get("end_reason"), "results": detail["results"]}
        if args.json:
            print(json.dumps(out, indent=2))
        else:
            print(f"run {run_id} {out['state']}: {out['end_reason']}")
            for name, r in out["results"].items():
                if r.get("k_W_per_mK") is not None:
                    print(f"  {name}: k = {r['k_W_per_mK']:.3f} ± {r['k_u_W_per_mK'] or 0:.3f} W/(m·K), "
                          f"ρ = {r['resistivity_mK_per_W']:.3f} m·K/W, flags: {', '.join(r['flags']) or 'none'}")
        return 0 if out["state"] == "done" else 1


def run(args: argparse.Namespace) -> int:
    try:
        return asyncio.run(_run(args))
    except DaemonError as exc:
        print(f"linerig start: {exc}", file=sys.stderr)
        return 2
