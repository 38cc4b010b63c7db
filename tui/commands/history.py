"""``linerig history``: stored runs filtered by site and date, or one run in detail (the UI's history, as text)."""

from __future__ import annotations

import argparse
import asyncio
import datetime as dt
import json
import sys
from typing import Any

from linerig.tui.client import Client, DaemonError


def add_parser(sub: argparse._SubParsersAction) -> None:  # type: ignore[type-arg]
    p = sub.add_parser("history", help="list stored runs, or show one")
    p.add_argument("run_id", nargs="?", type=int, help="show this run in detail")
    p.add_argument("--site", default="", help="only runs whose site contains this text")
    p.add_argument("--since", default="", metavar="YYYY-MM-DD", help="only runs started on or after this day (UTC)")
    p.add_argument("--until", default="", metavar="YYYY-MM-DD", help="only runs started on or before this day (UTC)")
    p.add_argument("--limit", type=int, default=200, help="look at this many recent runs (default 200)")
    p.add_argument("--json", action="store_true", help="print JSON")
    p.add_argument("--central", metavar="URL", help="every rig's runs from the central PostgreSQL database (a libpq "
                                                     "connection string) instead of the daemon's")
    p.add_argument("--rig", metavar="NAME", help="with --central: only this rig's runs (and the rig of RUN_ID)")
    p.set_defaults(func=run)


async def _run(args: argparse.Namespace) -> int:
    async with Client(args.socket) as client:
        if args.run_id is not None:
            detail = (await client.request("run", run_id=args.run_id))["run"]
            print(json.dumps(detail, indent=2) if args.json else _detail_text(detail))
            return 0
        runs = (await client.request("runs", limit=args.limit))["runs"]
    return _print_runs(args, runs)


def _print_runs(args: argparse.Namespace, runs: list[dict[str, Any]]) -> int:
    from linerig.tui.screens.history import filter_runs

    shown = filter_runs(runs, args.site, args.since, args.until)
    if args.json:
        print(json.dumps(shown, indent=2, default=str))
        return 0
    from linerig.tui.tables import print_table

    rigs = any("rig" in r for r in shown)  # read from the central database: the rig of each run
    lead = ("rig",) if rigs else ()
    print_table("", (*lead, "run", "started (UTC)", "state", "site", "borehole", "tip depth m", "sample",
                     "k W/(m·K)", "± U (k = 2)"),
                [(*((str(r.get("rig")),) if rigs else ()), str(r["id"]),
                  str(r.get("created_utc") or "")[:16].replace("T", " "), str(r.get("state") or "?"),
                  str(r.get("site") or ""), str(r.get("location") or ""), _num(r.get("depth_m"), ".2f"),
                  str(r.get("sample") or ""), _num(r.get("k_W_per_mK"), ".3f"),
                  _num(2 * r["k_u_W_per_mK"] if isinstance(r.get("k_u_W_per_mK"), int | float) else None, ".3f"))
                 for r in shown], right=tuple(i + len(lead) for i in (0, 5, 7, 8)))
    print(f"{len(shown)} of {len(runs)} runs", file=sys.stderr)
    return 0


def _central(args: argparse.Namespace) -> int:
    """The same listing and detail from the central database: each run once, with its rig."""
    from linerig.daemon.central.connect import connect
    from linerig.daemon.central.read import CentralRuns, list_runs

    with connect(args.central, application="linerig-read") as conn:
        if args.run_id is None:
            return _print_runs(args, list_runs(conn, args.limit, args.rig))
        src = CentralRuns(conn, args.central)
        rigs = [args.rig] if args.rig else src.rigs_with_run(args.run_id)
        if len(rigs) != 1:
            print(f"linerig history: run {args.run_id} is on " + (f"rigs {', '.join(rigs)}: give --rig NAME"
                  if rigs else "no rig on the central server"), file=sys.stderr)
            return 2
        detail = src.run(rigs[0], args.run_id)
    print(json.dumps(detail, indent=2, default=str) if args.json else _detail_text(detail))
    return 0


def _num(v: Any, spec: str) -> str:
    return format(v, spec) if isinstance(v, int | float) else "—"


def _is_date(day: str) -> bool:
    try:
        dt.date.fromisoformat(day)
    except ValueError:
        return False
    return True


def _detail_text(d: dict[str, Any]) -> str:
    rig = f" of rig {d['rig']}" if d.get("rig") else ""
    lines = [f"run {d['id']}{rig}: {d.get('state')} — {d.get('end_reason') or ''}",
             f"  site {d.get('site') or '-'}, spot {d.get('location') or '-'}, sample {d.get('sample') or '-'}, "
             f"material {d.get('material') or '-'}, probe {d.get('probe_serial') or '-'}"]
    for name, r in (d.get("results") or {}).items():
        k, ku = r.get("k_W_per_mK"), r.get("k_u_W_per_mK")
        if isinstance(k, int | float):
            flags = ", ".join(r.get("flags") or []) or "none"
            lines.append(f"  {name}: k = {k:.3f} ± {2 * (ku or 0):.3f} W/(m·K) (± U, k = 2), flags: {flags}")
    for ev in d.get("events") or []:
        lines.append(f"  {ev.get('wall_utc') or '':<24} {ev.get('kind') or '':<9} {ev.get('reason') or ''}")
    return "\n".join(lines)


def run(args: argparse.Namespace) -> int:
    from linerig.daemon.central.errors import CentralError
    from linerig.daemon.report.sources import SourceError
    from linerig.tui.screens.history import DATE

    for day in (args.since, args.until):
        if day and not (DATE.match(day) and _is_date(day)):
            print(f"linerig history: dates are YYYY-MM-DD (a real calendar day), got {day!r}", file=sys.stderr)
            return 2
    if args.rig is not None and args.central is None:
        print("linerig history: --rig goes with --central URL (the daemon holds one rig's runs)", file=sys.stderr)
        return 2
    try:
        return _central(args) if args.central is not None else asyncio.run(_run(args))
    except CentralError as exc:
        print(f"linerig history: {exc}", file=sys.stderr)
        return exc.exit_code
    except (DaemonError, SourceError) as exc:
        print(f"linerig history: {exc}", file=sys.stderr)
        return 2
