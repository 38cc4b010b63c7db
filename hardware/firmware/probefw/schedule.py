"""Fixed-rate schedule on absolute deadlines, so a slow iteration never shifts later samples."""


class FixedRate:
    def __init__(self, period_ms: int, start_ms: int = 0) -> None:
        if period_ms <= 0:
            raise ValueError("period must be positive")
        self.period_ms = period_ms
        self.next_ms = start_ms
        self.count = 0  # slots served
        self.missed = 0  # slots skipped because the loop came too late

    def due(self, now_ms: int) -> bool:
        """True once per slot; a late call serves one slot and skips (and counts) the ones it missed."""
        if now_ms < self.next_ms:
            return False
        late = (now_ms - self.next_ms) // self.period_ms
        self.missed += late
        self.next_ms += (late + 1) * self.period_ms
        self.count += 1
        return True

    def wait_ms(self, now_ms: int) -> int:
        """How long the loop may sleep before the next slot."""
        return max(0, self.next_ms - now_ms)
