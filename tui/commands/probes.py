"""``linerig probes``: the probes the daemon knows, the one in use, and each probe's calibration factors."""

from __future__ import annotations

import argparse
import asyncio
import json
import sys

from linerig.tui.client import Client, DaemonError


def add_parser(sub: argparse._SubParsersAction) -> None:  # type: ignore[type-arg]
    p = sub.add_parser("probes", help="list probes and their calibration history")
    p.add_argument("--json", action="store_true", help="print JSON")
    p.set_defaults(func=run)


async def _run(args: argparse.Namespace) -> int:
    from linerig.tui.screens.probes import factor_rows

    async with Client(args.socket) as client:
        reply = await client.request("probes")
        probes = list(reply.get("probes") or [])
        active = reply.get("active") or {}
        if active.get("serial") and all(p.get("serial") != active["serial"] for p in probes):
            probes.insert(0, active)
        cals = {p["serial"]: (await client.request("calibrations", probe_serial=p["serial"]))["calibrations"]
                for p in probes if p.get("serial")}
    if args.json:
        print(json.dumps({"active": active, "probes": probes, "calibrations": cals}, indent=2))
        return 0
    for p in probes:
        mark = "in use" if p.get("serial") == active.get("serial") else ""
        print(f"{p.get('serial')}  {p.get('name') or ''}  ({p.get('kind') or '?'})  {mark}")
        rows = factor_rows(cals.get(p.get("serial"), []))
        if not rows:
            print("    no calibrations")
        for row in rows:
            print(f"    #{row[0]} {row[1]} {row[2]}: factor {row[5] or '-'} (± U, k = 2), accepted {row[6]}, "
                  f"expires {row[7] or '-'}")
    return 0


def run(args: argparse.Namespace) -> int:
    try:
        return asyncio.run(_run(args))
    except DaemonError as exc:
        print(f"linerig probes: {exc}", file=sys.stderr)
        return 2
