"""A physical stand-in for the front-end board, and a harness that runs the firmware loop on it in simulated
time. Runs under CPython and MicroPython alike, so the shared cases (cases_*.py) test both interpreters.

The stand-in is a small model, not a mock: a battery whose open-circuit voltage sags with time behind an
internal resistance, a heater whose resistance may follow a temperature coefficient, a first-order probe
temperature, and type K thermocouples read through the ITS-90 reference function when the front end asks for
raw emf. Faults are switches on it. Time advances only when the test says so.

The harness decodes what the firmware sends with the firmware's own codec and reads each frame into a small
message object by PROTOCOL.md §4.2. Under CPython, ``tests/firmware_path.py`` also hands every byte to the
daemon's decoder (``host_checks``), so the two sides of the wire are proven to agree on every frame.
"""

import math

from probefw.codec import LineBuffer, decode, encode
from probefw.device import FrontEnd

INF = float("inf")

# ITS-90 type K reference emf E(t) in µV at every 10 °C from −50 °C to 150 °C (NIST Monograph 175; checked
# against daemon/rig/its90.py by tests/test_firmware_device.py). Linear interpolation between them is within
# 1.2 µV (0.03 K) of the reference function over this range, ample for a board model.
K_TABLE_T0 = -50.0
K_TABLE_UV = (-1889.38, -1526.95, -1156.13, -777.54, -391.85, 0.0, 396.86, 798.12, 1203.27, 1611.79, 2023.08,
              2436.47, 2851.25, 3266.64, 3681.88, 4096.23, 4509.06, 4919.88, 5328.39, 5734.51, 6138.34)


def emf_k_uV(t_C: float) -> float:
    x = (t_C - K_TABLE_T0) / 10.0
    i = max(0, min(len(K_TABLE_UV) - 2, math.floor(x)))
    return K_TABLE_UV[i] + (K_TABLE_UV[i + 1] - K_TABLE_UV[i]) * (x - i)


class FakeRig:
    """The hal probefw.device drives, as physics."""

    def __init__(self, n_channels: int = 3, r0_ohm: float = 20.0, tcr_per_K: float = 0.0, v_start: float = 12.6,
                 v_end: float = 12.6, sag_ms: int = 600_000, r_int_ohm: float = 0.05, ambient_C: float = 20.0,
                 cj_C: float = 22.0, r_th_K_per_W: float = 3.0, tau_ms: float = 20_000.0,
                 heater_short_ohm: float | None = None, pwm_stuck_on: bool = False) -> None:
        self.n_channels = n_channels
        self.r0_ohm, self.tcr_per_K = r0_ohm, tcr_per_K
        self.v_start, self.v_end, self.sag_ms, self.r_int_ohm = v_start, v_end, sag_ms, r_int_ohm
        self.ambient_C, self.cj_C = ambient_C, cj_C
        self.r_th_K_per_W, self.tau_ms = r_th_K_per_W, tau_ms
        self.heater_short_ohm, self.pwm_stuck_on = heater_short_ohm, pwm_stuck_on
        self.now_ms = 0
        self.duty = 0.0
        self.tc_type = ""
        self.mode = ""
        self.open_tc: set = set()
        self.heater_open = False
        self.bus_dead = False
        self.rise_K = 0.0
        self.energy_J = 0.0
        self.duty_log: list = []  # (ms, duty) for every set_duty call

    # --- physics -------------------------------------------------------------------------------
    def v_oc(self) -> float:
        frac = min(1.0, self.now_ms / self.sag_ms)
        return self.v_start + (self.v_end - self.v_start) * frac

    def probe_C(self) -> float:
        return self.ambient_C + self.rise_K

    def r_heater(self) -> float:
        if self.heater_open:
            return INF
        if self.heater_short_ohm is not None:
            return self.heater_short_ohm
        return self.r0_ohm * (1.0 + self.tcr_per_K * (self.probe_C() - 20.0))

    def effective_duty(self) -> float:
        return 1.0 if (self.pwm_stuck_on and self.duty > 0) else self.duty

    def v_on(self) -> float:
        r = self.r_heater()
        return self.v_oc() if r == INF else self.v_oc() * r / (r + self.r_int_ohm)

    def true_power_W(self) -> float:
        r = self.r_heater()
        return 0.0 if r == INF else self.effective_duty() * self.v_on() ** 2 / r

    def advance(self, dt_ms: int) -> None:
        p = self.true_power_W()
        self.energy_J += p * dt_ms / 1000.0
        target = p * self.r_th_K_per_W
        self.rise_K += (target - self.rise_K) * (1.0 - math.exp(-dt_ms / self.tau_ms))
        self.now_ms += dt_ms

    # --- hal -----------------------------------------------------------------------------------
    def configure(self, tc_type: str, mode: str) -> None:
        self.tc_type, self.mode = tc_type, mode

    def read(self) -> tuple:
        if self.bus_dead:
            raise OSError("bus reads all ones")
        out = []
        for i in range(self.n_channels):
            # channel 0 sits on the heater; the others see a fraction of its rise
            t = self.ambient_C + self.rise_K * (1.0 if i == 0 else 0.3 / i)
            if i in self.open_tc:
                out.append((0.0, 0x01))
            elif self.mode == "E":
                if self.tc_type != "K":
                    raise ValueError("the board model carries the type K reference function only")
                out.append((emf_k_uV(t) - emf_k_uV(self.cj_C), 0))
            else:
                out.append((t, 0))
        return self.cj_C, out

    def read_power(self) -> tuple:
        d, r = self.effective_duty(), self.r_heater()
        mean_a = 0.0 if r == INF or d <= 0 else d * self.v_on() / r
        # the monitor averages the bus over on and off phases, as a real one does across PWM periods
        return d * self.v_on() + (1.0 - d) * self.v_oc(), mean_a

    def set_duty(self, duty: float) -> None:
        self.duty = duty
        self.duty_log.append((self.now_ms, duty))


