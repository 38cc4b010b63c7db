"""``linerig sync --db FILE --to URL``: push a rig's store to the central PostgreSQL database.

Store-and-forward: whatever the server lacks goes, run by run; a cut at any point is resumed by running it again, and
a second run changes nothing. Exit 0 when pushed (or nothing to push), 2 when the input or the server says no (the
message says what to do), 3 when the server cannot be reached now or another push of the store is running.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path
from typing import Any

from linerig.daemon.paths import default_db_path

CMD = "sync"
PROGRESS_EVERY_S = 2.0


def add_parser(sub: argparse._SubParsersAction) -> None:  # type: ignore[type-arg]
    p = sub.add_parser(CMD, help="push this rig's runs to a central PostgreSQL database",
                       description="Push ended runs with their samples, events and results, and the probes, "
                                   "calibrations, series and qualifications, to a central PostgreSQL database. "
                                   "Only what the server lacks is sent; run it again after a cut.")
    p.add_argument("--db", type=Path, default=None, metavar="PATH",
                   help="the rig's database (default: the daemon's, $LINERIG_DB or the data directory)")
    p.add_argument("--to", required=True, metavar="URL",
                   help="libpq connection string: postgresql://ROLE@HOST/DBNAME?sslmode=verify-full, or "
                        "service=NAME (~/.pg_service.conf); the password comes from ~/.pgpass or PGPASSFILE")
    p.add_argument("--rig", metavar="NAME", help="name this rig (recorded in the database; default: the name "
                                                 "recorded there, from [sync] rig or made when the file was made)")
    out = p.add_mutually_exclusive_group()
    out.add_argument("--json", action="store_true", help="print the summary as JSON")
    out.add_argument("--json-lines", action="store_true", help="print progress and the summary as JSON lines")
    p.add_argument("--nice", type=int, default=0, metavar="N", help="lower this process's CPU priority by N "
                                                                   "(linerigd runs its syncs at 10)")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from linerig.daemon.central.connect import connect, describe, has_password
    from linerig.daemon.central.errors import CentralError
    from linerig.daemon.central.local import LocalStore
    from linerig.daemon.central.push import push

    if not 0 <= args.nice <= 19:
        return _fail(f"--nice must be from 0 to 19, got {args.nice}", 2)
    if args.nice:
        os.nice(args.nice)
    if args.rig is not None and not args.rig.strip():
        return _fail("--rig needs a name", 2)
    try:
        target = describe(args.to)
        if has_password(args.to):
            print(f"linerig {CMD}: note: a password on the command line is visible to other users of this machine; "
                  "put it in ~/.pgpass (or PGPASSFILE) or a service file instead", file=sys.stderr)
        local = LocalStore(args.db if args.db is not None else default_db_path())
        try:
            with connect(args.to, application="linerig-sync") as conn:
                summary = push(local, conn, args.rig.strip() if args.rig else None,
                               _progress_printer(args.json_lines))
        finally:
            local.close()
    except CentralError as exc:
        if args.json_lines:
            _line({"event": "error", "kind": type(exc).__name__, "message": str(exc), "exit": exc.exit_code})
        return _fail(str(exc), exc.exit_code)
    if local.migrated_from is not None:
        print(f"linerig {CMD}: note: {local.path} was brought from schema {local.migrated_from} up to date first",
              file=sys.stderr)
    d = summary.to_dict()
    if args.json:
        print(json.dumps({"target": target, **d}, indent=2))
    elif not args.json_lines:
        print(_text(target, d))
    return 0


def _fail(msg: str, code: int) -> int:
    print(f"linerig {CMD}: error: {msg}", file=sys.stderr)
    return code


def _line(event: dict[str, Any]) -> None:
    sys.stdout.write(json.dumps(event) + "\n")
    sys.stdout.flush()


def _progress_printer(json_lines: bool) -> Any:
    """JSON lines (every event) or, for people, a line on stderr at most every PROGRESS_EVERY_S."""
    if json_lines:
        return _line
    last = [time.monotonic()]

    def show(ev: dict[str, Any]) -> None:
        if ev.get("event") == "start" and ev.get("runs"):
            print(f"linerig {CMD}: {ev['runs']} run(s) and {ev['samples']:,} samples to push as rig {ev['rig']!r}",
                  file=sys.stderr)
        elif ev.get("event") == "run" and time.monotonic() - last[0] >= PROGRESS_EVERY_S:
            last[0] = time.monotonic()
            rate = ev["rows"] / ev["seconds"] if ev["seconds"] > 0 else 0.0
            print(f"linerig {CMD}: {ev['done']} of {ev['of']} runs, {ev['samples']:,} of {ev['samples_total']:,} "
                  f"samples ({rate:,.0f} rows/s)", file=sys.stderr)

    return show


def _text(target: str, d: dict[str, Any]) -> str:
    pushed = d["pushed"]
    lines = [f"rig {d['rig']} (store {d['store']}) → {target}, central schema {d['central_version']}"]
    if d["rows"]:
        parts = [f"{n:,} {k.replace('_', ' ')}" for k, n in pushed.items() if n]
        lines.append(f"pushed {', '.join(parts)} in {d['seconds']:.1f} s ({d['rows_per_s']:,.0f} rows/s)")
    else:
        lines.append("nothing to push: the server has everything this database holds")
    w = d["waiting"]
    if w.get("open_runs"):
        lines.append(f"waiting: {w['open_runs']} run(s) still in progress (pushed once they end)")
    if w.get("events") or w.get("results"):
        lines.append(f"waiting: {w.get('events', 0)} event(s) and {w.get('results', 0)} result(s) of runs not pushed")
    for table, cols in d["in_extra"].items():
        lines.append(f"carried in {table}.extra (no central column yet): {', '.join(cols)}")
    if d["not_carried"]:
        lines.append(f"not carried (tables this linerig does not push): {', '.join(d['not_carried'])}")
    return "\n".join(lines)
