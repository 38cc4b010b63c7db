"""The real front-end firmware (``hardware/firmware/probefw``) running inside the simulator.

`FirmwareFrontEnd` hosts ``probefw.device.FrontEnd`` unchanged, on a board (`RigHal`) whose converters,
power monitor and heater switch are a `daemon.sim.rig_model.SimulatedRig`. Every byte the simulator sends
is therefore a byte the firmware wrote, so the simulator speaks PROTOCOL.md exactly as the device does. It
has the interface of `daemon.sim.frontend_sim.FrontEndEmulator`, so `daemon.sim.server.SimServer` can use
either.

Two clocks
----------
The firmware sees one millisecond counter: *device* time since its boot, which runs ``speed`` times faster
than the wall clock. Its control cycles (100 ms), samples and hard limits (on-time) therefore follow the
physics, and a 20-minute run takes 12 s at speed 100.

The heater lease is a real-time safety property: the heater must be off within 1 s of *wall* time after the
host goes quiet, whatever the speed. The same holds for the other link timings (the 2000 ms duplicate
window, the 1000 ms corrupt-frame window, the 5 s latched-fault repeat), because a host retries and
reconnects in wall time. The firmware keeps these in a handful of fields; before each call into it the host
re-bases them onto the device counter so that their *intervals* are wall intervals, and reads them back
afterwards (`daemon/sim/wall_link.py`, shared with the MicroPython host). The firmware's own `Lease` class, its
cap and its comparison code run unchanged; only the clock they are measured against differs. A lease granted
with ``lease_ms`` = 1000 thus ends 1.0 s of wall time later, which at speed 100 is 100 s of device time.

Loop timing
-----------
`tick` (and `receive`, which first catches up) runs every control cycle due up to the device time of
``wall``: physics advance by one cycle, then one ``FrontEnd.tick``. If more than `MAX_CYCLES_PER_CALL` are
due (the process was stopped, or the speed is more than the machine can simulate), the backlog is served as
the firmware serves a stalled loop: one late cycle, the missed slots skipped and counted
(``control.missed``), the physics advanced in one step. Samples then show the gap, as they would on hardware.

Injected faults
---------------
Wire faults (`frontend_sim.WireFaults`) act on the bytes leaving the device. Two firmware faults match the
emulator's: `set_overpower` swaps in a regulator whose power set point is off by a factor (the firmware
still measures and reports the true power), and `set_clock_stuck` freezes the ``device_ms`` field of samples.
Physical faults (open thermocouple, heater open or short, flat battery) are the rig's (`rig.inject`).
"""

from __future__ import annotations

import contextlib
import logging
import math
import os
import random
import secrets
import sys
from collections.abc import Callable
from pathlib import Path
from types import ModuleType
from typing import Any

from linerig.daemon.rig import its90
from linerig.daemon.sim.frontend_sim import WireFaults
from linerig.daemon.sim.rig_model import FAULT_OPEN, FAULT_RANGE, SimulatedRig
from linerig.daemon.sim.wall_link import MAX_CYCLES_PER_CALL, WallLink, catch_up, heater_reason, missing_link_field

__all__ = [
    "FIRMWARE_DIR",
    "MAX_CYCLES_PER_CALL",
    "FirmwareFrontEnd",
    "FirmwareInterfaceError",
    "FirmwareNotFoundError",
    "RigHal",
    "firmware_modules",
]

FIRMWARE_DIR = Path(os.environ.get("LINERIG_FIRMWARE_DIR") or Path(__file__).resolve().parents[2] / "hardware"
                    / "firmware")
"""Where ``probefw`` lives: the source tree's hardware/firmware, or $LINERIG_FIRMWARE_DIR."""

