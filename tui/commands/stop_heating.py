"""``linerig stop-heating``: end the heating of the active run now; recovery is logged as planned.

The command-line twin of the screen's "heating can stop" answer, for a run started without ``--wait``.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import sys

from linerig.tui.client import Client, DaemonError


def add_parser(sub: argparse._SubParsersAction) -> None:  # type: ignore[type-arg]
    p = sub.add_parser("stop-heating", help="end the heating of the active run; its recovery is still logged",
                       description="End the heating of the active run at the next sample. The run goes on to its "
                                   "recovery (cooling) phase and ends as planned; to end it at once, use abort.")
    p.add_argument("--json", action="store_true", help="print the result as JSON")
    p.set_defaults(func=run)


async def _run(args: argparse.Namespace) -> int:
    async with Client(args.socket) as client:
        await client.request("stop_heating")
        run = (await client.request("status")).get("run") or {}
    out = {"run_id": run.get("id"), "state": run.get("state"), "stable_at_s": run.get("stable_at_s")}
    if args.json:
        print(json.dumps(out))
    else:
        when = "the estimate is stable" if out["stable_at_s"] is not None else "the estimate is not yet stable"
        print(f"run {out['run_id']}: heating stops at the next sample ({when}); recovery is logged as planned")
    return 0


def run(args: argparse.Namespace) -> int:
    try:
        return asyncio.run(_run(args))
    except DaemonError as exc:
        print(f"linerig stop-heating: {exc}", file=sys.stderr)
        return 2
