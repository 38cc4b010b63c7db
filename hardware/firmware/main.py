"""Front-end firmware entry point (MicroPython, RP2040-class board). Thin: wires the board to probefw.

Pins (hardware/README.md has the wiring): heater PWM GP15 with an external gate pull-down,
heater enable GP14 (also pulled down; the converters' FAULT pins can pull it low too),
SPI0 SCK GP18 / MOSI GP19 / MISO GP16 with one chip select per channel, I²C0 SDA GP4 / SCL GP5.
"""

import binascii
import os
import select
import sys
import time

import machine
import micropython

# Heater off before anything else can fail: the pins come up as inputs (pulled down), make them driven lows.
EN = machine.Pin(14, machine.Pin.OUT, value=0)
PWM = machine.PWM(machine.Pin(15, machine.Pin.OUT, value=0))
PWM.freq(1000)
PWM.duty_u16(0)

from probefw.device import FrontEnd  # noqa: E402 (after the heater is safe)
from probefw.loop import Clock, StreamUart, step  # noqa: E402
from probefw.powermon import PowerMonitor  # noqa: E402
from probefw.tcconv import TcConverter  # noqa: E402
from probefw.watchdog import WatchdogGate  # noqa: E402

CS_PINS = (17, 20, 21, 22)  # one MAX31856-class converter per thermocouple channel
WDT_TIMEOUT_MS = 2000

RESET_CAUSES = {
    getattr(machine, "PWRON_RESET", -1): "POWERON",
    getattr(machine, "WDT_RESET", -2): "WATCHDOG",
    getattr(machine, "SOFT_RESET", -3): "SOFT",
    getattr(machine, "HARD_RESET", -4): "HARD",
}


class Board:
    """The hal that probefw.device expects, on real pins."""

    def __init__(self) -> None:
        self.spi = machine.SPI(0, baudrate=1_000_000, polarity=0, phase=1,
                               sck=machine.Pin(18), mosi=machine.Pin(19), miso=machine.Pin(16))
        self.tcs = [TcConverter(self.spi, machine.Pin(p, machine.Pin.OUT, value=1)) for p in CS_PINS]
        self.n_channels = len(self.tcs)
        self.mon = PowerMonitor(machine.I2C(0, sda=machine.Pin(4), scl=machine.Pin(5), freq=400_000))
        self.mon.configure()

    def configure(self, tc_type: str, mode: str) -> None:
        for tc in self.tcs:
            tc.configure(tc_type, mode)

    def read(self) -> tuple:
        chans = []
        cj_sum = 0.0
        for tc in self.tcs:
            value, fault, cj = tc.read()
            chans.append((value, fault))
            cj_sum += cj
        return cj_sum / len(self.tcs), chans  # the converters share one isothermal terminal block

    def read_power(self) -> tuple:
        return self.mon.read()

    def set_duty(self, duty: float) -> None:
        if duty <= 0.0:
            PWM.duty_u16(0)
            EN.value(0)
        else:
            PWM.duty_u16(min(65535, int(duty * 65535)))
            EN.value(1)


def main() -> None:
    micropython.kbd_intr(-1)  # byte 0x03 is data, not Ctrl-C
    board = Board()
    clock = Clock(time.ticks_ms, time.ticks_diff)
    wdt = machine.WDT(timeout=WDT_TIMEOUT_MS)
    gate = WatchdogGate(wdt, stale_ms=500)
    serial = binascii.hexlify(machine.unique_id()).decode().upper()
    boot_id = binascii.hexlify(os.urandom(4)).decode().upper()
    poll = select.poll()
    poll.register(sys.stdin, select.POLLIN)
    uart = StreamUart(sys.stdin.buffer, sys.stdout.buffer, poll)
    fe = FrontEnd(board, uart.write, boot_id, serial=serial)
    fe.start(clock.now(), RESET_CAUSES.get(machine.reset_cause(), "UNKNOWN"))
    while True:
        time.sleep_ms(step(fe, board, uart, clock.now, gate))


main()