MONITOR_GAIN_SD = 5e-4  # power monitor gain noise, 0.05 % (a 16-bit shunt monitor; common practice, no source)
BUS_LSB_V = 1.25e-3  # INA226-class bus and shunt resolution, as probefw/powermon.py reads them
CURRENT_LSB_A = 2.5e-6 / 0.01  # 2.5 µV shunt LSB over the board's 10 mΩ shunt
SHORT_OHM = 0.2  # the rig's cable short (rig_model FAULT_NAMES: "about 0.2 ohm")

_LogHeater = Callable[[dict[str, Any]], None]
log = logging.getLogger(__name__)


class FirmwareNotFoundError(ImportError):
    """The firmware sources are not where the simulator looks for them."""


class FirmwareInterfaceError(RuntimeError):
    """The firmware no longer has a field this host re-bases onto wall time: update `_LINK_FIELDS` and `_call`."""


_modules: tuple[ModuleType, ModuleType] | None = None


def firmware_modules() -> tuple[ModuleType, ModuleType]:
    """(probefw.device, probefw.regulator), importing them from `FIRMWARE_DIR` on first use."""
    global _modules
    if _modules is None:
        if not (FIRMWARE_DIR / "probefw" / "device.py").is_file():
            raise FirmwareNotFoundError(
                f"the simulator runs the front-end firmware from {FIRMWARE_DIR / 'probefw'}, which is missing; "
                "run it from a linerig source checkout (pip install -e .) or set LINERIG_FIRMWARE_DIR to the "
                "folder that holds probefw/"
            )
        if str(FIRMWARE_DIR) not in sys.path:
            sys.path.insert(0, str(FIRMWARE_DIR))
        import probefw.device as device  # the path exists only now
        import probefw.regulator as regulator

        _modules = (device, regulator)
    return _modules


_regulator_class: type | None = None


def _regulator_with_gain(gain: float) -> Any:
    """A firmware regulator whose set point is ``gain`` times what it was asked (a firmware fault)."""
    global _regulator_class
    if _regulator_class is None:
        base = firmware_modules()[1].PowerRegulator

        class _Regulator(base):  # type: ignore[misc, valid-type]
            gain = 1.0

            def start(self, target_W: float) -> float:
                return super().start(target_W * self.gain)

        _regulator_class = _Regulator
    reg = _regulator_class()
    reg.gain = gain
    return reg


