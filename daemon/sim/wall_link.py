"""The firmware's link timings kept in wall time while its clock runs at the simulator's speed.

Shared by both hosts of the real firmware: `firmware_host.FirmwareFrontEnd` (CPython, in the simulator's
process) and `firmware_proc` (the firmware's own MicroPython process). It must therefore stay
MicroPython-compatible: no ``__future__`` imports, no typing module, no dataclasses.

A heater lease granted for 1000 ms must end 1 s of *wall* time later whatever the speed, and so must the
2000 ms duplicate window, the 1000 ms corrupt-frame window and the 5 s latched-fault repeat: a host retries
and reconnects in wall time. The firmware keeps them in a handful of fields (`LINK_FIELDS`); before each call
into it, `enter` re-bases them onto the device counter so that their intervals are wall intervals, and
`leave` reads them back. The firmware's own code (its `Lease`, its caps, its comparisons) runs unchanged.
"""

LINK_FIELDS = ("lease.end_ms", "last_cmd", "bad_frame_times", "latched_sent_ms", "latched")


def missing_link_field(fw: object) -> str:
    """The first of LINK_FIELDS the firmware object lacks ('' when it has them all)."""
    for path in LINK_FIELDS:
        obj = fw
        for part in path.split("."):
            if not hasattr(obj, part):
                return path
            obj = getattr(obj, part)
    return ""


class WallLink:
    """The wall times (seconds of one monotonic clock) of the firmware's link fields, between calls."""

    def __init__(self) -> None:
        self.lease_end = None  # wall time the lease runs out, None when there is none
        self.last_cmd = None
        self.bad_frames: list = []
        self.latched_sent = None

    def enter(self, fw: object, now: int, wall: float) -> None:
        """Before a call at device ms ``now`` and wall time ``wall``: wall times onto the device counter."""

        def to_fw(at: float | None) -> int | None:
            return None if at is None else now + round((at - wall) * 1000.0)

        fw.lease.end_ms = to_fw(self.lease_end)
        c = fw.last_cmd
        if c is not None and self.last_cmd is not None:
            fw.last_cmd = (c[0], c[1], c[2], to_fw(self.last_cmd), c[4])
        fw.bad_frame_times = [to_fw(t) for t in self.bad_frames]
        if self.latched_sent is not None:
            fw.latched_sent_ms = to_fw(self.latched_sent)

    def leave(self, fw: object, now: int, wall: float) -> None:
        """After the call: the fields back to wall times."""

        def to_wall(ms: int | None) -> float | None:
            return None if ms is None else wall + (ms - now) / 1000.0

        self.lease_end = to_wall(fw.lease.end_ms)
        self.last_cmd = None if fw.last_cmd is None else to_wall(fw.last_cmd[3])
        self.bad_frames = [to_wall(t) for t in fw.bad_frame_times]
        self.latched_sent = to_wall(fw.latched_sent_ms) if fw.latched is not None else None


def heater_reason(faults: list, default: str) -> str:
    """Why the heater changed during a call, from the fault frames the firmware sent in it."""
    if not faults:
        return default
    code, detail = faults[0]
    return "lease expired" if code == "LEASE" else "fault " + code + ": " + detail


MAX_CYCLES_PER_CALL = 600
"""Control cycles served per catch-up before the rest are skipped as a stalled loop would skip them (600 cycles
is about 60 ms of CPU in the simulator's process; at its 10 ms tick this allows speeds up to ~6000)."""


def catch_up(fw: object, target: int, call: object, advance: object = None, limit: int = MAX_CYCLES_PER_CALL) -> None:
    """Run the firmware to device ms ``target``: every control cycle due, one at a time (``call(t)`` runs
    ``fw.tick(t)``; ``advance(t)`` moves the physics first, when the host owns them), then a last tick at
    ``target`` for the lease and fault repeat between cycles. A backlog beyond ``limit`` cycles is served as the
    board serves a stalled loop: one late cycle, the missed slots skipped and counted."""
    served = 0
    while fw.control.next_ms <= target:
        t = fw.control.next_ms if served < limit else target
        if advance is not None:
            advance(t)
        call(t)
        served += 1
    if advance is not None:
        advance(target)
    call(target)
