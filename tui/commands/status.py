"""``linerig status``: what the daemon is doing now."""

from __future__ import annotations

import argparse
import asyncio
import json
import sys
from typing import Any

from linerig.tui.client import Client, DaemonError


def add_parser(sub: argparse._SubParsersAction) -> None:  # type: ignore[type-arg]
    p = sub.add_parser("status", help="show the daemon's state")
    p.add_argument("--json", action="store_true", help="print JSON")
    p.set_defaults(func=run)


async def _run(args: argparse.Namespace) -> int:
    async with Client(args.socket) as client:
        st = await client.request("status")
    st.pop("id", None)
    st.pop("ok", None)
    if args.json:
        print(json.dumps(st, indent=2))
    else:
        run = st.get("run")
        print(f"front end: {'connected' if st['link_up'] else 'not connected'}; "
              f"heater: {'ON' if st['heater_armed'] else 'off'}")
        print(f"run: {run['id']} {run['state']}" if run else "run: none")
        if st.get("fault"):
            print(f"last fault: {st['fault']}")
        if st.get("sync"):
            print(sync_line(st["sync"]))
    return 0


def sync_line(sy: dict[str, Any]) -> str:
    """The daemon's push to the central database in one line."""
    where = f"to {sy.get('target')}" + (f" as rig {sy['rig']}" if sy.get("rig") else "")
    last = f"in step at {str(sy['last_ok_utc'])[:19].replace('T', ' ')} UTC" if sy.get("last_ok_utc") \
        else "not yet in step"
    pushed = sy.get("pushed_since_start") or {}
    if pushed.get("runs") or pushed.get("samples"):
        last += f" ({pushed.get('runs', 0)} run(s), {pushed.get('samples', 0):,} samples pushed since start)"
    state = sy.get("state")
    if state == "pushing":
        p = sy.get("progress") or {}
        doing = f"pushing ({p['done']} of {p['of']} runs)" if "done" in p else "pushing"
        return f"sync: {doing} {where}; {last}"
    if state == "failing":
        nxt = sy.get("next_try_in_s")
        again = f"; next try in {nxt:.0f} s" if isinstance(nxt, int | float) else ""
        return f"sync: FAILING ({sy.get('failures')} tries) {where}: {sy.get('last_error')}{again}; {last}"
    waiting = (sy.get("waiting") or {}).get("open_runs")
    return f"sync: {state} {where}; {last}" + (f"; {waiting} run(s) in progress wait" if waiting else "")


def run(args: argparse.Namespace) -> int:
    try:
        return asyncio.run(_run(args))
    except DaemonError as exc:
        print(f"linerig status: {exc}", file=sys.stderr)
        return 2