class RigHal:
    """The board ``probefw.device`` drives, made of a `SimulatedRig`.

    The heater switch is PWM from the rig's battery: at duty d the heater draws I_on = V_oc/(R + R_int)
    (capped by the battery's current limit) for a fraction d of the time, so its mean power is d·V_on²/R. The
    monitor averages bus voltage and current over the control period, over on and off phases alike, the way
    the INA-class part in probefw/powermon.py does across many PWM periods. Heater open: no current. Heater
    short (in the cable): 0.2 Ω at the switch, and no heat reaches the ground.

    Thermocouples come from ``rig.sample()``. Mode "T" gives the converter's linearised °C, converted through
    the ITS-90 functions if the configured type differs from the fitted one (as a real converter would get
    it wrong). Mode "E" gives the emf against the cold junction in µV. Readings with a fault bit read 0.0, as
    converters report them.
    """

    def __init__(self, rig: SimulatedRig, seed: int = 0) -> None:
        self.rig = rig
        self.n_channels = len(rig.probe.sensors)
        self.tc_type = ""
        self.mode = ""
        self.duty = 0.0
        self._driving = False  # whether this board last told the rig its heater is on
        self._heater_ohm = rig.probe.heater_resistance_ohm  # at the last set_duty: the period's resistance
        self._rng = random.Random(seed ^ 0x5EED)

    # ---- the electrical side ----
    def electrical(self, duty: float, heater_ohm: float | None = None) -> tuple[float, float, float]:
        """(mean bus V, mean heater A, heat into the ground in W) at this duty, noise-free; the heater's
        resistance is the rig's now unless given."""
        rig = self.rig
        b = rig.battery
        voc = rig.open_circuit_V()
        v_idle = max(voc - b.internal_resistance_ohm * b.quiescent_A, 0.0)
        faults = rig.active_faults if duty > 0.0 else frozenset()
        if duty <= 0.0 or "heater_open" in faults:
            return v_idle, 0.0, 0.0
        shorted = "heater_short" in faults
        r = SHORT_OHM if shorted else heater_ohm or rig.heater_resistance_ohm()
        i_on = min(voc / (r + b.internal_resistance_ohm), b.current_limit_A)
        v_on = i_on * r  # at the heater; equals V_oc - I·R_int unless the current limit holds it down
        heat = 0.0 if shorted else duty * i_on * v_on  # a short in the cable heats the cable, not the ground
        return duty * v_on + (1.0 - duty) * v_idle, duty * i_on, heat

    def apply(self) -> None:
        """Tell the rig the heat the switch delivers now (skipped while it stays off, so another source such as
        a bench supply may drive the heater)."""
        on = self.duty > 0.0
        if not on and not self._driving:
            return
        if on:
            self._heater_ohm = self.rig.heater_resistance_ohm()
        heat = self.electrical(self.duty, self._heater_ohm)[2] if on else 0.0
        self.rig.set_heater(on, heat / self.rig.probe.heater_length_m)
        self._driving = on

    # ---- the hal API probefw.device uses ----
    def configure(self, tc_type: str, mode: str) -> None:
        self.tc_type, self.mode = tc_type, mode

    def set_duty(self, duty: float) -> None:
        self.duty = max(0.0, min(1.0, float(duty)))
        self.apply()

    def read_power(self) -> tuple[float, float]:
        # the period just ended ran at the resistance of its start (the firmware sets the duty every cycle)
        bus, amps, _ = self.electrical(self.duty, self._heater_ohm)
        g = self._rng.gauss
        bus = round(bus * (1.0 + MONITOR_GAIN_SD * g(0.0, 1.0)) / BUS_LSB_V) * BUS_LSB_V
        amps = round(amps * (1.0 + MONITOR_GAIN_SD * g(0.0, 1.0)) / CURRENT_LSB_A) * CURRENT_LSB_A
        return bus, max(amps, 0.0)

    def read(self) -> tuple[float, list[tuple[float, int]]]:
        s = self.rig.sample()
        cj = s.cj_C if math.isfinite(s.cj_C) else 0.0
        fitted = self.rig.probe.thermocouple
        out: list[tuple[float, int]] = []
        for c in s.channels:
            value, bits = c.temp_C, c.fault_bits
            if bits or not math.isfinite(value):
                out.append((0.0, bits or FAULT_OPEN))
                continue
            try:
                if self.mode == "E":
                    emf = c.emf_uV if c.emf_uV is not None else its90.emf_for_temperature(value, cj, fitted)
                    value = float(emf)
                elif self.tc_type and self.tc_type != fitted and fitted in its90.TYPES:
                    emf = its90.emf_for_temperature(value, cj, fitted)
                    value = float(its90.temperature_from_emf(emf, cj, self.tc_type))
            except (its90.Its90RangeError, its90.Its90TypeError):
                out.append((0.0, FAULT_RANGE))
                continue
            out.append((value, 0))
        return cj, out


def _check_link_fields(fw: Any) -> None:
    missing = missing_link_field(fw)
    if missing:
        raise FirmwareInterfaceError(
            f"probefw.device.FrontEnd has no {missing!r}; the simulator keeps it in wall time (see "
            "daemon/sim/wall_link.py) and must be updated with the firmware"
        )


