"""Feed the hardware watchdog only from a loop that has just proved itself healthy.

A hung loop, a loop that raises every time, or a loop whose control cycle has gone stale all
stop the feeding, and the MCU resets with the heater pin back at its pulled-down default.
"""


class WatchdogGate:
    def __init__(self, wdt: object, stale_ms: int = 500) -> None:
        self.wdt = wdt  # anything with feed(): machine.WDT on the board
        self.stale_ms = stale_ms
        self.last_ok_ms = None
        self.feeds = 0

    def report(self, now_ms: int, ok: bool) -> None:
        """Called after each loop iteration: ok means the safety checks ran to completion."""
        if ok:
            self.last_ok_ms = now_ms

    def service(self, now_ms: int) -> bool:
        """Feed if the last healthy iteration is recent; returns whether it fed."""
        if self.last_ok_ms is None or now_ms - self.last_ok_ms > self.stale_ms:
            return False
        self.wdt.feed()
        self.feeds += 1
        return True
