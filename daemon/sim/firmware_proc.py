"""The front-end firmware as its own MicroPython process, on a simulated board (run by `mpy_host`).

    micropython firmware_proc.py FIRMWARE_DIR SPEED RESET_CAUSE SERIAL BOOT_ID N_CHANNELS BOARD_IN_FD BOARD_OUT_FD

Runs under the MicroPython Unix port only. The firmware's UART is this process's stdin and stdout, a
pseudo-terminal, read and written through ``probefw.loop.StreamUart`` as the board reads USB serial. The board
(converters, power monitor, heater switch) is the simulator's, reached over a pair of pipes with one text line
per request (`mpy_host.BoardServer` answers):

    > R ms              read converters and monitor at device ms  < cj bus_V amps gain (value fault)*n  or  < E
    > D ms duty         set the heater switch's duty at device ms (no reply)
    > C type mode       configure the converters (no reply)
    > S on power_W_per_m configured lease_left_ms device_ms reason   the heater's state changed (no reply)

``gain`` is a firmware fault the simulator injects (a regulator aiming off its set point). The firmware's clock
runs ``SPEED`` times faster than the wall clock; its link timings stay in wall time (`wall_link`).
"""

import sys
import time

from wall_link import WallLink, catch_up, heater_reason, missing_link_field

CATCH_UP_CYCLES = 20
"""Cycles served before the host's bytes are read again: each costs a board round trip (about 1 ms), so a
process that fell behind (a loaded machine) skips the rest as a stalled board would, rather than leave the
host's commands unanswered for longer than the lease."""


class BoardLink:
    """The hal probefw.device expects, over the board pipes; ``now_ms`` is set before every call into the firmware."""

    def __init__(self, rx: object, tx: object, n_channels: int) -> None:
        self.rx, self.tx = rx, tx
        self.n_channels = n_channels
        self.now_ms = 0
        self.gain = 1.0
        self._power = None  # (ms, bus_V, amps) from the last read

    def _ask(self, line: str) -> None:
        self.tx.write(line.encode() + b"\n")

    def configure(self, tc_type: str, mode: str) -> None:
        self._ask("C " + tc_type + " " + mode)

    def set_duty(self, duty: float) -> None:
        self._ask("D %d %r" % (self.now_ms, duty))  # noqa: UP031 (MicroPython-safe)

    def _read(self) -> list:
        self._ask("R %d" % self.now_ms)  # noqa: UP031
        parts = self.rx.readline().split()
        if not parts:
            raise SystemExit(0)  # the simulator has gone: a board without its host
        if parts[0] == b"E":
            raise OSError("converter bus")
        self._power = (self.now_ms, float(parts[1]), float(parts[2]))
        self.gain = float(parts[3])
        return parts

    def read(self) -> tuple:
        parts = self._read()
        cj = float(parts[0])
        chans = [(float(parts[i]), int(parts[i + 1])) for i in range(4, len(parts), 2)]
        return cj, chans

    def read_power(self) -> tuple:
        if self._power is None or self._power[0] != self.now_ms:
            self._read()  # not configured yet: the firmware reads the monitor alone
        return self._power[1], self._power[2]


def main(argv: list) -> None:
    fw_dir, speed, cause, serial, boot_id, n_channels, fd_in, fd_out = argv[1:9]
    sys.path.insert(0, fw_dir)
    import select

    from probefw import limits
    from probefw.device import FrontEnd
    from probefw.loop import IDLE_MS, MAX_READ_BYTES, StreamUart

    speed = float(speed)
    # the pipes live as long as the process
    board = BoardLink(open(int(fd_in), "rb"), open(int(fd_out), "wb"), int(n_channels))  # noqa: SIM115
    poll = select.poll()
    poll.register(sys.stdin, select.POLLIN)
    uart = StreamUart(sys.stdin.buffer, sys.stdout.buffer, poll)
    faults = []

    def write(frame: bytes) -> None:
        if frame[1:2] == b"F":
            fields = frame[1 : frame.rfind(b"*")].decode().split(",")
            if len(fields) >= 4:
                faults.append((fields[2], fields[3]))
        uart.write(frame)

    fe = FrontEnd(board, write, boot_id, serial=serial)
    if missing_link_field(fe):
        raise SystemExit("probefw.device.FrontEnd has no " + missing_link_field(fe) + "; update wall_link.py")
    link = WallLink()
    t0 = time.ticks_ms()
    state = [None]

    def wall() -> float:
        return time.ticks_diff(time.ticks_ms(), t0) / 1000.0

    def call(fn: object, now: int, at: float, reason: str) -> None:
        board.now_ms = now
        link.enter(fe, now, at)
        faults[:] = []
        try:
            fn()
        except Exception as exc:  # as main.py's loop does: heater off, report, carry on
            board.set_duty(0.0)
            try:
                fe.heater_off()
                fe.send("F", ["CRASH", type(exc).__name__])
            except Exception:  # best effort; the heater is already off
                pass
        link.leave(fe, now, at)
        if fe.reg.gain != board.gain:  # an injected regulator fault acts at once, as firmware_host's does
            fe.reg.gain = board.gain
            if fe.heater_on:
                fe.reg.target_W = min(fe.power_set_W_per_m * fe.length_m * board.gain, limits.POWER_MAX_W)
        lease_left = 0 if link.lease_end is None else max(0, round((link.lease_end - at) * 1000))
        now_state = (fe.heater_on, fe.power_set_W_per_m, fe.configured, link.lease_end)
        if now_state != state[0]:
            state[0] = now_state
            board._ask("S %d %r %d %d %d %s" % (fe.heater_on, fe.power_set_W_per_m, fe.configured,  # noqa: UP031
                                                 lease_left, now, heater_reason(faults, reason)))

    _with_gain(fe)
    board.now_ms = 0
    fe.start(0, cause)
    while True:
        at = wall()
        now = round(at * 1000.0 * speed)
        data = uart.read(MAX_READ_BYTES)
        catch_up(fe, now, lambda t, at=at: call(lambda: fe.tick(t), t, at, "firmware"), None, CATCH_UP_CYCLES)
        if data:
            call(lambda data=data, now=now: fe.receive(data, now), now, at, "host command")
        wait = max(0, int((fe.control.next_ms - now) / speed))
        poll.poll(min(IDLE_MS, wait))


def _with_gain(fe: object) -> None:
    """The regulator aims at ``gain`` times the power asked (a firmware fault the simulator injects)."""
    reg = fe.reg
    reg.gain = 1.0
    start = reg.start

    def start_with_gain(target_W: float) -> float:
        return start(target_W * reg.gain)

    reg.start = start_with_gain


if __name__ == "__main__":
    main(sys.argv)
