"""The heater's power source, whichever kind the rig has: one interface for the run controller and safety.

Two kinds exist. A front end (hardware/PROTOCOL.md) regulates the power itself from its battery and holds it
under a lease the host renews. A SCPI bench supply is a plain constant-voltage source, so constant power is
held here in software (`scpi.ConstantPowerLoop`), one step per keep-alive.

The daemon's contract with either: ``arm`` once (again to change the power), ``keep_alive`` about every
0.25 s while armed (a missed call lets a front end's lease run out, which is the point), ``off`` in every exit
path: it never raises and says whether the source confirmed it.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import math
from typing import Protocol, runtime_checkable

from linerig.daemon.errors import DeviceRejected, RigError
from linerig.daemon.rig import messages as m
from linerig.daemon.rig.frontend import FrontEnd
from linerig.daemon.rig.scpi import ConstantPowerLoop, Reading, ScpiSupply, SupplyLimits
from linerig.daemon.rig.transport import SerialTransport

__all__ = [
    "OFF_TIMEOUT_S",
    "FrontEndHeater",
    "HeaterNotArmed",
    "HeaterSource",
    "ScpiHeater",
    "open_scpi_heater",
]

log = logging.getLogger(__name__)

OFF_TIMEOUT_S = 2.0  # longest `off` waits for a confirmation before falling back (front end) or giving up


class HeaterNotArmed(RigError):
    """The source is no longer heating although the daemon did not switch it off: the front end's lease ran
    out or one of its hard limits tripped (read its F frames), or the supply's output is off. Arm again only
    after finding out why."""


@runtime_checkable
class HeaterSource(Protocol):
    """What the daemon needs from a power source. Power is per metre of heated length (W/m)."""

    kind: str
    """"frontend" or "scpi", for logs and the run's metadata."""
    measured_W_per_m: float | None
    """Last power read back from the source, None until there is one."""
    heater_ohm: float | None
    """Last heater resistance read back, None until there is one."""

    async def arm(self, power_W_per_m: float) -> None:
        """Heat at this power from now on (also changes the power while heating). Raises RigError or
        ScpiError when the source refuses or does not answer; the source is then switched off."""

    async def keep_alive(self) -> None:
        """Renew the lease or run one constant-power step; call every ~0.25 s while armed, no-op otherwise."""

    async def off(self) -> bool:
        """Heater off. Never raises; True when the source confirmed it."""


def _check_power(power_W_per_m: float) -> float:
    p = float(power_W_per_m)
    if not (p > 0.0 and math.isfinite(p)):
        raise ValueError(f"power_W_per_m must be a finite number > 0, got {power_W_per_m!r}")
    return p


class FrontEndHeater:
    """Power regulated by the front end's firmware; this side arms it and renews the lease.

    The front end reports heater V and A in its samples, not in reply to commands, so the daemon passes each
    sample to `observe` to keep `measured_W_per_m` and `heater_ohm` current; both stay None until then.
    """

    kind = "frontend"

    def __init__(self, frontend: FrontEnd, length_m: float, lease_s: float = 1.0) -> None:
        if not (length_m > 0 and math.isfinite(length_m)):
            raise ValueError(f"length_m must be > 0, got {length_m!r}")
        if not 0.0 < lease_s <= 1.0:
            raise ValueError(f"lease_s must be in (0, 1] s (the firmware caps it at 1 s), got {lease_s!r}")
        self.frontend = frontend
        self.length_m = float(length_m)
        self.lease_s = float(lease_s)
        self.power_W_per_m = 0.0
        self.armed = False
        self.measured_W_per_m: float | None = None
        self.heater_ohm: float | None = None

    async def arm(self, power_W_per_m: float) -> None:
        p = _check_power(power_W_per_m)
        try:
            await self.frontend.set_power(p, self.lease_s)
        except DeviceRejected:
            # refused: nothing changed. Off only if it was heating (at the old power); an O here would also
            # acknowledge a latched fault, which is the operator's decision, not this layer's.
            if self.armed:
                await self.off()
            raise
        except BaseException:
            await self.off()  # no answer: the state is unknown, so off (the lease covers a dead link)
            raise
        self.power_W_per_m = p
        self.armed = True

    async def keep_alive(self) -> None:
        """Renew the lease. Raises HeaterNotArmed when the front end says the heater is already off."""
        if not self.armed:
            return
        try:
            await self.frontend.renew_lease(self.lease_s)
        except DeviceRejected as exc:
            if exc.code != "NOTARMED":
                raise
            self.armed = False
            raise HeaterNotArmed(
                "front end reports the heater off (lease ran out or a hard limit tripped); check its F frames"
            ) from exc

    async def off(self) -> bool:
        """O with its acknowledgement; if that fails, O without waiting (the lease is the backstop)."""
        self.armed = False
        self.power_W_per_m = 0.0
        try:
            await asyncio.wait_for(self.frontend.heater_off(), OFF_TIMEOUT_S)
            return True
        except asyncio.CancelledError:
            raise
        except Exception as exc:  # off() must never raise: log and fall back
            log.error("front end: heater off not acknowledged (%s); sending it without waiting", exc)
        with contextlib.suppress(Exception):
            await self.frontend.heater_off_best_effort()
        return False

    def observe(self, sample: m.Sample) -> None:
        """Take the readback from a sample: P = V·I (both RMS, PROTOCOL.md §4.3) per metre, R = V/I."""
        if not (math.isfinite(sample.heater_V) and math.isfinite(sample.heater_A)):
            return
        self.measured_W_per_m = sample.heater_V * sample.heater_A / self.length_m
        if sample.heater_A > 0.0:
            self.heater_ohm = sample.heater_V / sample.heater_A


