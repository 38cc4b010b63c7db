"""A programmable DC supply that speaks SCPI over a line, with a heater on its output.

Feed it command lines (bytes, one message each) and it returns the reply lines the real
instrument would send. It keeps the state a driver has to get right: output on/off, programmed
volts and amps, constant-voltage or constant-current operation against the heater resistance,
an error queue (FIFO, depth 20, overflow entry -350), the event status register with its
power-on bit, and readbacks with small noise. Faults can be injected for the next replies or at
a rate: garbled bytes, silence, and error-queue entries. It does no I/O itself; the simulator
process puts it behind a pseudo-terminal.
"""

from __future__ import annotations

import math
import random
from collections import deque
from dataclasses import dataclass, field
from typing import Protocol

ESR_OPC, ESR_QYE, ESR_DDE, ESR_EXE, ESR_CME, ESR_PON = 0x01, 0x04, 0x08, 0x10, 0x20, 0x80
QUEUE_DEPTH = 20
OVERFLOW = 9.9e37  # what SCPI instruments send for an unrepresentable reading


class HeaterLoad(Protocol):
    def set_heater_electrical(self, volts: float, on: bool) -> None:
        """Told the voltage across the heater whenever it changes (the physics turns it into heat)."""


@dataclass
class SupplyFaults:
    """What to do to the next replies; counts are used up first, rates apply after."""

    garble_next: int = 0
    drop_next: int = 0
    garble_rate: float = 0.0
    drop_rate: float = 0.0
    error_on_next_set: tuple[int, str] | None = None  # the next setting command is refused with this error
    stuck_output_V: float | None = None  # a failed regulator: the output sits here whatever is programmed


