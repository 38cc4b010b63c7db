"""A programmable DC supply over SCPI, on any line transport, with constant heater power in software.

The rules (hardware-reliability §1.4): one query in flight at a time; the input is cleared
before each query; replies are read with a timeout up to LF and decoded as strict ASCII; every
value is range-checked; every setpoint is read back, because a lost set command on a serial
line is otherwise invisible; after a garbled or missing reply the link is resynchronised with
``*CLS`` + ``*IDN?`` (and the identity checked) before an idempotent retry; the error queue is
drained with a bounded loop; and ``off()`` never raises, so it is safe in every exit path.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import math
import re
from collections.abc import AsyncIterator, Awaitable, Callable
from dataclasses import dataclass
from typing import Protocol, TypeVar

log = logging.getLogger(__name__)

T = TypeVar("T")

OVERFLOW_MIN = 9.9e37  # SCPI's "+Inf" (9.9E37) and "NaN" (9.91E37) markers
ESR_PON = 0x80  # IEEE 488.2 event status register: power on (the supply lost mains since the last *ESR?)
_ERROR_RE = re.compile(r'^([+-]?\d+)\s*,\s*"(.*)"$')


class LineTransport(Protocol):
    """What the driver needs from a byte pipe (a pyserial URL, a pty, a socket)."""

    async def write(self, data: bytes) -> None:
        """Send all of ``data``."""

    async def readline(self, timeout: float) -> bytes:
        """Bytes up to and including LF; on timeout, whatever arrived so far (not ending in LF, maybe empty)."""

    def reset_input_buffer(self) -> None:
        """Discard everything received and not yet read."""


class ScpiError(Exception):
    """Base class; the supply's state is uncertain when one of these escapes a setting call."""


class ScpiTimeout(ScpiError):
    """No complete reply in time: check the cable, the baud rate and the line terminator."""


class ScpiGarbled(ScpiError):
    """A reply that is not ASCII or does not parse: line noise or a framing mismatch."""


class ScpiRangeError(ScpiError):
    """A setpoint outside the configured limits, or a reading outside what the supply can do."""


class ScpiReadbackMismatch(ScpiError):
    """The supply reports a setpoint different from the one sent: the set command was lost or refused."""


class ScpiIdentityError(ScpiError):
    """Another instrument (or another dialect) answered *IDN?: check the port name in the config."""


class ScpiDeviceError(ScpiError):
    """The supply's error queue held entries; ``errors`` lists (code, message)."""

    def __init__(self, errors: list[tuple[int, str]]) -> None:
        self.errors = errors
        super().__init__("supply reported: " + "; ".join(f"{c},{m!r}" for c, m in errors))


class PowerLimitExceeded(ScpiError):
    """Measured heater power stayed above the limit; the output has been switched off."""


@dataclass(frozen=True)
class Identity:
    maker: str
    model: str
    serial: str
    firmware: str

    @classmethod
    def parse(cls, text: str) -> Identity:
        parts = [p.strip() for p in text.split(",")]
        if len(parts) != 4 or not parts[0] or not parts[1]:
            raise ScpiGarbled(f"*IDN? reply {text!r} is not maker,model,serial,firmware")
        return cls(*parts)


@dataclass(frozen=True)
class SupplyLimits:
    """The most this rig may ever ask of the supply (config file values, not the supply's ratings)."""

    v_max: float
    i_max: float
    p_max_W: float

    def __post_init__(self) -> None:
        if not (self.v_max > 0 and self.i_max > 0 and self.p_max_W > 0):
            raise ValueError("SupplyLimits: v_max, i_max and p_max_W must all be > 0")


@dataclass(frozen=True)
class Reading:
    volts: float
    amps: float

    @property
    def watts(self) -> float:
        return self.volts * self.amps

    @property
    def ohms(self) -> float:
        return self.volts / self.amps if self.amps > 0 else math.inf


@dataclass
class LinkStats:
    queries: int = 0
    timeouts: int = 0
    garbled: int = 0
    retries: int = 0
    resyncs: int = 0
    device_errors: int = 0


