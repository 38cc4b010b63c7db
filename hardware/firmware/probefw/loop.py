"""The front end's main loop, apart from the pins: read the host's bytes, run the device logic, feed the
watchdog only after a healthy pass, and switch the heater off on any unexpected error.

main.py builds it from the board's real pins, USB serial and ``machine.WDT``; the tests and the simulator
build it from stand-ins (a fake board, a fake or pseudo-terminal UART, a counting watchdog), so the loop that
ships is the loop that is tested.
"""

MAX_READ_BYTES = 512  # per iteration, so a flood of input cannot starve the safety checks
IDLE_MS = 5  # longest sleep between iterations: commands are answered within a few ms


class Clock:
    """Milliseconds since boot that never wrap (ticks_ms wraps; Python ints do not)."""

    def __init__(self, ticks_ms: object, ticks_diff: object) -> None:
        self.ticks_ms = ticks_ms
        self.ticks_diff = ticks_diff
        self.last = ticks_ms()
        self.ms = 0

    def now(self) -> int:
        t = self.ticks_ms()
        self.ms += self.ticks_diff(t, self.last)
        self.last = t
        return self.ms


class StreamUart:
    """The host link as a byte stream with a poll: USB serial (stdin/stdout) on the board, a pty in the
    simulator. ``read`` never blocks and takes at most ``limit`` bytes."""

    def __init__(self, rx: object, tx: object, poller: object) -> None:
        self.rx = rx  # .read(n) -> bytes
        self.tx = tx  # .write(bytes)
        self.poller = poller  # .poll(0) -> true when a byte is waiting

    def read(self, limit: int) -> bytes:
        data = bytearray()
        while len(data) < limit and self.poller.poll(0):
            b = self.rx.read(1)
            if not b:
                break
            data.extend(b)
        return bytes(data)

    def write(self, frame: bytes) -> None:
        self.tx.write(frame)


def step(fe: object, hal: object, uart: object, now: object, gate: object) -> int:
    """One loop iteration; returns how long the caller may sleep (ms) before the next."""
    ok = False
    try:
        data = uart.read(MAX_READ_BYTES)
        if data:
            fe.receive(data, now())
        ok = fe.tick(now())
    except Exception as exc:  # heater off on any unexpected error, then let the watchdog decide
        hal.set_duty(0.0)
        try:
            fe.heater_off()
            fe.send("F", ["CRASH", type(exc).__name__])
        except Exception:  # reporting is best effort; the heater is already off
            pass
    gate.report(now(), ok)
    gate.service(now())
    return min(IDLE_MS, fe.control.wait_ms(now()))
