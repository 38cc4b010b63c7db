"""Blocking work off the event loop, in threads that never hold up the daemon's exit."""

from __future__ import annotations

import asyncio
import contextlib
import threading
from typing import Any


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
