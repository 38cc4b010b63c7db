"""``linerig status``: what the daemon is doing now."""

from __future__ import annotations

import argparse
import asyncio
import json
import sys

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
    return 0


def run(args: argparse.Namespace) -> int:
    try:
        return asyncio.run(_run(args))
    except DaemonError as exc:
        print(f"linerig status: {exc}", file=sys.stderr)
        return 2