class Chan:
    def __init__(self, value: float, fault: int) -> None:
        self.value, self.fault = value, fault


# field names of each kind a device sends (PROTOCOL.md §4.2), and which are numbers
FIELD_NAMES = {
    "B": ("boot_id", "firmware", "protocol", "reset_cause"),
    "D": ("model", "serial", "firmware", "protocol", "n_channels", "boot_id"),
    "A": ("cmd_seq", "result", "detail"),
    "T": ("heater_on", "power_set_W_per_m", "lease_left_ms", "rate_hz", "mode"),
    "S": ("device_ms", "cj_C", "heater_V", "heater_A", "supply_V", "heater_on"),
    "F": ("code", "detail"),
}
INT_FIELDS = ("protocol", "n_channels", "cmd_seq", "lease_left_ms", "device_ms")
FLOAT_FIELDS = ("power_set_W_per_m", "rate_hz", "cj_C", "heater_V", "heater_A", "supply_V")


class Msg:
    """One frame from the device, its fields named as PROTOCOL.md §4.2 names them."""

    def __init__(self, kind: str, seq: int, fields: list) -> None:
        self.kind, self.seq, self.fields = kind, seq, fields
        names = FIELD_NAMES.get(kind, ())
        for name, text in [(names[i], fields[i]) for i in range(min(len(names), len(fields)))]:
            if name in INT_FIELDS:
                value: object = int(text)
            elif name in FLOAT_FIELDS:
                value = float(text)
            elif name == "heater_on":
                value = text == "1"
            else:
                value = text
            setattr(self, name, value)
        if kind == "A":
            self.ok = self.result == "OK"
        if kind == "S":
            rest = fields[len(names):]
            self.channels = [Chan(float(rest[i]), int(rest[i + 1], 16)) for i in range(0, len(rest), 2)]


# Factories of checks, each a callable(raw bytes) run on everything one Harness's firmware sends (under CPython,
# tests/firmware_path.py adds the daemon's decoder).
host_checks: list = []


class Harness:
    """Runs the firmware loop in simulated time; ``messages`` holds (device ms, kind, Msg) in order."""

    def __init__(self, rig: FakeRig | None = None, step_ms: int = 5, boot_id: str = "1A2B3C4D",
                 reset_cause: str = "POWERON") -> None:
        self.rig = rig if rig is not None else FakeRig()
        self.step_ms = step_ms
        self.raw = bytearray()
        self.checks = [make() for make in host_checks]
        self.fe = FrontEnd(self.rig, self.raw.extend, boot_id, serial="TEST0001")
        self.lines = LineBuffer()
        self.host_seq = 0
        self.messages: list = []
        self.frames = 0
        self.bad_frames = 0
        self.seq_gaps = 0
        self._last_seq = -1
        self.fe.start(self.rig.now_ms, reset_cause)
        self._collect()

    def _collect(self) -> list:
        data = bytes(self.raw)
        self.raw[:] = b""
        for check in self.checks:
            check(data)
        new = []
        for line in self.lines.feed(data):
            try:
                kind, seq, fields = decode(line)
            except ValueError:
                self.bad_frames += 1
                continue
            self.frames += 1
            if self._last_seq >= 0 and seq != (self._last_seq + 1) % 65536:
                self.seq_gaps += 1
            self._last_seq = seq
            new.append((self.rig.now_ms, kind, Msg(kind, seq, fields)))
        self.messages += new
        return new

    def send(self, kind: str, *fields: object, seq: int | None = None) -> list:
        if seq is None:
            seq = self.host_seq
            self.host_seq += 1
        self.fe.receive(encode(kind, seq, [str(f) for f in fields]), self.rig.now_ms)
        return self._collect()

    def send_raw(self, data: bytes) -> list:
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

    def of(self, kind: str) -> list:
        return [m for m in self.messages if m[1] == kind]

    def samples(self) -> list:
        return [m for _, _, m in self.of("S")]

    def faults(self) -> list:
        return [m.code for _, _, m in self.of("F")]

    def configure(self, rate_hz: float = 10, tc_type: str = "T", mode: str = "T", length_mm: float = 1000.0) -> None:
        got = self.send("C", f"{rate_hz:g}", tc_type, mode, f"{length_mm:g}")
        assert got[-1][1] == "A" and got[-1][2].ok, got

    def ack(self, got: list) -> Msg:
        """The acknowledgement that ends a command's replies."""
        m = got[-1][2]
        assert m.kind == "A", m.kind
        return m
