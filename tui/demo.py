"""``make demo``: the daemon on a simulated rig, with the operator's screen attached.

Starts ``linerigd --simulate`` as its own process (which starts ``linerig-sim``), waits until it serves its
socket, opens the UI with a run started, and stops the daemon when the UI closes.
"""

from __future__ import annotations

import argparse
import contextlib
import json
import subprocess
import sys
import tempfile
from pathlib import Path


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="python -m linerig.tui.demo", description="linerig on a simulated rig")
    p.add_argument("material", nargs="?", default="", help="demo material (linerig-sim --list)")
    p.add_argument("--speed", type=float, default=10.0, help="simulated seconds per second (default 10)")
    p.add_argument("--no-autostart", action="store_true", help="open the UI without starting a run")
    args = p.parse_args(argv)
    work = Path(tempfile.mkdtemp(prefix="linerig-demo-"))
    sock, db = work / "linerigd.sock", work / "demo.db"
    cmd = [sys.executable, "-m", "linerig.daemon.main", "--simulate", *([args.material] if args.material else []),
           "--speed", str(args.speed), "--socket", str(sock), "--db", str(db)]
    log = (work / "linerigd.log").open("w")
    daemon = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=log, text=True)
    assert daemon.stdout is not None
    line = daemon.stdout.readline()
    if not line or not json.loads(line).get("ready"):
        print(f"the daemon did not start; see {work / 'linerigd.log'}", file=sys.stderr)
        return 1
    try:
        from linerig.tui.app import run_app

        code = run_app(sock, autostart=not args.no_autostart, owns_daemon=True)
    finally:
        daemon.terminate()   # the daemon stops its simulator (which also watches the daemon's pid)
        try:
            daemon.wait(10)
        except subprocess.TimeoutExpired:
            daemon.kill()
    with contextlib.suppress(OSError):  # the terminal may be gone (a closed window): nothing to print to
        print(f"demo database kept at {db} (open it again with: linerig report --db {db})")
    return code


if __name__ == "__main__":
    raise SystemExit(main())
