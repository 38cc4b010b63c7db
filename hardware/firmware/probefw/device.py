"""The front end's behaviour: commands, lease, hard limits, regulation and fixed-rate samples.

Everything here is plain Python that runs unchanged on MicroPython and CPython. The board is
reached only through ``hal``, an object with:

- ``n_channels`` (int)
- ``configure(tc_type, mode)``: set the converters; mode "T" reads °C, "E" reads raw emf in µV
- ``read()`` -> ``(cj_C, [(value, fault_bits), ...])``; raises OSError when a bus is dead
- ``read_power()`` -> ``(supply_V, mean_heater_A)`` averaged over the last control period
- ``set_duty(duty)``: 0 turns the heater switch fully off

Time is an integer millisecond counter that never wraps (main.py builds it from ticks_diff).
The order on any trip is always: switch off, latch, then report.
"""

from . import limits as lim
from .codec import LineBuffer, decode, encode
from .lease import Lease
from .regulator import PowerRegulator
from .schedule import FixedRate

PROTOCOL_VERSION = 1
CONTROL_PERIOD_MS = 100  # limits and regulation run at 10 Hz whatever the sample rate
RATES_HZ = (0.5, 1.0, 2.0, 5.0, 10.0)
TC_TYPES = ("E", "J", "K", "N", "T")
DUP_WINDOW_MS = 2000
FAULT_REPEAT_MS = 5000

# per-channel fault bits (PROTOCOL.md §4.2; the same values as daemon/rig/messages.py)
FAULT_OPEN = 0x01
FAULT_RANGE = 0x02
FAULT_CJ = 0x04
FAULT_STALE = 0x08

_SETTINGS = ("C", "P", "O", "L")  # commands that change state: deduplicated by sequence number


def _num(text: str) -> float:
    x = float(text)
    if x != x or x in (float("inf"), float("-inf")):
        raise ValueError("not finite")
    return x


