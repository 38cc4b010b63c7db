"""The main loop that ships (probefw/loop.py) on a fake board, a fake UART and a counting watchdog, under both
interpreters: commands in and frames out through the UART, bounded reads, heater off on a crash, and the
watchdog fed only by healthy passes."""

from board import FakeRig
from check import pairwise
from probefw import loop
from probefw.codec import LineBuffer, decode, encode
from probefw.device import FrontEnd
from probefw.watchdog import WatchdogGate


class Wire:
    """The host end of a byte stream: bytes queued for the device, and what the device wrote."""

    def __init__(self) -> None:
        self.to_device = bytearray()
        self.from_device = bytearray()
        self.reads = 0

    def read(self, n: int) -> bytes:
        self.reads += 1
        out = bytes(self.to_device[:n])
        self.to_device[:] = self.to_device[n:]
        return out

    def write(self, data: bytes) -> None:
        self.from_device.extend(data)

    def poll(self, timeout: int) -> bool:
        return len(self.to_device) > 0


class CountingWdt:
    def __init__(self) -> None:
        self.fed: list = []


class Rig:
    """The loop wired as main.py wires it, with stand-ins for pins, USB serial and machine.WDT."""

    def __init__(self) -> None:
        self.rig = FakeRig()
        self.wire = Wire()
        self.uart = loop.StreamUart(self.wire, self.wire, self.wire)
        self.fe = FrontEnd(self.rig, self.uart.write, "0BAD0BAD")
        self.fe.start(0, "POWERON")
        self.wdt = CountingWdt()
        self.wdt.feed = lambda: self.wdt.fed.append(self.rig.now_ms)
        self.gate = WatchdogGate(self.wdt, stale_ms=500)
        self.lines = LineBuffer()
        self.frames: list = []

    def now(self) -> int:
        return self.rig.now_ms

    def run(self, ms: int) -> None:
        end = self.now() + ms
        while self.now() < end:
            wait = loop.step(self.fe, self.rig, self.uart, self.now, self.gate)
            assert 0 <= wait <= loop.IDLE_MS
            self.rig.advance(max(1, wait))
        for line in self.lines.feed(bytes(self.wire.from_device)):
            self.frames.append(decode(line))
        self.wire.from_device[:] = b""

    def send(self, kind: str, seq: int, *fields: object) -> None:
        self.wire.to_device.extend(encode(kind, seq, [str(f) for f in fields]))


def test_commands_in_and_replies_out_through_the_uart() -> None:
    r = Rig()
    r.send("I", 5)
    r.send("C", 6, "10", "T", "T", "100")
    r.run(350)
    kinds = [k for k, _, _ in r.frames]
    assert kinds[:4] == ["B", "D", "A", "A"] and kinds.count("S") == 4  # at 0, 100, 200 and 300 ms
    assert r.frames[2][2][:2] == ["5", "OK"] and r.frames[3][2][:2] == ["6", "OK"]
    assert [s for _, s, _ in r.frames] == list(range(len(r.frames)))  # one sequence, nothing lost


def test_the_watchdog_is_fed_every_healthy_pass() -> None:
    r = Rig()
    r.run(1000)
    assert len(r.wdt.fed) >= 1000 // loop.IDLE_MS
    assert max(b - a for a, b in pairwise(r.wdt.fed)) <= loop.IDLE_MS


def test_a_flood_of_input_is_read_in_bounded_slices() -> None:
    r = Rig()
    r.send("C", 1, "10", "T", "T", "100")
    r.send("P", 2, "5", "1000")
    r.wire.to_device.extend(b"x" * (3 * loop.MAX_READ_BYTES))  # noise, not frames
    queued, before = len(r.wire.to_device), len(r.wdt.fed)
    loop.step(r.fe, r.rig, r.uart, r.now, r.gate)
    assert len(r.wire.to_device) == queued - loop.MAX_READ_BYTES  # one bounded slice per pass
    assert len(r.wdt.fed) == before + 1  # and the safety checks still ran
    r.run(200)
    assert not r.wire.to_device
    assert r.rig.duty > 0  # the commands before the noise were obeyed


def test_a_crash_turns_the_heater_off_reports_and_starves_the_watchdog() -> None:
    r = Rig()
    r.send("C", 1, "10", "T", "T", "100")
    r.send("P", 2, "5", "1000")
    r.run(300)
    assert r.rig.duty > 0

    def broken() -> tuple:
        raise ZeroDivisionError("a defect in the sensor code")

    r.rig.read = broken  # not a bus fault (OSError): a bug the device logic does not expect
    t_crash = r.now()
    r.run(1000)
    assert r.rig.duty == 0.0 and not r.fe.heater_on
    crashes = [f for k, _, f in r.frames if k == "F"]
    assert crashes and crashes[0] == ["CRASH", "ZeroDivisionError"]
    # every control cycle fails: the loop is unhealthy two cycles on, and the gate's 500 ms later feeding stops
    # for good, so the 2 s hardware watchdog resets the board
    assert r.wdt.fed[-1] - t_crash <= 2 * 100 + r.gate.stale_ms + loop.IDLE_MS
    assert r.now() - r.wdt.fed[-1] >= 250


def test_the_clock_does_not_wrap_with_the_tick_counter() -> None:
    period = 1 << 30  # MicroPython's ticks_ms wraps at a power of two (2**30 on most ports)
    t = [period - 300]

    def ticks_ms() -> int:
        return t[0] % period

    def ticks_diff(a: int, b: int) -> int:
        return ((a - b + period // 2) % period) - period // 2

    clock = loop.Clock(ticks_ms, ticks_diff)
    seen = []
    for _ in range(10):
        t[0] += 100
        seen.append(clock.now())
    assert seen == [100 * (i + 1) for i in range(10)]