class ScpiSupply:
    def __init__(
        self,
        transport: LineTransport,
        limits: SupplyLimits,
        *,
        timeout_s: float = 1.0,
        retries: int = 2,
        expect_idn: str | None = None,
        setpoint_tol: float = 0.005,
        error_drain_max: int = 40,
    ) -> None:
        self.t = transport
        self.limits = limits
        self.timeout_s = timeout_s
        self.retries = retries
        self.expect_idn = expect_idn  # e.g. "MAKER,MODEL": resync insists the reply starts with it
        self.setpoint_tol = setpoint_tol
        self.error_drain_max = error_drain_max
        self.identity: Identity | None = None
        self.stats = LinkStats()
        self._lock = asyncio.Lock()

    # --- wire level -----------------------------------------------------------------------------
    async def write(self, command: str) -> None:
        async with self._lock:
            await self.t.write(_encode(command))

    async def query(self, command: str) -> str:
        """One query, no retry: TimeoutError and garbage become typed errors."""
        async with self._lock:
            self.stats.queries += 1
            self.t.reset_input_buffer()  # leftovers of an earlier timed-out reply must not answer this one
            await self.t.write(_encode(command))
            raw = await self.t.readline(self.timeout_s)
        if not raw.endswith(b"\n"):
            self.stats.timeouts += 1
            raise ScpiTimeout(f"no reply to {command!r} within {self.timeout_s:g} s (got {raw!r})")
        try:
            text = raw.decode("ascii").strip()
        except UnicodeDecodeError:
            self.stats.garbled += 1
            raise ScpiGarbled(f"non-ASCII reply to {command!r}: {raw!r}") from None
        if not text.isprintable():
            self.stats.garbled += 1
            raise ScpiGarbled(f"unprintable reply to {command!r}: {raw!r}")
        return text

    async def query_float(self, command: str, lo: float, hi: float) -> float:
        text = await self.query(command)
        try:
            value = float(text)
        except ValueError:
            self.stats.garbled += 1
            raise ScpiGarbled(f"reply to {command!r} is not a number: {text!r}") from None
        if not math.isfinite(value) or abs(value) >= OVERFLOW_MIN:
            raise ScpiRangeError(f"{command!r} returned the overflow/NaN marker {text!r}")
        if not lo <= value <= hi:
            raise ScpiRangeError(f"{command!r} returned {value:g}, outside {lo:g}..{hi:g}")
        return value

    async def _with_retry(self, what: str, op: Callable[[], Awaitable[T]]) -> T:
        """Run an idempotent operation; after a timeout or garbage, resync and try again."""
        last: ScpiError | None = None
        for attempt in range(self.retries + 1):
            if attempt:
                self.stats.retries += 1
                try:
                    await self.resync()
                except (ScpiTimeout, ScpiGarbled) as exc:
                    last = exc
                    continue
            try:
                return await op()
            except (ScpiTimeout, ScpiGarbled, ScpiReadbackMismatch) as exc:
                log.warning("supply: %s failed (%s), attempt %d", what, exc, attempt + 1)
                last = exc
        assert last is not None
        raise type(last)(f"{what}: gave up after {self.retries + 1} attempts; supply state unknown ({last})")

    # --- session --------------------------------------------------------------------------------
    async def identify(self) -> Identity:
        text = await self.query("*IDN?")
        ident = Identity.parse(text)
        if self.expect_idn and not text.upper().startswith(self.expect_idn.upper()):
            raise ScpiIdentityError(f"expected an instrument starting {self.expect_idn!r}, got {text!r}")
        if self.identity is not None and ident != self.identity:
            raise ScpiIdentityError(f"a different instrument answered: {ident} (was {self.identity})")
        self.identity = ident
        return ident

    async def resync(self) -> Identity:
        """Clear status and the error queue and prove the link carries whole replies again."""
        self.stats.resyncs += 1
        self.t.reset_input_buffer()
        await self.write("*CLS")
        return await self.identify()

    async def open(self) -> Identity:
        """Startup order: clear, identify, output off (confirmed), drain errors, clear the power-on flag."""
        ident = await self._with_retry("identify", self.resync)
        if not await self.off():
            raise ScpiError("could not confirm the output is off at startup; check the supply before use")
        await self.errors()
        await self.event_status()  # clears the power-on flag so a later one means a new dropout
        return ident

    async def reset(self) -> None:
        """*RST (defined state, output off on supplies), then confirm: *RST does not clear the error queue."""
        await self.write("*RST")
        await self._with_retry("*OPC?", lambda: self.query_float("*OPC?", 1, 1))
        if await self.output_state():
            raise ScpiError("output still on after *RST; switch the supply off by hand and check it")

    async def event_status(self) -> int:
        """Read (and so clear) the event status register; test ``& ESR_PON`` to spot a mains dropout."""
        return int(await self._with_retry("*ESR?", lambda: self.query_float("*ESR?", 0, 255)))

    @contextlib.asynccontextmanager
    async def session(self) -> AsyncIterator[ScpiSupply]:
        """``async with supply.session():`` opens the supply and switches the output off however it ends."""
        try:
            await self.open()
            yield self
        finally:
            await asyncio.shield(self.off())

    # --- settings, each read back ---------------------------------------------------------------
    def _check_setpoint(self, name: str, value: float, top: float) -> None:
        if not math.isfinite(value) or not 0.0 <= value <= top:
            raise ScpiRangeError(f"{name} {value:g} is outside 0..{top:g} (SupplyLimits)")

    async def _set_and_confirm(self, command: str, readback: str, value: float, top: float) -> float:
        self._check_setpoint(command, value, top)

        async def once() -> float:
            await self.write(f"{command} {value:.4f}")
            got = await self.query_float(readback, -top * 0.01 - self.setpoint_tol, top * 1.05)
            if abs(got - value) > self.setpoint_tol:
                raise ScpiReadbackMismatch(f"{command} {value:g} reads back as {got:g}")
            return got

        return await self._with_retry(command, once)

    async def set_voltage(self, volts: float) -> float:
        return await self._set_and_confirm("VOLT", "VOLT?", volts, self.limits.v_max)

    async def set_current(self, amps: float) -> float:
        return await self._set_and_confirm("CURR", "CURR?", amps, self.limits.i_max)

    async def output_state(self) -> bool:
        async def once() -> bool:
            text = await self.query("OUTP?")
            if text not in ("0", "1", "ON", "OFF"):
                self.stats.garbled += 1
                raise ScpiGarbled(f"OUTP? reply {text!r} is not 0/1")
            return text in ("1", "ON")

        return await self._with_retry("OUTP?", once)

    async def output(self, on: bool) -> None:
        async def once() -> None:
            await self.write("OUTP ON" if on else "OUTP OFF")
            if await self.output_state() != on:
                raise ScpiReadbackMismatch(f"output did not turn {'on' if on else 'off'}")

        await self._with_retry("OUTP", once)

    async def off(self) -> bool:
        """Output off, confirmed by OUTP?. Never raises (except cancellation): returns whether it is confirmed."""
        for attempt in range(self.retries + 2):
            try:
                if attempt:
                    await self.resync()
                await self.write("OUTP OFF")
                if not await self.output_state():
                    return True
            except ScpiError as exc:
                log.error("supply: OUTP OFF attempt %d failed: %s", attempt + 1, exc)
            except OSError as exc:
                log.error("supply: OUTP OFF attempt %d, port error: %s", attempt + 1, exc)
        return False

    # --- readings and errors ----------------------------------------------------------------------
    async def measure(self) -> Reading:
        lim = self.limits
        v = await self._with_retry("MEAS:VOLT?", lambda: self.query_float("MEAS:VOLT?", -0.05, lim.v_max * 1.05))
        a = await self._with_retry("MEAS:CURR?", lambda: self.query_float("MEAS:CURR?", -0.05, lim.i_max * 1.05))
        return Reading(max(v, 0.0), max(a, 0.0))

    async def errors(self) -> list[tuple[int, str]]:
        """Drain SYST:ERR? until it reads 0, at most ``error_drain_max`` times (garbage cannot loop us)."""
        found: list[tuple[int, str]] = []
        for _ in range(self.error_drain_max):
            try:
                text = await self.query("SYST:ERR?")
            except (ScpiTimeout, ScpiGarbled) as exc:
                found.append((0, f"unreadable error entry: {exc}"))
                continue
            m = _ERROR_RE.match(text)
            if m is None:
                self.stats.garbled += 1
                found.append((0, f"unparsable error entry {text!r}"))
                continue
            code = int(m.group(1))
            if code == 0:
                break
            found.append((code, m.group(2)))
        self.stats.device_errors += sum(1 for c, _ in found if c)
        return found

    async def check_errors(self) -> None:
        found = await self.errors()
        if found:
            raise ScpiDeviceError(found)


