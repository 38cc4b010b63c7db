"""The thermocouple front end as a device: commands with acknowledgements, and a stream of samples."""

from __future__ import annotations

import asyncio
import contextlib
import time
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass

from linerig.daemon.errors import DeviceRejected, DeviceTimeout, LinkError
from linerig.daemon.rig import messages as m
from linerig.daemon.rig.framing import FrameDecoder, encode_frame
from linerig.daemon.rig.transport import SerialTransport

ACK_TIMEOUT_S = 0.5
RETRIES = 2
SENT_MEMORY = 256  # sequence numbers of our own commands remembered, to tell their acks from anyone else's


@dataclass
class FrontEndHandlers:
    """Where the reader delivers what the device says; the daemon fills these in."""

    on_sample: Callable[[m.Sample], None] = lambda s: None
    on_boot: Callable[[m.Boot], None] = lambda b: None
    on_fault: Callable[[m.Fault], None] = lambda f: None
    on_link_lost: Callable[[str], None] = lambda why: None
    on_bad_message: Callable[[str], None] = lambda why: None
    # the device's own time (ms) at which its heater went on ("P") or off ("O"), from its acknowledgement;
    # delivered in frame order, before any later sample, so time zero is known when the first hot sample arrives
    on_heater_switch: Callable[[str, int], None] = lambda kind, device_ms: None
    # an acknowledgement of a command this host never sent: another program is writing to the front end
    on_foreign_ack: Callable[[m.Ack], None] = lambda ack: None
    # the answer to a lease renewal sent with ``send_renewal``: (when it was sent, monotonic s; the answer)
    on_renewal: Callable[[float, m.Ack], None] = lambda sent, ack: None


