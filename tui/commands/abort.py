"""``linerig abort``: end the active run now, heater off; the run is kept with state ``aborted`` and the reason."""

from __future__ import annotations

import argparse
import asyncio
import json
import sys

from linerig.tui.client import Client, DaemonError

MAX_REASON = 500  # the daemon keeps this much of a reason
DEFAULT_REASON = "aborted from the command line"


def add_parser(sub: argparse._SubParsersAction) -> None:  # type: ignore[type-arg]
    p = sub.add_parser("abort", help="end the active run now (heater off)",
                       description="End the active run at once: the heater goes off and the run is recorded as "
                                   "aborted with the reason. A series of cycles ends with it.")
    p.add_argument("--reason", metavar="TEXT", help=f"why, kept with the run (default: {DEFAULT_REASON})")
    p.add_argument("--json", action="store_true", help="print the result as JSON")
    p.set_defaults(func=run)


async def _run(args: argparse.Namespace) -> int:
    reason = (args.reason or "").strip() or DEFAULT_REASON
    if len(reason) > MAX_REASON:
        print(f"linerig abort: --reason is {len(reason)} characters; keep it to {MAX_REASON}", file=sys.stderr)
        return 2
    async with Client(args.socket) as client:
        await client.request("abort", reason=reason)
        run = (await client.request("status")).get("run") or {}
    # the run's end reason is the one sent (the daemon records it with the state change)
    out = {"run_id": run.get("id"), "state": run.get("state"), "end_reason": reason}
    if args.json:
        print(json.dumps(out))
    else:
        print(f"run {out['run_id']} {out['state']}: {out['end_reason']}")
    return 0


def run(args: argparse.Namespace) -> int:
    try:
        return asyncio.run(_run(args))
    except DaemonError as exc:
        print(f"linerig abort: {exc}", file=sys.stderr)
        return 2