def _encode(command: str) -> bytes:
    if "\n" in command or "\r" in command:
        raise ValueError(f"SCPI command {command!r} holds a line terminator")
    return command.encode("ascii") + b"\n"


# --- constant power held in software ------------------------------------------------------------


def voltage_setpoint(
    target_W: float, r_ohm: float, v_prev: float, limits: SupplyLimits, max_step_frac: float = 0.25
) -> float:
    """CV setpoint for ``target_W`` into ``r_ohm``: sqrt(P·R), clamped to P_max, V_max, I_max and a rate limit.

    Pure, so the clamps are checkable one by one. ``v_prev`` 0 means "first step": no rate limit.
    """
    if not r_ohm > 0 or not math.isfinite(r_ohm):
        raise ValueError(f"heater resistance {r_ohm!r} ohm is not usable; check the heater and its leads")
    p = min(max(target_W, 0.0), limits.p_max_W)
    v = math.sqrt(p * r_ohm)
    v = min(v, limits.v_max, limits.i_max * r_ohm)
    if v_prev > 0:
        v = min(max(v, v_prev * (1 - max_step_frac)), v_prev * (1 + max_step_frac))
    return min(v, math.sqrt(limits.p_max_W * r_ohm))  # the power clamp wins over the rate limit


@dataclass(frozen=True)
class LoopState:
    reading: Reading
    v_set: float
    power_W: float
    resistance_ohm: float