class ScpiHeater:
    """Constant power from a CV bench supply, held in software from the measured heater resistance."""

    kind = "scpi"

    def __init__(self, supply: ScpiSupply, length_m: float, nominal_ohm: float) -> None:
        if not (length_m > 0 and math.isfinite(length_m)):
            raise ValueError(f"length_m must be > 0, got {length_m!r}")
        if not (nominal_ohm > 0 and math.isfinite(nominal_ohm)):
            raise ValueError(f"nominal_ohm must be > 0, got {nominal_ohm!r}")
        self.supply = supply
        self.length_m = float(length_m)
        self.nominal_ohm = float(nominal_ohm)
        self.loop: ConstantPowerLoop | None = None
        self.measured_W_per_m: float | None = None
        self.heater_ohm: float | None = None
        self.reading: Reading | None = None
        """The last volts and amps read back while armed (None until the first step of this arming)."""

    @property
    def armed(self) -> bool:
        return self.loop is not None

    async def arm(self, power_W_per_m: float) -> None:
        """Start at sqrt(P·R) with R the last measured resistance (nominal at first); re-arming changes the target."""
        target_W = _check_power(power_W_per_m) * self.length_m
        if self.loop is not None:
            self.loop.target_W = min(target_W, self.supply.limits.p_max_W)
            return
        loop = ConstantPowerLoop(self.supply, target_W)
        self.measured_W_per_m = self.reading = None  # a readback from an earlier arming says nothing about this one
        try:
            await loop.start(self.heater_ohm or self.nominal_ohm)
        except BaseException:
            await self.off()
            raise
        self.loop = loop

    async def keep_alive(self) -> None:
        """One loop step: measure, check the power limit, set the next voltage. Any ScpiError has already
        switched the output off when it reaches the caller; HeaterNotArmed when the output went off."""
        loop = self.loop
        if loop is None:
            return
        try:
            state = await loop.step()
        except BaseException:
            self.loop = None
            self.measured_W_per_m = None
            raise
        if self.loop is not loop:  # switched off while this step was on the wire: its readback is stale
            return
        self.measured_W_per_m = state.power_W / self.length_m
        self.reading = state.reading
        if state.reading.amps >= loop.min_current_A:
            if math.isfinite(state.resistance_ohm):
                self.heater_ohm = state.resistance_ohm
            return
        # no current: an open heater (safety judges the power) or an output that went off by itself
        try:
            on = await self.supply.output_state()
        except BaseException:
            self.loop = None
            await self.supply.off()
            raise
        if not on:
            self.loop = None
            raise HeaterNotArmed("supply output is off although armed: a mains dropout or someone at the panel")

    async def off(self) -> bool:
        self.loop = None
        self.reading = None
        try:
            ok = await self.supply.off()
        except asyncio.CancelledError:
            raise
        except Exception as exc:  # ScpiSupply.off does not raise; this guards the promise regardless
            log.error("supply: output off failed: %s", exc)
            ok = False
        self.measured_W_per_m = 0.0 if ok else None
        return ok

    def close(self) -> None:
        """Close the supply's port (call after `off`)."""
        close = getattr(self.supply.t, "close", None)
        if callable(close):
            close()


async def open_scpi_heater(
    url: str,
    length_m: float,
    nominal_ohm: float,
    limits: SupplyLimits,
    *,
    timeout_s: float = 1.0,
    expect_idn: str | None = None,
    baud: int = 9600,
) -> ScpiHeater:
    """Open the supply at a pyserial URL and start its session: *CLS, *IDN?, output off (confirmed).

    Raises LinkError when the port cannot be opened and ScpiError when the supply does not answer sensibly;
    the port is closed again in both cases.
    """
    transport = SerialTransport(url, baud)
    transport.open()
    supply = ScpiSupply(transport, limits, timeout_s=timeout_s, expect_idn=expect_idn)
    try:
        await supply.open()
    except BaseException:
        transport.close()
        raise
    return ScpiHeater(supply, length_m, nominal_ohm)

