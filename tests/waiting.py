"""Waiting on conditions in tests without sleeping: one event for "something arrived", a deadline for all."""

from __future__ import annotations

import asyncio
import contextlib
from collections.abc import Callable
from typing import Any


class Changed:
    """Waiters re-check their condition each time the event fires, until a deadline."""

    def __init__(self) -> None:
        self.event = asyncio.Event()

    def set(self) -> None:
        self.event.set()

    async def until(self, cond: Callable[[], Any], timeout: float, what: str) -> Any:
        loop = asyncio.get_running_loop()
        end = loop.time() + timeout
        while not (got := cond()):
            self.event.clear()
            left = end - loop.time()
            if left <= 0:
                raise AssertionError(f"timed out after {timeout:g} s waiting for {what}")
            with contextlib.suppress(TimeoutError):
                await asyncio.wait_for(self.event.wait(), left)
        return got
