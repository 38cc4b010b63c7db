"""A simulated SCPI bench supply whose output heats the simulated probe.

`RigLoad` is the `scpi_sim.HeaterLoad` the supply emulator reports its output to: it turns the voltage across
the heater into power per metre for the rig (P = V²/R, divided by the heated length). `RigLoad.sync`, called
by the simulator every tick, keeps the two in step the other way: the supply sees the rig's heater
resistance (warming, drift, and the heater open and short faults) and the rig sees V²/R at the resistance of
the moment. `ScpiPort` turns a byte stream (a pseudo-terminal) into the supply's command lines and replies.

Note on the battery: `SimulatedRig` takes heater power only through ``set_heater``, which passes it through the
rig's battery model (a PWM regulator on a 12 V battery). A bench supply has no battery, so this module asks
for exactly V²/R and checks what the rig delivered: the request is met unless it exceeds what the rig's
battery could give (about 4 W into the default 40 Ω needle). `RigLoad.clamped` says when that happened; give
the rig a `BatterySpec` with a higher ``full_V`` when a supply is meant to drive it harder. The rig's battery
also counts the energy as drawn from it, which only matters to its own charge state.
"""

from __future__ import annotations

import math

from linerig.daemon.sim.rig_model import SimulatedRig
from linerig.daemon.sim.scpi_sim import ScpiSupplySim

__all__ = ["MAX_LINE_BYTES", "SHORT_OHM", "RigLoad", "ScpiPort", "make_supply"]

SHORT_OHM = 0.2  # the rig's cable short ("about 0.2 ohm", rig_model.FAULT_NAMES)
MAX_LINE_BYTES = 256  # a command line longer than this overruns the instrument's input buffer
_OHM_RTOL = 1e-6


class RigLoad:
    """The heater on the supply's terminals, as the rig sees it. Satisfies `scpi_sim.HeaterLoad`.

    It touches the rig only while the supply's output is on, and once when it goes off, so a front end's own
    PWM heater can drive the same rig when the supply is idle.
    """

    def __init__(self, rig: SimulatedRig) -> None:
        self.rig = rig
        self.supply: ScpiSupplySim | None = None
        self.volts = 0.0
        self.on = False
        self.requested_W_per_m = 0.0
        self._driving = False

    def attach(self, supply: ScpiSupplySim) -> None:
        """Put the heater on ``supply``'s output (sets ``supply.load``) and match its resistance."""
        self.supply = supply
        supply.load = self
        self.sync()

    def terminal_ohm(self) -> float:
        """What the supply's terminals see: the heater, an open circuit, or the cable short."""
        faults = self.rig.active_faults
        if "heater_open" in faults:
            return math.inf
        if "heater_short" in faults:
            return SHORT_OHM
        return self.rig.heater_resistance_ohm()

    def set_heater_electrical(self, volts: float, on: bool) -> None:
        """The supply's output changed: ``volts`` across the heater, output ``on``."""
        self.volts, self.on = float(volts), bool(on)
        self._apply()

    def sync(self) -> None:
        """Once per simulator tick: resistance to the supply, V²/R at the present resistance to the rig."""
        if self.supply is not None:
            r = self.terminal_ohm()
            old = self.supply.heater_ohm
            if not (r == old or (math.isfinite(r) and math.isfinite(old) and abs(r - old) <= _OHM_RTOL * old)):
                self.supply.set_heater_ohm(r)  # the supply calls set_heater_electrical with its new output
                return
        self._apply()

    def battery_limit_W_per_m(self) -> float:
        """Most the rig's battery model lets through into its heater now (see the module note)."""
        rig = self.rig
        b = rig.battery
        r = rig.heater_resistance_ohm()
        i_on = min(rig.open_circuit_V() / (r + b.internal_resistance_ohm), b.current_limit_A)
        return i_on * i_on * r / rig.probe.heater_length_m

    @property
    def clamped(self) -> bool:
        """True when the rig delivers less than the V²/R the supply puts across the heater."""
        return self._driving and self.requested_W_per_m > self.battery_limit_W_per_m() * (1.0 + 1e-9)

    def _apply(self) -> None:
        if not self.on and not self._driving:
            return
        faults = self.rig.active_faults
        if not self.on or "heater_open" in faults or "heater_short" in faults:
            watts = 0.0  # an open heater carries no current; a short in the cable heats the cable
        else:
            watts = self.volts * self.volts / self.rig.heater_resistance_ohm()
        self.requested_W_per_m = watts / self.rig.probe.heater_length_m
        self.rig.set_heater(self.on, self.requested_W_per_m)
        self._driving = self.on


def make_supply(rig: SimulatedRig, **supply_kwargs: object) -> tuple[ScpiSupplySim, RigLoad]:
    """A `ScpiSupplySim` with the rig's heater on its output: ``supply, load = make_supply(rig)``."""
    load = RigLoad(rig)
    supply = ScpiSupplySim(heater_ohm=load.terminal_ohm(), **supply_kwargs)  # type: ignore[arg-type]
    load.attach(supply)
    return supply, load


class ScpiPort:
    """Bytes in from the host, reply bytes out: splits the stream into LF-terminated program messages.

    A line longer than `MAX_LINE_BYTES` without an LF is dropped whole (up to the next LF) and queues
    -363 "Input buffer overrun" (SCPI-1999 standard error list; code from memory).
    """

    def __init__(self, supply: ScpiSupplySim, max_line: int = MAX_LINE_BYTES) -> None:
        self.supply = supply
        self.max_line = max_line
        self._buf = bytearray()
        self._discarding = False

    def feed(self, data: bytes) -> bytes:
        """Answer every complete line in ``data`` (with what came before); partial lines wait for more."""
        out = bytearray()
        for b in data:
            if b == 0x0A:
                if not self._discarding:
                    for reply in self.supply.handle(bytes(self._buf)):
                        out += reply
                self._buf.clear()
                self._discarding = False
            elif not self._discarding:
                self._buf.append(b)
                if len(self._buf) > self.max_line:
                    self._buf.clear()
                    self._discarding = True
                    self.supply.push_error(-363, "Input buffer overrun")
        return bytes(out)
