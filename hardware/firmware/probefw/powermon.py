"""INA-class voltage/current monitor on I²C (INA226-class register map; re-check for your part).

Config 0x00, shunt voltage 0x01 (signed, 2.5 µV/LSB), bus voltage 0x02 (1.25 mV/LSB), big-endian.
Averaging over many PWM periods gives the mean heater current the regulator needs.
"""

CONFIG, SHUNT, BUS = 0x00, 0x01, 0x02
SHUNT_LSB_V = 2.5e-6
BUS_LSB_V = 1.25e-3
AVG_CODE = {1: 0, 4: 1, 16: 2, 64: 3, 128: 4, 256: 5, 512: 6, 1024: 7}


class PowerMonitor:
    def __init__(self, i2c: object, addr: int = 0x40, shunt_ohm: float = 0.01) -> None:
        self.i2c = i2c
        self.addr = addr
        self.shunt_ohm = shunt_ohm

    def _get(self, reg: int) -> int:
        b = self.i2c.readfrom_mem(self.addr, reg, 2)
        return (b[0] << 8) | b[1]

    def configure(self, averaging: int = 16) -> None:
        # 1.1 ms conversions for shunt and bus, continuous: 16 averages ≈ 35 ms per update
        cfg = (AVG_CODE[averaging] << 9) | (4 << 6) | (4 << 3) | 0x7
        self.i2c.writeto_mem(self.addr, CONFIG, bytes([cfg >> 8, cfg & 0xFF]))
        if self._get(CONFIG) & 0x0FFF != cfg & 0x0FFF:  # bits 15..12: reset and reserved
            raise OSError("power monitor did not keep its configuration")

    def read(self) -> tuple:
        """(bus_V, current_A)."""
        shunt = self._get(SHUNT)
        if shunt & 0x8000:
            shunt -= 0x10000
        return self._get(BUS) * BUS_LSB_V, shunt * SHUNT_LSB_V / self.shunt_ohm