class ConstantPowerLoop:
    """Constant heater power on a CV supply, recomputed from the measured resistance every cycle.

    Any failure inside ``step`` switches the output off before the error propagates.

    P_max is enforced three times: the target is clamped to it, each voltage setpoint is clamped to
    sqrt(P_max·R), and a measured power above P_max·(1 + tol) for ``trip_count`` cycles switches the
    output off and raises PowerLimitExceeded.
    """

    def __init__(
        self,
        supply: ScpiSupply,
        target_W: float,
        *,
        trip_tol: float = 0.10,
        trip_count: int = 3,
        max_step_frac: float = 0.25,
        min_current_A: float = 1e-3,
    ) -> None:
        if target_W <= 0:
            raise ValueError("ConstantPowerLoop: target_W must be > 0")
        self.supply = supply
        self.target_W = min(target_W, supply.limits.p_max_W)
        self.trip_tol = trip_tol
        self.trip_count = trip_count
        self.max_step_frac = max_step_frac
        self.min_current_A = min_current_A
        self.v_set = 0.0
        self.r_ohm = math.nan
        self._over = 0

    async def start(self, r_guess_ohm: float) -> None:
        """Current limit as a backstop, a first voltage from the nominal resistance, output on."""
        lim = self.supply.limits
        self.r_ohm = r_guess_ohm
        i_cap = min(lim.i_max, math.sqrt(lim.p_max_W / r_guess_ohm) * 1.2)
        await self.supply.set_current(round(i_cap, 3))
        self.v_set = voltage_setpoint(self.target_W, r_guess_ohm, 0.0, lim)
        await self.supply.set_voltage(round(self.v_set, 3))
        await self.supply.output(True)

    async def step(self) -> LoopState:
        """Measure, check the limit, and set the next voltage. Call at the supply's readback rate (2-10 Hz)."""
        lim = self.supply.limits
        try:
            reading = await self.supply.measure()
        except ScpiError:
            await self.supply.off()  # heater off first (an over-range reading is over-current), then report
            raise
        if reading.watts > lim.p_max_W * (1 + self.trip_tol):
            self._over += 1
            if self._over >= self.trip_count:
                await self.supply.off()
                raise PowerLimitExceeded(
                    f"measured {reading.watts:.2f} W > {lim.p_max_W:g} W for {self._over} cycles; output off"
                )
        else:
            self._over = 0
        if reading.amps >= self.min_current_A:
            self.r_ohm = reading.ohms
            self.v_set = voltage_setpoint(self.target_W, self.r_ohm, self.v_set, lim, self.max_step_frac)
            try:
                await self.supply.set_voltage(round(self.v_set, 3))
            except ScpiError:
                await self.supply.off()
                raise
        return LoopState(reading, self.v_set, reading.watts, self.r_ohm)

    async def stop(self) -> bool:
        return await self.supply.off()
