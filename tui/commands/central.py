"""``linerig central migrate URL`` and ``linerig central status URL``: the central database's schema and contents.

``migrate`` is for the database's owner: it creates the ``linerig`` schema, or brings it up to this linerig's
version, and the roles ``linerig_rig`` (rigs: insert their own rows, read all) and ``linerig_reader`` (read all);
``GRANT linerig_rig TO <a rig's login role>`` then lets a rig push. ``status`` shows the version and each rig's
stores and runs.
"""

from __future__ import annotations

import argparse
import json
import sys
from typing import Any

CMD = "central"


def add_parser(sub: argparse._SubParsersAction) -> None:  # type: ignore[type-arg]
    p = sub.add_parser(CMD, help="create, upgrade or inspect the central PostgreSQL database",
                       description="The central database that rigs push to with `linerig sync`.")
    actions = p.add_subparsers(dest="action", metavar="ACTION", required=True)
    m = actions.add_parser("migrate", help="create the schema and roles, or bring them up to date (as the owner)")
    m.add_argument("url", metavar="URL", help="libpq connection string of the database, as its owner")
    s = actions.add_parser("status", help="schema version, rigs, stores and what each has pushed")
    s.add_argument("url", metavar="URL", help="libpq connection string")
    s.add_argument("--json", action="store_true", help="print JSON")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from linerig.daemon.central.connect import connect, describe
    from linerig.daemon.central.errors import CentralError

    try:
        with connect(args.url, application="linerig-central") as conn:
            if args.action == "migrate":
                return _migrate(conn, describe(args.url))
            return _status(conn, describe(args.url), args.json)
    except CentralError as exc:
        print(f"linerig {CMD} {args.action}: error: {exc}", file=sys.stderr)
        return exc.exit_code


def _migrate(conn: Any, target: str) -> int:
    from linerig.daemon.central.schema import CENTRAL_VERSION, migrate

    before, after = migrate(conn)
    if before == after:
        print(f"{target}: central schema already at version {after}")
    else:
        print(f"{target}: central schema {'created' if before == 0 else 'upgraded from ' + str(before)} at version "
              f"{after} (this linerig: {CENTRAL_VERSION}); grant rigs with GRANT linerig_rig TO <role>, readers with "
              "GRANT linerig_reader TO <role>")
    return 0


def _status(conn: Any, target: str, as_json: bool) -> int:
    from linerig.daemon.central.read import rig_summary
    from linerig.daemon.central.schema import CENTRAL_VERSION, server_version

    found = server_version(conn)
    if found is None:
        print(f"linerig {CMD} status: error: {target} has no linerig schema: its owner creates it with "
              "`linerig central migrate URL`", file=sys.stderr)
        return 2
    rigs = rig_summary(conn)
    doc = {"target": target, "version": found[0], "writer_min": found[1], "this_linerig": CENTRAL_VERSION,
           "rigs": rigs}
    if as_json:
        print(json.dumps(doc, indent=2, default=str))
        return 0
    print(f"{target}: central schema {found[0]} (this linerig {CENTRAL_VERSION})")
    for r in rigs:
        print(f"  {r['rig']:<24} role {r['role']:<16} {r['stores']} store(s), {r['runs']} run(s), "
              f"{r['samples']:,} samples, last push {str(r['last_push'] or '-')[:19]}")
    if not rigs:
        print("  no rig has pushed yet")
    return 0
