"""MAX31856-class thermocouple converter on SPI (mode 1), one chip per channel.

Register map and formats as we read the datasheet class (re-check against the part you buy):
CR0 0x00, CR1 0x01, MASK 0x02, LTHFT 0x05-0x06, CJ temperature 0x0A-0x0B (14 bits, 1/64 °C),
linearised temperature 0x0C-0x0E (19 bits, 1/128 °C), status 0x0F. Writes set bit 7 of the address.
Every read is bounded (a single transfer), and an all-zero or all-one status-plus-data word is a
dead bus, not a temperature.
"""

from .limits import T_PROBE_MAX_C

CR0, CR1, MASK, LTHFTH, CJTH, LTCBH, SR = 0x00, 0x01, 0x02, 0x05, 0x0A, 0x0C, 0x0F
TYPE_CODE = {"B": 0, "E": 1, "J": 2, "K": 3, "N": 4, "R": 5, "S": 6, "T": 7}
VOLTAGE_GAIN32 = 0x0C  # CR1 type field: raw voltage, gain 32 (about ±20 mV: any probe below ~400 °C)
GAIN = 32
LTC_LSB_C = 1.0 / 128.0
CJ_LSB_C = 1.0 / 64.0
# raw-voltage mode: V = code / (GAIN · 1.6 · 2^17), code the same 19-bit field [datasheet class; check]
VOLT_LSB_UV = 1e6 / (GAIN * 1.6 * 131072.0)

# status bits -> protocol channel fault bits (PROTOCOL.md §4.2)
SR_OPEN, SR_OVUV, SR_TC_RANGE, SR_CJ_RANGE, SR_CJ_HIGH, SR_CJ_LOW = 0x01, 0x02, 0x40, 0x80, 0x20, 0x10


def fault_bits(sr: int) -> int:
    bits = 0
    if sr & SR_OPEN:
        bits |= 0x01
    if sr & (SR_OVUV | SR_TC_RANGE):
        bits |= 0x02
    if sr & (SR_CJ_RANGE | SR_CJ_HIGH | SR_CJ_LOW):
        bits |= 0x04
    return bits


def _signed(value: int, bits: int) -> int:
    return value - (1 << bits) if value & (1 << (bits - 1)) else value


class TcConverter:
    def __init__(self, spi: object, cs: object, mains_hz: int = 50) -> None:
        self.spi = spi  # machine.SPI(polarity=0, phase=1), ≤ 5 MHz
        self.cs = cs  # machine.Pin, idle high
        self.mains_hz = mains_hz
        self.mode = "T"
        self.cs.value(1)

    def _read(self, reg: int, n: int) -> bytearray:
        buf = bytearray(n + 1)
        out = bytearray(n + 1)
        out[0] = reg & 0x7F
        self.cs.value(0)
        try:
            self.spi.write_readinto(out, buf)
        finally:
            self.cs.value(1)
        return buf[1:]

    def _write(self, reg: int, data: bytes) -> None:
        self.cs.value(0)
        try:
            self.spi.write(bytes([reg | 0x80]) + bytes(data))
        finally:
            self.cs.value(1)

    def configure(self, tc_type: str, mode: str, averaging: int = 4) -> None:
        """Continuous conversion, open-circuit detection, mains notch, and the hardware over-temperature
        threshold on the FAULT pin (wired to the heater driver's enable, so it works with no software)."""
        self.mode = mode
        avg = {1: 0, 2: 1, 4: 2, 8: 3, 16: 4}[averaging]
        cr1 = (avg << 4) | (TYPE_CODE[tc_type] if mode == "T" else VOLTAGE_GAIN32)
        cr0 = 0x80 | 0x10 | (0x01 if self.mains_hz == 50 else 0x00)  # auto, OCFAULT=01, 50/60 Hz notch
        threshold = int(T_PROBE_MAX_C * 16) & 0xFFFF  # 1/16 °C per LSB
        self._write(CR0, bytes([cr0 & ~0x80 & 0xFF]))  # stop, then set the rest, then start
        self._write(CR1, bytes([cr1]))
        self._write(LTHFTH, bytes([threshold >> 8, threshold & 0xFF]))
        # FAULT pin: over-temperature only, and only when the chip linearises (mode T). An open or shorted
        # thermocouple is the firmware's call: a broken spare channel must not stop a measurement.
        mask = 0xF7 if mode == "T" else 0xFF
        self._write(MASK, bytes([mask]))
        self._write(CR0, bytes([cr0]))
        back = self._read(CR0, 2)
        if back[0] != cr0 or back[1] != cr1:
            raise OSError("thermocouple converter did not keep its configuration")

    def read(self) -> tuple:
        """(value, fault_bits, cj_C): value in °C (mode T) or µV (mode E)."""
        raw = self._read(CJTH, 6)  # CJTH CJTL LTCBH LTCBM LTCBL SR in one transfer
        if all(b == 0 for b in raw) or all(b == 0xFF for b in raw):
            raise OSError("thermocouple converter bus reads all zeros or ones")
        cj = _signed(((raw[0] << 8) | raw[1]) >> 2, 14) * CJ_LSB_C
        code = _signed(((raw[2] << 16) | (raw[3] << 8) | raw[4]) >> 5, 19)
        value = code * (LTC_LSB_C if self.mode == "T" else VOLT_LSB_UV)
        return value, fault_bits(raw[5]), cj
