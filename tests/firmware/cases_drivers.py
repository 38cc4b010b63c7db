"""Converter and monitor drivers, the fixed-rate schedule and the watchdog gate, under both interpreters.

The register-level fakes hold bytes the way the chips' datasheets lay them out. Check values are the
worked data-format examples printed in the MAX31856 datasheet class (linearised temperature +100 °C =
0x064000, −250 °C = 0xF06000; cold junction +25 °C = 0x1900) — from memory, so treat them as such.
"""

from check import close, pairwise, raises
from probefw import tcconv
from probefw.powermon import PowerMonitor
from probefw.schedule import FixedRate
from probefw.watchdog import WatchdogGate


class RegisterChip:
    """SPI slave with 16 auto-incrementing registers; writes have address bit 7 set."""

    def __init__(self) -> None:
        self.regs = bytearray(16)
        self.selected = False
        self.dead = False

    def write(self, data: bytes) -> None:
        assert self.selected and data[0] & 0x80
        a = data[0] & 0x7F
        for i, b in enumerate(data[1:]):
            self.regs[a + i] = b

    def write_readinto(self, out: bytes, buf: bytearray) -> None:
        assert self.selected and not out[0] & 0x80
        a = out[0]
        for i in range(1, len(buf)):
            buf[i] = 0xFF if self.dead else self.regs[a + i - 1]


class Cs:
    def __init__(self, chip: RegisterChip) -> None:
        self.chip = chip

    def value(self, v: int) -> None:
        self.chip.selected = v == 0


def _conv() -> tuple:
    chip = RegisterChip()
    return chip, tcconv.TcConverter(chip, Cs(chip))


def _set(chip: RegisterChip, at: int, data: bytes) -> None:
    for i, b in enumerate(data):
        chip.regs[at + i] = b


def test_converter_configuration_bytes() -> None:
    chip, tc = _conv()
    tc.configure("K", "T", averaging=4)
    assert chip.regs[tcconv.CR1] == (2 << 4) | 3  # 4 samples averaged, type K
    assert chip.regs[tcconv.CR0] & 0x80  # continuous conversion
    assert chip.regs[tcconv.CR0] & 0x01  # 50 Hz notch
    thr = (chip.regs[tcconv.LTHFTH] << 8) | chip.regs[tcconv.LTHFTH + 1]
    assert close(thr / 16, 95.0)  # the hardware over-temperature threshold
    assert chip.regs[tcconv.MASK] == 0xF7  # only "TC high" drives the FAULT pin (bit 3 unmasked)
    tc.configure("T", "E")
    assert chip.regs[tcconv.CR1] & 0x0F == tcconv.VOLTAGE_GAIN32
    assert chip.regs[tcconv.MASK] == 0xFF  # no linearised temperature, no hardware threshold


def test_converter_reads_datasheet_format_examples() -> None:
    chip, tc = _conv()
    tc.configure("K", "T")
    _set(chip, 0x0A, bytes([0x19, 0x00, 0x06, 0x40, 0x00, 0x00]))
    assert tc.read() == (100.0, 0, 25.0)
    _set(chip, 0x0A, bytes([0xE7, 0x00, 0xF0, 0x60, 0x00, 0x01]))  # CJ −25 °C, TC −250 °C, open
    value, fault, cj = tc.read()
    assert (value, cj) == (-250.0, -25.0)
    assert fault == 0x01
    chip.regs[0x0F] = 0x02 | 0x80
    assert tc.read()[1] == 0x02 | 0x04  # over/under-voltage -> range; CJ range -> CJ


def test_dead_or_absent_converter_raises() -> None:
    chip, tc = _conv()
    chip.dead = True
    assert raises(OSError, tc.configure, "K", "T")
    assert raises(OSError, tc.read)


class I2cMonitor:
    def __init__(self) -> None:
        self.regs = {0: 0x4127, 1: 0, 2: 0}

    def writeto_mem(self, addr: int, reg: int, data: bytes) -> None:
        assert addr == 0x40
        self.regs[reg] = (data[0] << 8) | data[1] | (0x4000 if reg == 0 else 0)  # bit 14 reads back as 1

    def readfrom_mem(self, addr: int, reg: int, n: int) -> bytes:
        return bytes([self.regs[reg] >> 8, self.regs[reg] & 0xFF])


def test_power_monitor_scaling() -> None:
    bus = I2cMonitor()
    mon = PowerMonitor(bus, shunt_ohm=0.01)
    mon.configure(averaging=16)
    bus.regs[2] = 9600  # 9600 × 1.25 mV = 12.0 V
    bus.regs[1] = 20000  # 20000 × 2.5 µV = 50 mV over 10 mΩ = 5 A
    v, a = mon.read()
    assert close(v, 12.0) and close(a, 5.0)
    bus.regs[1] = 0x10000 - 400  # negative shunt voltage: current flowing back
    assert close(mon.read()[1], -0.1)


def test_fixed_rate_keeps_absolute_deadlines() -> None:
    s = FixedRate(100, start_ms=0)
    served = [t for t in range(0, 1000, 7) if s.due(t)]
    assert len(served) == 10 and s.missed == 0
    assert all(abs(t - 100 * i) < 7 for i, t in enumerate(served))
    assert not s.due(1000 - 1) and s.due(1000)
    assert s.due(1450) and s.missed == 3  # 1100, 1200, 1300 skipped, 1400 served late
    assert s.wait_ms(1450) == 50
    assert raises(ValueError, FixedRate, 0)


class CountingWdt:
    def __init__(self) -> None:
        self.feeds: list = []
        self.now = 0

    def feed(self) -> None:
        self.feeds.append(self.now)


def _loop(gate: WatchdogGate, wdt: CountingWdt, ms: int, body: object) -> None:
    for _ in range(ms // 5):
        wdt.now += 5
        ok = False
        try:  # noqa: SIM105 (MicroPython has no contextlib)
            ok = body()  # type: ignore[operator]
        except RuntimeError:
            pass
        gate.report(wdt.now, ok)
        gate.service(wdt.now)


def test_watchdog_fed_only_by_a_healthy_loop() -> None:
    wdt = CountingWdt()
    gate = WatchdogGate(wdt, stale_ms=500)
    _loop(gate, wdt, 1000, lambda: True)
    assert len(wdt.feeds) == 200
    last = wdt.feeds[-1]

    def broken() -> bool:
        raise RuntimeError("sensor code crashed")

    _loop(gate, wdt, 2000, broken)
    # feeding stops within the stale window; a 2 s hardware watchdog then resets the MCU
    assert wdt.feeds[-1] - last <= 500
    assert max(b - a for a, b in pairwise(wdt.feeds)) <= 5
    assert wdt.now - wdt.feeds[-1] >= 1500


def test_watchdog_not_fed_before_the_first_healthy_pass() -> None:
    wdt = CountingWdt()
    gate = WatchdogGate(wdt)
    assert gate.service(0) is False and wdt.feeds == []
