"""linerigd's own sync: ``linerig sync`` as a child process, every ``interval_s`` and after each run, with back-off.

Why a child process and not a thread: a push reads and formats millions of rows, Python work that in a thread would
hold the GIL against the control loop; a process (at nice 10) shares nothing with it, and stopping the daemon just
ends it (a push is resumable at any point). Its progress comes back as JSON lines; the daemon keeps the latest
as ``status()`` (shown by ``linerig status``) and publishes a ``sync`` event when an attempt ends.

After a failure the next try waits retry_s, then twice that, up to max_backoff_s; the end of a run tries at once.
"""

from __future__ import annotations

import asyncio
import contextlib
import json
import logging
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

from linerig.daemon.config import SyncConfig
from linerig.daemon.store.writer import utc_now

log = logging.getLogger("linerigd.sync")
NICE = 10
STOP_GRACE_S = 3.0


class SyncScheduler:
    def __init__(self, cfg: SyncConfig, db_path: Path, publish: Callable[[dict[str, Any]], None]) -> None:
        from linerig.daemon.central.connect import describe

        self.cfg = cfg
        self.db_path = db_path
        self.publish = publish
        self.target = describe(cfg.to)
        self.state = "starting"
        self.failures = 0
        self.last_ok_utc: str | None = None
        self.last_attempt_utc: str | None = None
        self.last_error: str | None = None
        self.last_summary: dict[str, Any] | None = None
        self.progress: dict[str, Any] | None = None
        self.pushed_since_start: dict[str, int] = {}
        self._next_at: float | None = None
        self._wake = asyncio.Event()
        self._proc: asyncio.subprocess.Process | None = None
        self._task: asyncio.Task[None] | None = None

    # -- what the daemon sees --------------------------------------------------------
    def status(self) -> dict[str, Any]:
        left = None if self._next_at is None else max(0.0, self._next_at - time.monotonic())
        last = self.last_summary or {}
        return {"state": self.state, "target": self.target, "rig": last.get("rig") or self.cfg.rig,
                "last_ok_utc": self.last_ok_utc, "last_attempt_utc": self.last_attempt_utc,
                "last_error": self.last_error, "failures": self.failures,
                "next_try_in_s": None if left is None else round(left, 1), "progress": self.progress,
                "last_pushed": last.get("pushed"), "pushed_since_start": dict(self.pushed_since_start),
                "waiting": last.get("waiting")}

    def on_event(self, event: dict[str, Any]) -> None:
        """Hub watcher: a run's results are stored (run_finished comes after the final reduction): push now."""
        if event.get("event") == "run_finished":
            self._wake.set()

    # -- life ------------------------------------------------------------------------------
    def start(self) -> None:
        self._task = asyncio.create_task(self._loop(), name="linerigd-sync")

    async def stop(self) -> None:
        if self._task is not None:
            self._task.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await self._task
        await self._end_child()

    async def _end_child(self) -> None:
        proc = self._proc
        if proc is None or proc.returncode is not None:
            return
        proc.terminate()  # resumable at any point: what was committed stays, the rest goes next time
        try:
            await asyncio.wait_for(proc.wait(), STOP_GRACE_S)
        except TimeoutError:
            proc.kill()
            await proc.wait()

    async def _loop(self) -> None:
        while True:
            self._wake.clear()  # a run that ends during the attempt sets it again: the next one starts at once
            await self.attempt()
            delay = self.next_delay()
            self._next_at = time.monotonic() + delay
            with contextlib.suppress(TimeoutError):
                await asyncio.wait_for(self._wake.wait(), delay)
            self._next_at = None

    def next_delay(self) -> float:
        """interval_s after a good push; after n failures in a row retry_s·2^(n-1), at most max_backoff_s."""
        if self.failures == 0:
            return self.cfg.interval_s
        return min(self.cfg.retry_s * 2 ** (self.failures - 1), self.cfg.max_backoff_s)

    async def attempt(self) -> bool:
        """One push as a child process; True when it ended well (or had nothing to push)."""
        self.state, self.progress = "pushing", None
        self.last_attempt_utc = utc_now()
        cmd = [sys.executable, "-m", "linerig.tui.cli", "sync", "--db", str(self.db_path), "--to", self.cfg.to,
               "--json-lines", "--nice", str(NICE)]
        try:
            self._proc = proc = await asyncio.create_subprocess_exec(
                *cmd, stdin=asyncio.subprocess.DEVNULL, stdout=asyncio.subprocess.PIPE,
                stderr=asyncio.subprocess.PIPE)
        except OSError as exc:
            return self._ended(False, f"cannot start the sync process: {exc}")
        error: str | None = None
        assert proc.stdout is not None and proc.stderr is not None
        stderr_task = asyncio.create_task(proc.stderr.read())
        while line := await proc.stdout.readline():
            try:
                ev = json.loads(line)
            except ValueError:
                continue
            kind = ev.get("event")
            if kind in ("start", "run"):
                self.progress = {k: ev[k] for k in ("runs", "samples", "done", "of", "samples_total") if k in ev}
            elif kind == "done":
                self.last_summary = ev
                for table, n in (ev.get("pushed") or {}).items():
                    self.pushed_since_start[table] = self.pushed_since_start.get(table, 0) + int(n)
            elif kind == "error":
                error = str(ev.get("message"))
        code = await proc.wait()
        err_text = (await stderr_task).decode(errors="replace").strip()
        self._proc = None
        if code == 0:
            return self._ended(True, None)
        return self._ended(False, error or (err_text.splitlines()[-1] if err_text else f"sync exited {code}"))

    def _ended(self, ok: bool, error: str | None) -> bool:
        self.state = "idle" if ok else "failing"
        self.progress = None
        self.last_error = error
        self.failures = 0 if ok else self.failures + 1
        if ok:
            self.last_ok_utc = utc_now()
        else:
            log.warning("sync to %s failed: %s", self.target, error)
        self.publish({"event": "sync", **self.status()})
        return ok
