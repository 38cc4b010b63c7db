"""Blocking work off the event loop, in threads that never hold up the daemon's exit."""

from __future__ import annotations

import asyncio
import contextlib
import logging
import queue
import threading
from collections.abc import Callable
from typing import Any

log = logging.getLogger("linerigd")


def in_daemon_thread(fn: Any, *args: Any, **kwargs: Any) -> asyncio.Future[Any]:
    """Run ``fn`` in a daemon thread and await its result; unlike to_thread, exit never waits for it."""
    loop = asyncio.get_running_loop()
    fut: asyncio.Future[Any] = loop.create_future()

    def deliver(ok: bool, value: Any) -> None:
        if not fut.done():
            (fut.set_result if ok else fut.set_exception)(value)

    def work() -> None:
        try:
            result = fn(*args, **kwargs)
        except Exception as exc:
            ok, value = False, exc
        else:
            ok, value = True, result
        with contextlib.suppress(RuntimeError):  # the loop is gone: the daemon stopped meanwhile
            loop.call_soon_threadsafe(deliver, ok, value)

    threading.Thread(target=work, name="linerigd-reduce", daemon=True).start()
    return fut


class OrderedWorker:
    """One daemon thread that runs submitted calls one after another, in the order given.

    For work that must stay in sequence but not on the loop (the stop verdict's judgements: each depends on the
    one before, and a fast simulated rig can bring many in a second). Exit never waits for it.
    """

    def __init__(self, name: str) -> None:
        self.name = name
        self._jobs: queue.SimpleQueue[Callable[[], None]] = queue.SimpleQueue()
        self._thread: threading.Thread | None = None

    def submit(self, job: Callable[[], None]) -> None:
        if self._thread is None:
            self._thread = threading.Thread(target=self._run, name=self.name, daemon=True)
            self._thread.start()
        self._jobs.put(job)

    def _run(self) -> None:
        while True:
            job = self._jobs.get()
            try:
                job()
            except Exception:  # a judgement that fails leaves the verdict as it was; the run goes on
                log.exception("%s: a queued job failed", self.name)