class FrontEnd:
    def __init__(self, transport: SerialTransport, handlers: FrontEndHandlers | None = None) -> None:
        self.transport = transport
        self.handlers = handlers or FrontEndHandlers()
        self.decoder = FrameDecoder()
        self.identity: m.Identity | None = None
        self.last_status: m.Status | None = None
        self._seq = 0
        self._acks: dict[int, asyncio.Future[m.Ack]] = {}
        self._sent_kinds: dict[int, str] = {}
        self._sent_seqs: deque[int] = deque(maxlen=SENT_MEMORY)  # kept after the ack: a retry is acked again
        self._renewals: dict[int, float] = {}  # renewals in flight: seq → monotonic time sent
        self._lock = asyncio.Lock()
        self._identity_wait: asyncio.Future[m.Identity] | None = None
        self._status_wait: asyncio.Future[m.Status] | None = None

    async def read_forever(self) -> None:
        """Run as one task per link. Returns when the link is lost."""
        while True:
            try:
                data = await self.transport.read()
            except LinkError as exc:
                self._fail_waiters(exc)
                self.handlers.on_link_lost(str(exc))
                return
            for frame in self.decoder.feed(data):
                try:
                    msg = m.parse_message(frame)
                except m.MessageError as exc:
                    self.decoder.counters.bad_frames += 1
                    self.handlers.on_bad_message(str(exc))
                    continue
                self._dispatch(msg)

    def _dispatch(self, msg: m.Message | None) -> None:
        if isinstance(msg, m.Sample):
            self.handlers.on_sample(msg)
        elif isinstance(msg, m.Ack):
            if msg.cmd_seq not in self._sent_seqs:
                self.handlers.on_foreign_ack(msg)
                return
            sent = self._renewals.pop(msg.cmd_seq, None)
            if sent is not None:
                self._sent_kinds.pop(msg.cmd_seq, None)
                self.handlers.on_renewal(sent, msg)
                return
            kind = self._sent_kinds.pop(msg.cmd_seq, None)
            switched = _device_ms(msg.detail) if msg.ok else None
            if kind in (m.CMD_POWER, m.CMD_OFF) and switched is not None:
                self.handlers.on_heater_switch(kind, switched)
            fut = self._acks.get(msg.cmd_seq)
            if fut is not None and not fut.done():
                fut.set_result(msg)
        elif isinstance(msg, m.Identity):
            self.identity = msg
            if self._identity_wait and not self._identity_wait.done():
                self._identity_wait.set_result(msg)
        elif isinstance(msg, m.Status):
            self.last_status = msg
            if self._status_wait and not self._status_wait.done():
                self._status_wait.set_result(msg)
        elif isinstance(msg, m.Boot):
            self.decoder.reset_sequence()
            self.handlers.on_boot(msg)
        elif isinstance(msg, m.Fault):
            self.handlers.on_fault(msg)

    def _fail_waiters(self, exc: Exception) -> None:
        for fut in self._acks.values():
            if not fut.done():
                fut.set_exception(exc)

    async def command(self, kind: str, fields: list[str] | tuple[str, ...] = (),
                      timeout: float = ACK_TIMEOUT_S) -> m.Ack:
        """Send a command and wait for its ack, retrying with the same sequence number."""
        async with self._lock:
            self._seq = (self._seq + 1) % 65536
            seq = self._seq
            fut: asyncio.Future[m.Ack] = asyncio.get_running_loop().create_future()
            self._acks[seq] = fut
            self._note_sent(seq, kind)
            frame = encode_frame(kind, seq, list(fields))
            try:
                for _ in range(RETRIES + 1):
                    await self.transport.write(frame)
                    try:
                        ack = await asyncio.wait_for(asyncio.shield(fut), timeout)
                    except TimeoutError:
                        continue
                    if not ack.ok:
                        raise DeviceRejected(kind, ack.detail)
                    return ack
                raise DeviceTimeout(f"front end did not acknowledge {kind} after {RETRIES + 1} tries")
            finally:
                self._acks.pop(seq, None)

    def _note_sent(self, seq: int, kind: str) -> None:
        self._sent_seqs.append(seq)
        self._sent_kinds[seq] = kind
        if len(self._sent_kinds) > 64:  # acknowledgements that never came: forget the oldest
            self._sent_kinds.pop(next(iter(self._sent_kinds)))

    async def identify(self) -> m.Identity:
        self._identity_wait = asyncio.get_running_loop().create_future()
        await self.command(m.CMD_IDENTIFY)
        return await asyncio.wait_for(self._identity_wait, ACK_TIMEOUT_S)

    async def status(self) -> m.Status:
        self._status_wait = asyncio.get_running_loop().create_future()
        await self.command(m.CMD_STATUS)
        return await asyncio.wait_for(self._status_wait, ACK_TIMEOUT_S)

    async def configure(self, rate_hz: float, tc_type: str, mode: str, heater_length_m: float) -> None:
        await self.command(m.CMD_CONFIGURE, [f"{rate_hz:g}", tc_type, mode, f"{heater_length_m * 1000:.1f}"])

    async def set_power(self, power_W_per_m: float, lease_s: float) -> int | None:
        """Arm the heater; returns the device ms at which it went on (PROTOCOL.md §4.2), if the device says."""
        ack = await self.command(m.CMD_POWER, [f"{power_W_per_m:.4f}", str(int(lease_s * 1000))])
        return _device_ms(ack.detail)

    async def renew_lease(self, lease_s: float) -> None:
        await self.command(m.CMD_LEASE, [str(int(lease_s * 1000))])

    async def send_renewal(self, lease_s: float) -> None:
        """A lease renewal sent at once, without waiting for earlier ones to be answered (PROTOCOL.md §6: every
        renewal period whatever became of the last; each is an absolute setting, so one arriving late or twice
        does no harm). The answer goes to ``on_renewal``."""
        seq = (self._seq + 1) % 65536
        self._seq = seq
        self._note_sent(seq, m.CMD_LEASE)
        self._renewals[seq] = time.monotonic()
        while len(self._renewals) > SENT_MEMORY:  # answers that never came
            self._renewals.pop(next(iter(self._renewals)))
        await self.transport.write(encode_frame(m.CMD_LEASE, seq, [str(int(lease_s * 1000))]))

    async def heater_off(self) -> int | None:
        """Heater off; returns the device ms at which it went off when it had been on."""
        ack = await self.command(m.CMD_OFF)
        return _device_ms(ack.detail)

    async def heater_off_best_effort(self) -> bool:
        """Send OFF without letting a dead link raise; the device lease is the backstop."""
        with contextlib.suppress(Exception):
            if self.transport.is_open:
                seq = (self._seq + 1) % 65536
                await self.transport.write(encode_frame(m.CMD_OFF, seq))
                self._seq = seq
                self._note_sent(seq, m.CMD_OFF)
                return True
        return False


def _device_ms(detail: str) -> int | None:
    """The switch time an OK carries for P and O (PROTOCOL.md §4.2), or None."""
    return int(detail) if detail.isdigit() else None