@dataclass
class ScpiSupplySim:
    heater_ohm: float = 20.0
    maker: str = "LINERIG"
    model: str = "SIMPSU-3005"
    serial: str = "SIM000042"
    firmware: str = "1.04"
    v_max: float = 30.0
    i_max: float = 5.0
    noise_V: float = 0.002  # readback noise, standard deviation
    noise_A: float = 0.0005
    seed: int = 1
    load: HeaterLoad | None = None
    faults: SupplyFaults = field(default_factory=SupplyFaults)
    output: bool = False
    v_set: float = 0.0
    i_set: float = 0.1
    esr: int = ESR_PON
    log: list[str] = field(default_factory=list)  # every command received, for tests and the sim's log
    errors: deque[tuple[int, str]] = field(default_factory=deque)

    def __post_init__(self) -> None:
        self._rng = random.Random(self.seed)

    # --- the electrical side --------------------------------------------------------------------
    def operating_point(self) -> tuple[float, float, str]:
        """(volts, amps, 'CV'|'CC'|'OFF') at the output terminals, noise-free."""
        if not self.output:
            return 0.0, 0.0, "OFF"
        r = self.heater_ohm
        if self.faults.stuck_output_V is not None:
            v = self.faults.stuck_output_V
            return v, (0.0 if math.isinf(r) else v / max(r, 1e-6)), "CV"
        if math.isinf(r):  # open heater: full programmed voltage, no current
            return self.v_set, 0.0, "CV"
        if r <= 0.0:
            return 0.0, self.i_set, "CC"
        if self.v_set / r <= self.i_set:
            return self.v_set, self.v_set / r, "CV"
        return self.i_set * r, self.i_set, "CC"

    def set_heater_ohm(self, ohm: float) -> None:
        """The physics changed the heater (warming, or a fault: inf for open, ~0 for a short)."""
        self.heater_ohm = ohm
        self._tell_load()

    def power_cycle(self) -> None:
        """Mains dropped out and came back: output off, defaults, queue cleared, PON set."""
        self.output = False
        self.v_set, self.i_set = 0.0, 0.1
        self.errors.clear()
        self.esr = ESR_PON
        self._tell_load()

    def _tell_load(self) -> None:
        if self.load is not None:
            v, _, mode = self.operating_point()
            self.load.set_heater_electrical(v, mode != "OFF")

    # --- faults ---------------------------------------------------------------------------------
    def push_error(self, code: int, message: str) -> None:
        if len(self.errors) >= QUEUE_DEPTH:
            return
        if len(self.errors) == QUEUE_DEPTH - 1:
            self.errors.append((-350, "Queue overflow"))
            return
        self.errors.append((code, message))
        if -199 <= code <= -100:
            self.esr |= ESR_CME
        elif -299 <= code <= -200:
            self.esr |= ESR_EXE
        elif -399 <= code <= -300:
            self.esr |= ESR_DDE
        elif -499 <= code <= -400:
            self.esr |= ESR_QYE

    def _deliver(self, reply: str) -> list[bytes]:
        f = self.faults
        if f.drop_next > 0:
            f.drop_next -= 1
            return []
        if f.garble_next > 0:
            f.garble_next -= 1
            return [self._garble(reply)]
        if f.drop_rate and self._rng.random() < f.drop_rate:
            return []
        if f.garble_rate and self._rng.random() < f.garble_rate:
            return [self._garble(reply)]
        return [reply.encode("ascii") + b"\n"]

    def _garble(self, reply: str) -> bytes:
        raw = bytearray(reply.encode("ascii"))
        if self._rng.random() < 0.5 and raw:
            raw[self._rng.randrange(len(raw))] = self._rng.choice((0xFF, 0x80, 0xC3))  # line noise
        else:
            raw = bytearray(b"#!" + bytes(self._rng.choice(b"?@%&") for _ in range(4)))  # ASCII but not it
        return bytes(raw) + b"\n"

    # --- the command side -----------------------------------------------------------------------
    def handle(self, line: bytes) -> list[bytes]:
        """One program message in; the reply lines out (empty when nothing is owed or the reply is lost)."""
        try:
            text = line.decode("ascii").strip()
        except UnicodeDecodeError:
            self.push_error(-101, "Invalid character")
            return []
        if not text:
            return []
        self.log.append(text)
        replies: list[str] = []
        for unit in text.split(";"):
            unit = unit.strip().lstrip(":")
            if unit:
                out = self._one(unit)
                if out is not None:
                    replies.append(out)
        return self._deliver(";".join(replies)) if replies else []

    def _one(self, unit: str) -> str | None:
        head, _, arg = unit.partition(" ")
        head = head.upper()
        arg = arg.strip()
        query = head.endswith("?")
        key = _canonical(head.rstrip("?"))
        if key is None:
            self.push_error(-113, "Undefined header")
            return None
        if query:
            return self._query(key)
        return self._set(key, arg)

    def _query(self, key: str) -> str | None:
        if key == "*IDN":
            return f"{self.maker},{self.model},{self.serial},{self.firmware}"
        if key == "*OPC":
            return "1"
        if key == "*ESR":
            value, self.esr = self.esr, 0
            return str(value)
        if key == "OUTP":
            return "1" if self.output else "0"
        if key == "VOLT":
            return f"{self.v_set:.3f}"
        if key == "CURR":
            return f"{self.i_set:.3f}"
        if key in ("MEAS:VOLT", "MEAS:CURR"):
            v, i, _ = self.operating_point()
            if key == "MEAS:VOLT":
                return f"{max(0.0, v + self._rng.gauss(0.0, self.noise_V) * (v > 0)):.4f}"
            return f"{max(0.0, i + self._rng.gauss(0.0, self.noise_A) * (i > 0)):.4f}"
        if key == "SYST:ERR":
            code, msg = self.errors.popleft() if self.errors else (0, "No error")
            return f'{code:+d},"{msg}"'
        self.push_error(-113, "Undefined header")
        return None

    def _set(self, key: str, arg: str) -> None:
        if key == "*CLS":
            self.errors.clear()
            self.esr = 0
            return None
        if key == "*RST":
            self.output = False
            self.v_set, self.i_set = 0.0, 0.1
            self._tell_load()
            return None
        if key in ("SYST:REM", "SYST:LOC"):
            return None
        if self.faults.error_on_next_set is not None:
            code, msg = self.faults.error_on_next_set
            self.faults.error_on_next_set = None
            self.push_error(code, msg)
            return None
        if not arg:
            self.push_error(-109, "Missing parameter")
            return None
        if key == "OUTP":
            state = {"ON": True, "1": True, "OFF": False, "0": False}.get(arg.upper())
            if state is None:
                self.push_error(-224, "Illegal parameter value")
                return None
            self.output = state
            self._tell_load()
            return None
        if key in ("VOLT", "CURR"):
            try:
                value = float(arg)
            except ValueError:
                self.push_error(-104, "Data type error")
                return None
            top = self.v_max if key == "VOLT" else self.i_max
            if not (0.0 <= value <= top * 1.02) or not math.isfinite(value):
                self.push_error(-222, "Data out of range")
                return None
            if key == "VOLT":
                self.v_set = round(value, 3)
            else:
                self.i_set = round(value, 3)
            self._tell_load()
            return None
        self.push_error(-113, "Undefined header")
        return None


_KEYWORDS = {
    "*IDN": "*IDN", "*CLS": "*CLS", "*RST": "*RST", "*OPC": "*OPC", "*ESR": "*ESR",
    "OUTP": "OUTP", "OUTPUT": "OUTP", "OUTP:STAT": "OUTP", "OUTPUT:STATE": "OUTP",
    "VOLT": "VOLT", "VOLTAGE": "VOLT", "SOUR:VOLT": "VOLT", "SOURCE:VOLTAGE": "VOLT", "VOLT:LEV": "VOLT",
    "CURR": "CURR", "CURRENT": "CURR", "SOUR:CURR": "CURR", "SOURCE:CURRENT": "CURR", "CURR:LEV": "CURR",
    "MEAS:VOLT": "MEAS:VOLT", "MEASURE:VOLTAGE": "MEAS:VOLT", "MEAS:VOLT:DC": "MEAS:VOLT",
    "MEAS:CURR": "MEAS:CURR", "MEASURE:CURRENT": "MEAS:CURR", "MEAS:CURR:DC": "MEAS:CURR",
    "SYST:ERR": "SYST:ERR", "SYSTEM:ERROR": "SYST:ERR", "SYST:ERR:NEXT": "SYST:ERR",
    "SYST:REM": "SYST:REM", "SYSTEM:REMOTE": "SYST:REM", "SYST:LOC": "SYST:LOC", "SYSTEM:LOCAL": "SYST:LOC",
}


def _canonical(head: str) -> str | None:
    return _KEYWORDS.get(head.upper())
