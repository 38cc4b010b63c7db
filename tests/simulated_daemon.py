"""`linerigd --simulate` as a real process for end-to-end tests: started, waited for, stopped."""

from __future__ import annotations

import contextlib
import json
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path
from typing import Any


@contextlib.contextmanager
def simulated_daemon(tmp_path: Path, speed: float, *extra: str,
                     linerigd: tuple[str, ...] = (sys.executable, "-m", "linerig.daemon.main"),
                     ) -> Iterator[dict[str, Any]]:
    """``linerigd`` is the command that starts the daemon (another installation's, for one); it runs in tmp_path."""
    sock, db, hlog = tmp_path / "d.sock", tmp_path / "runs.db", tmp_path / "heater.jsonl"
    proc = subprocess.Popen(
        [*linerigd, "--simulate", *extra, "--speed", str(speed),
         "--socket", str(sock), "--db", str(db), "--sim-heater-log", str(hlog)],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=tmp_path)
    try:
        assert proc.stdout is not None
        ready = json.loads(proc.stdout.readline() or "{}")
        assert ready.get("ready"), proc.stderr.read() if proc.poll() is not None else "daemon did not report ready"
        yield {"socket": sock, "db": db, "heater_log": hlog, "proc": proc, "ready": ready}
    finally:
        proc.terminate()
        try:
            proc.wait(10)
        except subprocess.TimeoutExpired:
            proc.kill()