class FirmwareFrontEnd:
    """The firmware on a simulated board, behind the `FrontEndEmulator` interface.

    ``wall`` arguments are seconds of a monotonic clock (the server passes ``time.monotonic()``); device time
    is ``(wall − wall at first use) · speed`` from the rig's time at construction. Heater changes are logged
    through ``log_heater({"heater_on", "power_W_per_m", "reason", "device_t_s"})``.
    """

    def __init__(
        self,
        rig: SimulatedRig,
        speed: float = 1.0,
        log_heater: _LogHeater = lambda event: None,
        serial: str = "SIM-0001",
        seed: int = 0,
        faults: WireFaults | None = None,
    ) -> None:
        if not (speed > 0 and math.isfinite(speed)):
            raise ValueError(f"speed must be > 0, got {speed!r}")
        self.rig = rig
        self.log_heater = log_heater
        self.serial = serial
        self.seed = seed
        self.faults = faults if faults is not None else WireFaults()
        self.hal = RigHal(rig, seed)
        self.samples_sent = 0
        self.overpower = 1.0
        self.clock_stuck_ms: int | None = None
        self._speed = float(speed)
        self._rng = random.Random(seed)
        self._wall0: float | None = None
        self._device0 = rig.t_s
        self._last_wall: float | None = None
        self._out: list[bytes] = []
        self._faults_seen: list[tuple[str, str]] = []
        self._boot("POWERON", rig.t_s)

    # ---- the emulator interface ----
    @property
    def speed(self) -> float:
        return self._speed

    @speed.setter
    def speed(self, value: float) -> None:
        """Change the time scale from now on (device time stays continuous)."""
        if not (value > 0 and math.isfinite(value)):
            raise ValueError(f"speed must be > 0, got {value!r}")
        if self._wall0 is not None and self._last_wall is not None:
            self._device0 = self.device_time(self._last_wall)
            self._wall0 = self._last_wall
        self._speed = float(value)

    @property
    def heater_on(self) -> bool:
        return bool(self.fw.heater_on)

    @property
    def power_set(self) -> float:
        return float(self.fw.power_set_W_per_m)

    @property
    def configured(self) -> bool:
        return bool(self.fw.configured)

    @property
    def lease_deadline(self) -> float:
        """Wall time (the callers' clock) at which the heater lease runs out; 0.0 when there is none."""
        return self._link.lease_end or 0.0

    def device_time(self, wall: float) -> float:
        """Device seconds (the rig's time axis) at ``wall``; the first call fixes the origin."""
        if self._wall0 is None:
            self._wall0 = wall
        return self._device0 + (wall - self._wall0) * self._speed

    def receive(self, data: bytes, wall: float) -> None:
        """Bytes from the host, arriving at ``wall``: the firmware first catches up to that moment."""
        self._run_until(wall)
        now = self._fw_ms(wall)
        self._call(lambda: self.fw.receive(data, now), now, wall, "host command")

    def tick(self, wall: float) -> list[bytes]:
        """Run the firmware up to ``wall``; the bytes it sent meanwhile, after wire faults."""
        self._run_until(wall)
        out, self._out = self._out, []
        return self._apply_wire_faults(out)

    def reset(self, wall: float | None = None, cause: str = "WATCHDOG") -> None:
        """A front-end reset at ``wall`` (default: the last time seen): heater off, unsent bytes lost, a new
        boot id and configuration forgotten. The firmware's clock restarts at 0; the physics carries on."""
        if wall is not None:
            self._run_until(wall)
        wall = self._last_wall
        now_dev = self.rig.t_s if wall is None else self.device_time(wall)
        before = (self.heater_on, self.power_set)
        self.fw.heater_off()
        self._log_change(before, "reset", now_dev)
        self._out = []
        self._boot(cause, now_dev)

    def switch_off(self, reason: str) -> None:
        """Heater off from the simulator's side (it is stopping); nothing is sent."""
        before = (self.heater_on, self.power_set)
        self.fw.heater_off()
        self._link.lease_end = None
        self._log_change(before, reason, self._now_device_s())

    def set_overpower(self, factor: float) -> None:
        """Firmware fault: the regulator aims at ``factor`` times the requested power (1.0 repairs it)."""
        self.overpower = float(factor)
        self.fw.reg.gain = self.overpower
        if self.fw.heater_on:
            self.fw.reg.target_W = min(self.power_set * self.fw.length_m * self.overpower,
                                       firmware_modules()[0].lim.POWER_MAX_W)

    def set_clock_stuck(self, on: bool) -> None:
        """Firmware fault: samples keep the ``device_ms`` they had when this was switched on."""
        self.clock_stuck_ms = self._last_sample_ms if on else None

    # ---- boot and clocks ----
    def _boot(self, cause: str, device_t: float) -> None:
        device = firmware_modules()[0]
        self.boot_id = secrets.token_hex(4).upper()
        self._boot_device_t = device_t
        self._last_fw_ms = 0
        self._last_sample_ms = 0
        self._link = WallLink()
        self.fw = device.FrontEnd(self.hal, self._write, self.boot_id, serial=self.serial)
        _check_link_fields(self.fw)
        self.fw.reg = _regulator_with_gain(self.overpower)
        self.fw.start(0, cause)

    def _fw_ms(self, wall: float) -> int:
        ms = round((self.device_time(wall) - self._boot_device_t) * 1000.0)
        self._last_fw_ms = max(self._last_fw_ms, ms)
        return self._last_fw_ms

    def _now_device_s(self) -> float:
        return self._boot_device_t + self._last_fw_ms / 1000.0

    def _run_until(self, wall: float) -> None:
        if self._last_wall is not None and wall < self._last_wall:
            wall = self._last_wall
        self._last_wall = wall
        fw = self.fw
        catch_up(fw, self._fw_ms(wall), lambda t: self._call(lambda: fw.tick(t), t, wall, "firmware"),
                 self._advance_rig)

    def _advance_rig(self, fw_ms: int) -> None:
        dt = self._boot_device_t + fw_ms / 1000.0 - self.rig.t_s
        if dt > 1e-9:
            self.rig.advance(dt)  # the heat was set by the last set_duty, which the firmware calls every cycle

    # ---- one call into the firmware, with its link timings in wall time ----
    def _call(self, fn: Callable[[], Any], now: int, wall: float, reason: str) -> None:
        fw = self.fw
        self._link.enter(fw, now, wall)
        before = (fw.heater_on, fw.power_set_W_per_m)
        self._faults_seen = []
        try:
            fn()
        except Exception as exc:  # as hardware/firmware/main.py does: heater off, report, carry on
            log.exception("firmware raised; reporting F,CRASH as the board's main loop would")
            self.hal.set_duty(0.0)
            with contextlib.suppress(Exception):
                fw.heater_off()
                fw.send("F", ["CRASH", type(exc).__name__])
        finally:
            self._link.leave(fw, now, wall)
        self._log_change(before, heater_reason(self._faults_seen, reason), self._boot_device_t + now / 1000.0)

    def _log_change(self, before: tuple[bool, float], reason: str, device_t_s: float) -> None:
        after = (self.heater_on, self.power_set)
        if after != before:
            self.log_heater({"heater_on": after[0], "power_W_per_m": after[1], "reason": reason,
                             "device_t_s": round(device_t_s, 3)})

    # ---- output ----
    def _write(self, frame: bytes) -> None:
        kind = frame[1:2]
        if kind == b"S":
            self.samples_sent += 1
            frame = self._stamp_sample(frame)
        elif kind == b"F":
            fields = frame[1 : frame.rfind(b"*")].decode("ascii").split(",")
            if len(fields) >= 4:
                self._faults_seen.append((fields[2], fields[3]))
        self._out.append(frame)

    def _stamp_sample(self, frame: bytes) -> bytes:
        if self.clock_stuck_ms is None:
            self._last_sample_ms = int(frame.split(b",", 3)[2])
            return frame
        device, _ = firmware_modules()
        kind, seq, fields = device.decode(frame.rstrip(b"\n"))
        fields[0] = str(self.clock_stuck_ms)
        return device.encode(kind, seq, fields)

    def _apply_wire_faults(self, frames: list[bytes]) -> list[bytes]:
        """The same faults, with the same meaning, as FrontEndEmulator applies."""
        return self.faults.apply(frames, self._rng)
