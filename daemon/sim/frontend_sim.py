"""The front end's side of the wire protocol, played by the simulator.

It answers exactly as the firmware does (hardware/PROTOCOL.md) and keeps the same
hard limits, so the daemon cannot tell it from hardware. Wire faults (garbage,
dropped or corrupted frames, silence, reset) and two firmware faults (a regulator
that delivers more power than asked, a millisecond clock that stops) are injected
here; physical faults (open thermocouple, heater open or short) belong to the rig model.
"""

from __future__ import annotations

import random
import secrets
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from linerig.daemon.rig import messages as m
from linerig.daemon.rig.framing import FrameDecoder, encode_frame

FIRMWARE = "sim-1.0"
MAX_LEASE_MS = 1000
# Hard limits the host cannot override (the firmware has its own copy of these values).
HARD_MAX_POWER_W_PER_M = 80.0
HARD_MAX_PROBE_C = 95.0
HARD_MAX_ON_S = 4 * 3600.0


@dataclass
class WireFaults:
    silent: bool = False
    drop_fraction: float = 0.0
    corrupt_fraction: float = 0.0
    duplicate_fraction: float = 0.0
    garbage_bytes: int = 0  # bytes of noise to send once, before the next frame
    drop_acks: int = 0  # the next this many acknowledgements are lost (their commands were carried out)
    drop_every: int = 0  # every n-th frame is lost: a loss rate without chance in it (0: off)
    _count: int = 0

    def apply(self, frames: list[bytes], rng: random.Random) -> list[bytes]:
        """What reaches the wire of the frames a device meant to send."""
        if self.silent:
            return []
        out: list[bytes] = []
        if self.garbage_bytes:
            out.append(bytes(rng.randrange(256) for _ in range(self.garbage_bytes)))
            self.garbage_bytes = 0
        for fr in frames:
            if self.drop_acks and fr.startswith(b"$A,"):
                self.drop_acks -= 1
                continue
            self._count += 1
            if self.drop_every and self._count % self.drop_every == 0:
                continue
            r = rng.random()
            if r < self.drop_fraction:
                continue
            if r < self.drop_fraction + self.corrupt_fraction:
                b = bytearray(fr)
                i = rng.randrange(1, len(b) - 1)
                b[i] = ord("#") if b[i] != ord("#") else ord("%")
                fr = bytes(b)
            out.append(fr)
            if rng.random() < self.duplicate_fraction:
                out.append(fr)
        return out