class FrontEnd:
    def __init__(
        self,
        hal: object,
        write: object,
        boot_id: str,
        model: str = "linerig-fe",
        serial: str = "0",
        firmware: str = "1.0.0",
    ) -> None:
        self.hal = hal
        self.write = write  # callable taking one frame (bytes)
        self.boot_id = boot_id
        self.model = model
        self.serial = serial
        self.firmware = firmware
        self.seq = 0
        self.lines = LineBuffer()
        self.lease = Lease()
        self.reg = PowerRegulator()
        self.control = FixedRate(CONTROL_PERIOD_MS)
        self.cycle_done_ms = 0  # when a control cycle last ran to completion (the watchdog's health)
        # configuration (None until the host sends C after every boot)
        self.rate_hz = 0.0
        self.tc_type = ""
        self.mode = ""
        self.length_m = 0.0
        self.configured = False
        self.sample_every = 1
        self.cycle = 0
        # heater state
        self.power_set_W_per_m = 0.0
        self.armed_at_ms = None
        self.duty = 0.0
        self.latched = None  # (code, detail) of a hard fault awaiting the host's O
        self.latched_sent_ms = 0
        self.underpower_sent = False
        self.over_count = 0
        self.open_count = 0
        # last readings
        self.cj_C = 0.0
        self.channels = []
        self.supply_V = 0.0
        self.mean_A = 0.0
        self.read_ok = False
        # link
        self.last_cmd = None  # (seq, kind, fields, t_ms, ack_fields)
        self.ok_detail = ""  # what an OK acknowledgement carries (switch-on/off time for P and O)
        self.bad_frame_times = []
        self.bad_frames = 0

    # ---- output ------------------------------------------------------------------------------
    def send(self, kind: str, fields: list) -> None:
        self.write(encode(kind, self.seq, fields))
        self.seq = (self.seq + 1) % 65536

    def start(self, now_ms: int, reset_cause: str) -> None:
        """Heater off, then announce the boot so the host re-configures (and never re-arms by itself)."""
        self.hal.set_duty(0.0)
        self.control = FixedRate(CONTROL_PERIOD_MS, now_ms)
        self.cycle_done_ms = now_ms
        self.send("B", [self.boot_id, self.firmware, str(PROTOCOL_VERSION), reset_cause])

    @property
    def heater_on(self) -> bool:
        return self.armed_at_ms is not None

    # ---- heater ------------------------------------------------------------------------------
    def heater_off(self) -> None:
        self.hal.set_duty(0.0)
        self.duty = self.reg.stop()
        self.lease.cancel()
        self.armed_at_ms = None
        self.power_set_W_per_m = 0.0
        self.over_count = 0
        self.open_count = 0
        self.underpower_sent = False

    def trip(self, now_ms: int, code: str, detail: str, latch: bool = True) -> None:
        self.heater_off()
        if latch and self.latched is None:
            self.latched = (code, detail)
            self.latched_sent_ms = now_ms
        self.send("F", [code, detail])

    # ---- input -------------------------------------------------------------------------------
    def receive(self, data: bytes, now_ms: int) -> None:
        before = self.lines.overflows
        lines = self.lines.feed(data)
        for _ in range(self.lines.overflows - before):
            self._bad_frame(now_ms)
        for line in lines:
            if not line.strip():
                continue
            try:
                kind, seq, fields = decode(line)
            except ValueError:
                self._bad_frame(now_ms)
                continue
            self.handle(kind, seq, fields, now_ms)

    def _bad_frame(self, now_ms: int) -> None:
        self.bad_frames += 1
        window = [t for t in self.bad_frame_times if now_ms - t < lim.BAD_FRAMES_WINDOW_MS]
        window.append(now_ms)
        self.bad_frame_times = window
        if self.heater_on and len(window) >= lim.BAD_FRAMES_TRIP:
            self.trip(now_ms, "LINK", f"bad_frames={len(window)}", latch=False)

    def handle(self, kind: str, seq: int, fields: list, now_ms: int) -> None:
        last = self.last_cmd
        if (
            kind in _SETTINGS
            and last is not None
            and last[0] == seq
            and last[1] == kind
            and last[2] == fields
            and now_ms - last[3] <= DUP_WINDOW_MS
        ):
            self.send("A", last[4])  # a retry of a command we already applied: answer again, change nothing
            return
        self.ok_detail = ""
        try:
            result = self._execute(kind, fields, now_ms)
        except (ValueError, IndexError):
            result = "BADARG"
        ack = [str(seq), "OK", self.ok_detail] if result == "" else [str(seq), "ERR", result]
        self.last_cmd = (seq, kind, list(fields), now_ms, ack)
        self.send("A", ack)

    def _execute(self, kind: str, f: list, now_ms: int) -> str:
        if kind == "I":
            self.last_cmd = None  # a (re)connecting host: forget retry state
            self.send("D", [self.model, self.serial, self.firmware, str(PROTOCOL_VERSION),
                            str(self.hal.n_channels), self.boot_id])
            return ""
        if kind == "Q":
            self.send("T", ["1" if self.heater_on else "0", f"{self.power_set_W_per_m:.3f}",
                            str(self.lease.left_ms(now_ms)), f"{self.rate_hz:g}", self.mode or "-"])
            return ""
        if kind == "O":
            if self.heater_on:
                self.ok_detail = str(now_ms)  # when the heater went off, for the host's time axis
            self.heater_off()
            self.latched = None  # the host's explicit acknowledgement clears a latched fault
            return ""
        if kind == "L":
            if len(f) != 1:
                return "BADARG"
            lease_ms = int(f[0])
            if lease_ms <= 0:
                return "BADARG"
            if not self.heater_on:
                return "NOTARMED"
            self.lease.grant(now_ms, lease_ms)
            return ""
        if kind == "C":
            return self._configure(f)
        if kind == "P":
            return self._power(f, now_ms)
        return "UNKNOWN"

    def _configure(self, f: list) -> str:
        if len(f) != 4:
            return "BADARG"
        rate, tc_type, mode, length_mm = _num(f[0]), f[1].upper(), f[2].upper(), _num(f[3])
        if rate not in RATES_HZ or tc_type not in TC_TYPES or mode not in ("T", "E"):
            return "BADARG"
        if not 0.0 < length_mm <= lim.HEATER_LENGTH_MAX_MM:
            return "BADARG"
        if self.heater_on:
            return "BUSY"
        self.hal.configure(tc_type, mode)
        self.rate_hz, self.tc_type, self.mode, self.length_m = rate, tc_type, mode, length_mm / 1000.0
        self.sample_every = max(1, round(1000.0 / rate / CONTROL_PERIOD_MS))
        self.cycle = 0
        self.configured = True
        self.read_ok = False
        return ""

    def _power(self, f: list, now_ms: int) -> str:
        if len(f) != 2:
            return "BADARG"
        power, lease_ms = _num(f[0]), int(f[1])
        if power <= 0.0 or lease_ms <= 0:
            return "BADARG"
        if not self.configured:
            return "NOTCONFIGURED"
        if self.latched is not None or self._unsafe_now(lim.T_REARM_MARGIN_K) != "":
            return "FAULT"
        err = lim.power_request_error(power, self.length_m)
        if err:
            return err
        self.lease.grant(now_ms, lease_ms)
        if self.armed_at_ms is None:
            self.armed_at_ms = now_ms
        self.ok_detail = str(self.armed_at_ms)  # when the heater went on: time zero of the host's analysis
        self.power_set_W_per_m = power
        self.duty = self.reg.start(power * self.length_m)
        self.hal.set_duty(self.duty)
        return ""

    # ---- control -----------------------------------------------------------------------------
    def _probe_temps(self) -> list:
        """(index, °C or upper bound, fault) per channel, as the limits see them."""
        out = []
        for i, (value, fault) in enumerate(self.channels):
            t = value if self.mode == "T" else lim.temperature_bound_C(value, self.cj_C, self.tc_type)
            out.append((i, t, fault))
        return out

    def _unsafe_now(self, margin_K: float = 0.0) -> str:
        """A reason the heater must not be on, judged from the latest reading ('' when none)."""
        if not self.read_ok:
            return ""
        for i, t, fault in self._probe_temps():
            if i == 0 and fault & FAULT_OPEN:
                return "TC_OPEN"
            if i == 0 and fault:
                return "TC_FAULT"
            if not fault and t > lim.T_PROBE_MAX_C - margin_K:
                return "OVERTEMP"
        return ""

    def tick(self, now_ms: int) -> bool:
        """One loop iteration. True while control cycles complete on time: a cycle that fails every time
        (the passes between cycles succeed) must still starve the watchdog (PROTOCOL.md §7.1 CRASH, §8)."""
        if self.heater_on and self.lease.expired(now_ms):
            self.trip(now_ms, "LEASE", "expired", latch=False)
        if self.latched is not None and now_ms - self.latched_sent_ms >= FAULT_REPEAT_MS:
            self.latched_sent_ms = now_ms
            self.send("F", list(self.latched))
        if self.control.due(now_ms):
            self._control_cycle(now_ms)
            self.cycle_done_ms = now_ms
        return now_ms - self.cycle_done_ms <= 2 * CONTROL_PERIOD_MS

    def _control_cycle(self, now_ms: int) -> None:
        applied = self.duty
        try:
            if self.configured:
                self.cj_C, self.channels = self.hal.read()
            self.supply_V, self.mean_A = self.hal.read_power()
            self.read_ok = self.configured
        except OSError:
            self.read_ok = False
            if self.heater_on or self.latched is None:
                self.trip(now_ms, "BUS", "read_failed")
            return
        self.reg.measure(self.supply_V, self.mean_A, applied)
        if self.heater_on:
            self._check_limits(now_ms, applied)
        if self.heater_on:
            self.duty = self.reg.update(self.supply_V, self.mean_A, applied)
            self.hal.set_duty(self.duty)
            if self.reg.saturated and not self.underpower_sent:
                self.underpower_sent = True
                self.send("F", ["UNDERPOWER", f"P={self.reg.power_W:.3f}W"])
        if self.configured:
            self.cycle += 1
            if self.cycle >= self.sample_every:
                self.cycle = 0
                self._send_sample(now_ms, applied > 0.0)

    def _check_limits(self, now_ms: int, applied: float) -> None:
        reason = self._unsafe_now()
        if reason == "OVERTEMP":
            hot = max(t for _, t, fault in self._probe_temps() if not fault)
            self.trip(now_ms, reason, f"T={hot:.2f}C")
            return
        if reason:
            self.trip(now_ms, reason, "ch0")
            return
        reg = self.reg
        if self.supply_V < lim.SUPPLY_MIN_V:
            self.trip(now_ms, "SUPPLY_LOW", f"V={self.supply_V:.3f}V")
            return
        if applied > 0 and self.mean_A > 0 and (
            reg.resistance_ohm < lim.R_HEATER_MIN_OHM or reg.on_current_A > lim.I_ON_MAX_A
        ):
            # a switch stuck on looks the same from mean values: more current than the duty explains
            self.trip(now_ms, "HEATER_SHORT", f"R={reg.resistance_ohm:.3f}ohm")
            return
        if applied >= lim.DUTY_OPEN_MIN and self.mean_A < lim.I_OPEN_A:
            self.open_count += 1
            if self.open_count >= lim.OPEN_TRIP_COUNT:
                self.trip(now_ms, "HEATER_OPEN", f"I={self.mean_A:.4f}A")
                return
        else:
            self.open_count = 0
        if reg.power_W > lim.POWER_MAX_W * lim.POWER_TRIP_MARGIN:
            self.over_count += 1
            if self.over_count >= lim.POWER_TRIP_COUNT:
                self.trip(now_ms, "OVERPOWER", f"P={reg.power_W:.3f}W")
                return
        else:
            self.over_count = 0
        if now_ms - self.armed_at_ms > lim.ON_TIME_MAX_MS:
            self.trip(now_ms, "ONTIME", f"on={(now_ms - self.armed_at_ms) // 1000}s")

    def _send_sample(self, now_ms: int, was_driven: bool) -> None:
        # V and A describe the control period just ended; heater_on is the switch state from now on
        reg = self.reg
        on = self.heater_on and self.duty > 0.0
        fields = [str(now_ms), f"{self.cj_C:.4f}", f"{reg.v_rms if was_driven else 0.0:.4f}",
                  f"{reg.i_rms if was_driven else 0.0:.5f}", f"{self.supply_V:.3f}", "1" if on else "0"]
        for value, fault in self.channels:
            fields.append(f"{value:.4f}")
            fields.append(f"{fault & 0xFF:02X}")
        self.send("S", fields)
