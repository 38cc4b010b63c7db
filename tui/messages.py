"""Every message the daemon link posts to the app, in one place.

The link worker owns the socket; screens never talk to it directly. Readings arrive many times a second,
so ``ReadingsArrived`` may replace an older pending one: the pump drops superseded updates and a screen
redraws from the shared ``LiveState`` at its own capped rate.
"""

from __future__ import annotations

from typing import Any

from textual.message import Message


class DaemonConnected(Message):
    """The link is up and subscribed. Handled by ``on_daemon_connected``."""

    def __init__(self, status: dict[str, Any], reconnected: bool) -> None:
        super().__init__()
        self.status = status
        self.reconnected = reconnected


class DaemonLost(Message):
    """The socket closed or could not be opened; the worker retries after ``retry_s``."""

    def __init__(self, reason: str, retry_s: float, first: bool) -> None:
        super().__init__()
        self.reason = reason
        self.retry_s = retry_s
        self.first = first


class ReadingsArrived(Message):
    """New samples or estimates are in ``LiveState``; only the latest pending one matters."""

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, ReadingsArrived)


class RunStateChanged(Message):
    """A run moved to a new state (checking, settling, heating, recovering, done, aborted, faulted)."""

    def __init__(self, run_id: int | None, state: str, reason: str) -> None:
        super().__init__()
        self.run_id = run_id
        self.state = state
        self.reason = reason


class FaultRaised(Message):
    """The daemon tripped its safety path: the heater is already off."""

    def __init__(self, reason: str) -> None:
        super().__init__()
        self.reason = reason


class LinkChanged(Message):
    """The daemon's own link to the front end went up or down."""

    def __init__(self, up: bool, reason: str) -> None:
        super().__init__()
        self.up = up
        self.reason = reason


class RunFinished(Message):
    """A run reached a final state and its final reduction (if any) is in ``results``."""

    def __init__(self, run_id: int, state: str, results: dict[str, Any]) -> None:
        super().__init__()
        self.run_id = run_id
        self.state = state
        self.results = results
