"""Heater lease: on only while the host keeps renewing it (PROTOCOL.md §6).

Times are plain integer milliseconds from a counter that never wraps (main.py accumulates
``time.ticks_diff``), so the arithmetic here is ordinary subtraction.
"""

from .limits import LEASE_MAX_MS


class Lease:
    def __init__(self) -> None:
        self.end_ms = None

    def grant(self, now_ms: int, lease_ms: int) -> int:
        """Start or renew; returns the lease actually granted (capped at LEASE_MAX_MS)."""
        granted = min(int(lease_ms), LEASE_MAX_MS)
        self.end_ms = now_ms + granted
        return granted

    def cancel(self) -> None:
        self.end_ms = None

    @property
    def active(self) -> bool:
        return self.end_ms is not None

    def expired(self, now_ms: int) -> bool:
        return self.end_ms is not None and now_ms >= self.end_ms

    def left_ms(self, now_ms: int) -> int:
        if self.end_ms is None:
            return 0
        return max(0, self.end_ms - now_ms)