@dataclass
class FrontEndEmulator:
    rig: Any  # daemon.sim.rig_model.SimulatedRig
    speed: float = 1.0
    log_heater: Callable[[dict[str, Any]], None] = lambda event: None
    serial: str = "SIM-0001"
    seed: int = 0
    faults: WireFaults = field(default_factory=WireFaults)
    overpower: float = 1.0  # regulator fault: delivers this many times the power asked for
    clock_stuck_ms: int | None = None  # firmware fault: the sample clock no longer advances
    samples_sent: int = 0

    def __post_init__(self) -> None:
        self._rng = random.Random(self.seed)
        self._decoder = FrameDecoder(track_sequence=False)  # a retried command must reach _command to be re-acked
        self._boot()

    def set_overpower(self, factor: float) -> None:
        self.overpower = factor
        if self.heater_on:
            self.rig.set_heater(True, self.power_set * factor)

    def set_clock_stuck(self, on: bool) -> None:
        last = getattr(self, "_last_ms", 0)
        self.clock_stuck_ms = last if on else None

    def switch_off(self, reason: str) -> None:
        self._heater(False, reason)

    # -- state -------------------------------------------------------------
    def _boot(self, cause: str = "power-on") -> None:
        self.boot_id = secrets.token_hex(4).upper()
        self._seq = 0
        self._last_cmd: tuple[int, bytes] | None = None
        self.configured = False
        self.rate_hz = 1.0
        self.mode = "T"
        self.power_set = 0.0
        self.heater_on = False
        self.lease_deadline = 0.0
        self.on_since_t: float | None = None
        self._next_sample_t: float | None = None
        self._wall0: float | None = None
        self._device_t0 = self.rig.t_s if hasattr(self.rig, "t_s") else 0.0
        self._out: list[bytes] = [self._frame(m.MSG_BOOT, [self.boot_id, FIRMWARE, str(m.PROTOCOL_VERSION), cause])]

    def reset(self) -> None:
        """A front-end reset: heater off, configuration forgotten, a new boot id."""
        self._heater(False, "reset")
        self._boot("reset")

    def device_time(self, wall: float) -> float:
        if self._wall0 is None:
            self._wall0 = wall
        return self._device_t0 + (wall - self._wall0) * self.speed

    def _frame(self, kind: str, fields: list[str]) -> bytes:
        self._seq = (self._seq + 1) % 65536
        return encode_frame(kind, self._seq, fields)

    def _heater(self, on: bool, reason: str, power: float = 0.0) -> None:
        changed = on != self.heater_on or (on and power != self.power_set)
        self.heater_on = on
        self.power_set = power if on else 0.0
        self.rig.set_heater(on, self.power_set * self.overpower)
        if on and self.on_since_t is None:
            self.on_since_t = self.rig.t_s
        if not on:
            self.on_since_t = None
        if changed:
            self.log_heater({"heater_on": on, "power_W_per_m": self.power_set, "reason": reason,
                             "device_t_s": round(self.rig.t_s, 3)})

    # -- input -------------------------------------------------------------
    def receive(self, data: bytes, wall: float) -> None:
        for frame in self._decoder.feed(data):
            self._command(frame.kind, frame.seq, frame.fields, wall)

    def _ack(self, seq: int, ok: bool, detail: str = "") -> bytes:
        return self._frame(m.MSG_ACK, [str(seq), "OK" if ok else "ERR", detail])

    def _command(self, kind: str, seq: int, f: tuple[str, ...], wall: float) -> None:
        key = encode_frame(kind, seq, list(f))
        if self._last_cmd is not None and self._last_cmd[0] == seq and self._last_cmd[1] == key:
            self._out.append(self._ack(seq, True, "dup"))  # idempotent: re-ack, do not re-apply
            return
        self._last_cmd = (seq, key)
        try:
            ok, detail, extra = self._apply(kind, f, wall)
        except (ValueError, IndexError):
            ok, detail, extra = False, "BADARGS", []
        self._out.extend(extra)
        self._out.append(self._ack(seq, ok, detail))

    def _apply(self, kind: str, f: tuple[str, ...], wall: float) -> tuple[bool, str, list[bytes]]:
        if kind == m.CMD_IDENTIFY:
            n = str(len(self.rig.probe.sensors))
            return True, "", [self._frame(m.MSG_IDENTITY, ["linerig-sim", self.serial, FIRMWARE,
                                                             str(m.PROTOCOL_VERSION), n, self.boot_id])]
        if kind == m.CMD_CONFIGURE:
            rate, _tc, mode, _length = float(f[0]), f[1], f[2], float(f[3])
            if not 0.1 <= rate <= 20 or mode not in ("T", "E"):
                return False, "BADARGS", []
            self.rate_hz, self.mode, self.configured = rate, mode, True
            self._next_sample_t = None
            return True, "", []
        if kind == m.CMD_POWER:
            power, lease_ms = float(f[0]), int(f[1])
            if not self.configured:
                return False, "NOTCONFIGURED", []
            if not 0 < power <= HARD_MAX_POWER_W_PER_M:
                return False, "LIMIT", []
            self.lease_deadline = wall + min(lease_ms, MAX_LEASE_MS) / 1000 / 1.0
            self._heater(True, "host command", power)
            return True, "", []
        if kind == m.CMD_OFF:
            self._heater(False, "host command")
            return True, "", []
        if kind == m.CMD_LEASE:
            if self.heater_on:
                self.lease_deadline = wall + min(int(f[0]), MAX_LEASE_MS) / 1000
            return True, "", []
        if kind == m.CMD_STATUS:
            left = max(0, int((self.lease_deadline - wall) * 1000)) if self.heater_on else 0
            st = [("1" if self.heater_on else "0"), f"{self.power_set:.4f}", str(left), f"{self.rate_hz:g}", self.mode]
            return True, "", [self._frame(m.MSG_STATUS, st)]
        return False, "UNKNOWN", []

    # -- time --------------------------------------------------------------
    def tick(self, wall: float) -> list[bytes]:
        """Advance to ``wall`` and return the bytes the device sends meanwhile."""
        now = self.device_time(wall)
        if self.heater_on and wall > self.lease_deadline:
            self._heater(False, "lease expired")
            self._out.append(self._frame(m.MSG_FAULT, ["LEASE", "expired"]))
        if self.configured:
            period = 1.0 / self.rate_hz
            if self._next_sample_t is None:
                self._next_sample_t = self.rig.t_s + period
            while self._next_sample_t <= now:
                self.rig.advance(self._next_sample_t - self.rig.t_s)
                self._next_sample_t += period
                self._out.append(self._sample_frame())
                self._check_hard_limits()
        else:
            self.rig.advance(max(0.0, now - self.rig.t_s))
        out, self._out = self._out, []
        return self._apply_wire_faults(out)

    def _sample_frame(self) -> bytes:
        s = self.rig.sample()
        self._last = s
        chans = []
        for c in s.channels:
            value = c.emf_uV if (self.mode == "E" and c.emf_uV is not None) else c.temp_C
            chans.append(m.ChannelValue(value, c.fault_bits))
        ms = round(s.t_s * 1000) % (1 << 32) if self.clock_stuck_ms is None else self.clock_stuck_ms
        self._last_ms = ms
        self.samples_sent += 1
        sample = m.Sample(0, ms, s.cj_C, s.heater_V, s.heater_A, s.supply_V, s.heater_on, tuple(chans))
        return self._frame(m.MSG_SAMPLE, m.sample_fields(sample))

    def _check_hard_limits(self) -> None:
        if not self.heater_on:
            return
        s = getattr(self, "_last", None)
        hottest = max((c.temp_C for c in s.channels if not c.fault_bits), default=0.0) if s else 0.0
        if hottest > HARD_MAX_PROBE_C:
            self._heater(False, "hard limit: probe temperature")
            self._out.append(self._frame(m.MSG_FAULT, ["OVERTEMP", f"{hottest:.1f}"]))
        elif self.on_since_t is not None and self.rig.t_s - self.on_since_t > HARD_MAX_ON_S:
            self._heater(False, "hard limit: on-time")
            self._out.append(self._frame(m.MSG_FAULT, ["ONTIME", f"{HARD_MAX_ON_S:.0f}"]))

    def _apply_wire_faults(self, frames: list[bytes]) -> list[bytes]:
        return self.faults.apply(frames, self._rng)
