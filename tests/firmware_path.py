"""Makes hardware/firmware importable and gives the firmware tests a physical stand-in for the board.

The stand-in is a small model, not a mock: a battery whose open-circuit voltage sags with time
behind an internal resistance, a heater whose resistance may follow a temperature coefficient, a
first-order probe temperature, and thermocouples read through the ITS-90 reference functions when the
front end asks for raw emf. Faults are switches on it. Time advances only when the test says so.
"""

from __future__ import annotations

import math
import sys
from dataclasses import dataclass, field
from pathlib import Path

FW_DIR = Path(__file__).resolve().parents[1] / "hardware" / "firmware"
if str(FW_DIR) not in sys.path:
    sys.path.insert(0, str(FW_DIR))

from probefw.device import FrontEnd  # noqa: E402

from linerig.daemon.rig import its90  # noqa: E402
from linerig.daemon.rig.framing import FrameDecoder, encode_frame  # noqa: E402
from linerig.daemon.rig.messages import Message, parse_message  # noqa: E402


@dataclass
class FakeRig:
    """The hal probefw.device drives, as physics."""

    n_channels: int = 3
    r0_ohm: float = 20.0
    tcr_per_K: float = 0.0
    v_start: float = 12.6
    v_end: float = 12.6
    sag_ms: int = 600_000
    r_int_ohm: float = 0.05
    ambient_C: float = 20.0
    cj_C: float = 22.0
    r_th_K_per_W: float = 3.0  # probe rise per watt at steady state
    tau_ms: float = 20_000.0
    now_ms: int = 0
    duty: float = 0.0
    tc_type: str = ""
    mode: str = ""
    open_tc: set[int] = field(default_factory=set)
    heater_open: bool = False
    heater_short_ohm: float | None = None
    pwm_stuck_on: bool = False
    bus_dead: bool = False
    rise_K: float = 0.0
    energy_J: float = 0.0
    duty_log: list[tuple[int, float]] = field(default_factory=list)

    # --- physics -------------------------------------------------------------------------------
    def v_oc(self) -> float:
        frac = min(1.0, self.now_ms / self.sag_ms)
        return self.v_start + (self.v_end - self.v_start) * frac

    def probe_C(self) -> float:
        return self.ambient_C + self.rise_K

    def r_heater(self) -> float:
        if self.heater_open:
            return math.inf
        if self.heater_short_ohm is not None:
            return self.heater_short_ohm
        return self.r0_ohm * (1.0 + self.tcr_per_K * (self.probe_C() - 20.0))

    def effective_duty(self) -> float:
        return 1.0 if (self.pwm_stuck_on and self.duty > 0) else self.duty

    def v_on(self) -> float:
        r = self.r_heater()
        return self.v_oc() if math.isinf(r) else self.v_oc() * r / (r + self.r_int_ohm)

    def true_power_W(self) -> float:
        r = self.r_heater()
        return 0.0 if math.isinf(r) else self.effective_duty() * self.v_on() ** 2 / r

    def advance(self, dt_ms: int) -> None:
        p = self.true_power_W()
        self.energy_J += p * dt_ms / 1000.0
        target = p * self.r_th_K_per_W
        self.rise_K += (target - self.rise_K) * (1.0 - math.exp(-dt_ms / self.tau_ms))
        self.now_ms += dt_ms

    # --- hal -----------------------------------------------------------------------------------
    def configure(self, tc_type: str, mode: str) -> None:
        self.tc_type, self.mode = tc_type, mode

    def read(self) -> tuple[float, list[tuple[float, int]]]:
        if self.bus_dead:
            raise OSError("bus reads all ones")
        out = []
        for i in range(self.n_channels):
            # channel 0 sits on the heater; the others see a fraction of its rise
            t = self.ambient_C + self.rise_K * (1.0 if i == 0 else 0.3 / i)
            if i in self.open_tc:
                out.append((0.0, 0x01))
            elif self.mode == "E":
                out.append((its90.emf_for_temperature(t, self.cj_C, self.tc_type), 0))
            else:
                out.append((t, 0))
        return self.cj_C, out

    def read_power(self) -> tuple[float, float]:
        d, r = self.effective_duty(), self.r_heater()
        mean_a = 0.0 if math.isinf(r) or d <= 0 else d * self.v_on() / r
        # the monitor averages the bus over on and off phases, as a real one does across PWM periods
        return d * self.v_on() + (1.0 - d) * self.v_oc(), mean_a

    def set_duty(self, duty: float) -> None:
        self.duty = duty
        self.duty_log.append((self.now_ms, duty))


@dataclass
class Harness:
    """Runs the firmware loop in simulated time and talks to it with the daemon's own codec."""

    rig: FakeRig = field(default_factory=FakeRig)
    step_ms: int = 5
    boot_id: str = "1A2B3C4D"
    reset_cause: str = "POWERON"

    def __post_init__(self) -> None:
        self.raw = bytearray()
        self.fe = FrontEnd(self.rig, self.raw.extend, self.boot_id, serial="TEST0001")
        self.decoder = FrameDecoder()
        self.host_seq = 0
        self.messages: list[tuple[int, str, Message | None]] = []  # (device time, kind, message)
        self.fe.start(self.rig.now_ms, self.reset_cause)
        self._collect()

    def _collect(self) -> list[tuple[int, str, Message | None]]:
        new = []
        for frame in self.decoder.feed(bytes(self.raw)):
            new.append((self.rig.now_ms, frame.kind, parse_message(frame)))
        self.raw.clear()
        self.messages += new
        return new

    def send(self, kind: str, *fields: object, seq: int | None = None) -> list[tuple[int, str, Message | None]]:
        if seq is None:
            seq = self.host_seq
            self.host_seq += 1
        self.fe.receive(encode_frame(kind, seq, [str(f) for f in fields]), self.rig.now_ms)
        return self._collect()

    def send_raw(self, data: bytes) -> list[tuple[int, str, Message | None]]:
        self.fe.receive(data, self.rig.now_ms)
        return self._collect()

    def run(self, ms: int, renew_every_ms: int | None = None, lease_ms: int = 1000) -> None:
        end = self.rig.now_ms + ms
        next_renew = self.rig.now_ms + (renew_every_ms or 0)
        while self.rig.now_ms < end:
            self.rig.advance(self.step_ms)
            assert self.fe.tick(self.rig.now_ms)
            self._collect()
            if renew_every_ms is not None and self.rig.now_ms >= next_renew:
                self.send("L", lease_ms)
                next_renew += renew_every_ms

    def of(self, kind: str) -> list[tuple[int, str, Message | None]]:
        return [m for m in self.messages if m[1] == kind]

    def configure(self, rate_hz: float = 10, tc_type: str = "T", mode: str = "T", length_mm: float = 1000.0) -> None:
        got = self.send("C", f"{rate_hz:g}", tc_type, mode, f"{length_mm:g}")
        assert got[-1][1] == "A" and got[-1][2].ok, got  # type: ignore[union-attr]
