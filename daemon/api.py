"""JSON lines over a Unix socket: requests, replies and an event stream (see daemon/API.md).

The socket file's group and mode (0660) decide who may control the heater; each
connection's peer credentials are read with SO_PEERCRED, logged, checked against
the control group and passed to the handlers for the audit trail. A client can only
ever affect a run through the requests; a slow, broken or hostile client gets an
error reply or is cut off, and the run never notices.
"""

from __future__ import annotations

import asyncio
import contextlib
import grp
import json
import logging
import os
import pwd
import socket
import struct
from collections import deque
from collections.abc import AsyncIterator, Awaitable, Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from linerig.daemon.jsonlines import encode
from linerig.daemon.paths import socket_folder_problem

log = logging.getLogger("linerigd.api")

MAX_LINE = 64 * 1024  # longest request accepted, bytes
QUEUE_DEPTH = 2000  # samples held for a subscriber that reads slowly; the oldest go first
MAX_CLIENTS = 64
RESERVED_CLIENTS = 4  # past MAX_CLIENTS: connections that may only abort or stop the heating (and see the result)
RESERVED_OPS = frozenset({"abort", "stop_heating", "ping", "status"})
RESERVED_REQUESTS = 4  # requests served on a reserved slot before it is closed
RESERVED_WAIT_S = 5.0  # a connection on a reserved slot must ask within this long
IDLE_TIMEOUT_S = 60.0  # a client that neither subscribed nor asked anything for this long is closed
DRAIN_TIMEOUT_S = 10.0  # a client that takes no bytes for this long is disconnected
WRITE_HIGH = 256 * 1024  # bytes held for one client before its writes wait for it to read
MAX_STREAMS = 2  # large replies (samples) being built and sent at once; more wait their turn


class SocketFolderError(OSError):
    """The control socket's folder could be written by someone else; the message names the folder and why."""


class RequestError(ValueError):
    """A request the daemon understood but will not do; the message says why."""


@dataclass(frozen=True)
class Peer:
    pid: int | None = None
    uid: int | None = None
    gid: int | None = None

    def to_dict(self) -> dict[str, int | None]:
        return {"pid": self.pid, "uid": self.uid, "gid": self.gid}


@dataclass(frozen=True)
class Streamed:
    """A reply too large to build in the daemon (a run's samples): ``pieces(envelope)`` yields its whole line in
    pieces once one of MAX_STREAMS slots is free (``samples_reply``); a RequestError before the first piece is an
    error reply, any failure after it cuts the connection (the line is incomplete)."""

    pieces: Callable[[dict[str, Any]], AsyncIterator[bytes]]


Handler = Callable[[dict[str, Any], Peer], Awaitable[dict[str, Any] | Streamed]]


LOSSY_EVENTS = frozenset({"sample", "estimate", "committed", "pulse_fit"})  # superseded by the next one of their kind
MAX_KEPT = 10_000  # state changes, faults... held for one subscriber; past this it is too far behind and is cut off


class Outbox:
    """One subscriber's queue. Samples and estimates beyond QUEUE_DEPTH lose their oldest; state changes,
    faults and run ends are never dropped in their favour. Order across both kinds is kept."""

    def __init__(self) -> None:
        self._lossy: deque[tuple[int, bytes]] = deque(maxlen=QUEUE_DEPTH)
        self._kept: deque[tuple[int, bytes]] = deque()
        self._seq = 0
        self._ready = asyncio.Event()
        self.overflowed = False

    def put(self, data: bytes, lossy: bool) -> bool:
        """Queue an event; False when it replaced an older one."""
        self._seq += 1
        full = False
        if lossy:
            full = len(self._lossy) == QUEUE_DEPTH
            self._lossy.append((self._seq, data))
        elif len(self._kept) < MAX_KEPT:
            self._kept.append((self._seq, data))
        else:
            self.overflowed = True
        self._ready.set()
        return not full

    @property
    def ready(self) -> bool:
        return bool(self._lossy or self._kept)

    async def get(self) -> bytes:
        while not (self._lossy or self._kept):
            if self.overflowed:
                raise ConnectionError("subscriber too far behind")
            self._ready.clear()
            await self._ready.wait()
        if self.overflowed:
            raise ConnectionError("subscriber too far behind")
        if self._kept and (not self._lossy or self._kept[0][0] < self._lossy[0][0]):
            return self._kept.popleft()[1]
        return self._lossy.popleft()[1]


class Hub:
    """Fan-out of events to subscribers; a slow subscriber loses old samples, never blocks a run."""

    def __init__(self) -> None:
        self._boxes: set[Outbox] = set()
        self.dropped = 0
        self.watchers: list[Callable[[dict[str, Any]], None]] = []  # parts of the daemon that follow events

    def publish(self, event: dict[str, Any]) -> None:
        for watch in self.watchers:
            watch(event)
        if not self._boxes:
            return
        data = encode(event)  # once, whatever the number of subscribers
        lossy = event.get("event") in LOSSY_EVENTS
        for box in self._boxes:
            if not box.put(data, lossy):
                self.dropped += 1

    def subscribe(self) -> Outbox:
        box = Outbox()
        self._boxes.add(box)
        return box

    def unsubscribe(self, box: Outbox) -> None:
        self._boxes.discard(box)

    @property
    def subscribers(self) -> int:
        return len(self._boxes)


def peer_credentials(sock: socket.socket | None) -> Peer:
    if sock is None or not hasattr(socket, "SO_PEERCRED"):
        return Peer()
    raw = sock.getsockopt(socket.SOL_SOCKET, socket.SO_PEERCRED, struct.calcsize("3i"))
    pid, uid, gid = struct.unpack("3i", raw)
    return Peer(pid, uid, gid)


def peer_groups(peer: Peer) -> set[int]:
    """The peer process's supplementary groups as the kernel has them (/proc), else as /etc/group says."""
    if peer.pid:
        try:
            with open(f"/proc/{peer.pid}/status") as fh:
                for line in fh:
                    if line.startswith("Groups:"):
                        return {int(g) for g in line.split()[1:]}
        except OSError:
            pass
    try:
        name = pwd.getpwuid(peer.uid if peer.uid is not None else -1).pw_name
    except KeyError:
        return set()
    return set(os.getgrouplist(name, peer.gid if peer.gid is not None else -1))


def peer_allowed(peer: Peer, group_gid: int | None) -> bool:
    """Root, the daemon's own user and members of the control group; anyone who could open the file when
    no group is set (the file mode already limits that to the daemon's user and group)."""
    if group_gid is None or peer.uid is None:
        return True
    if peer.uid in (0, os.getuid()) or peer.gid == group_gid:
        return True
    return group_gid in peer_groups(peer)


class ApiServer:
    def __init__(self, path: Path, handlers: dict[str, Handler], hub: Hub, group: str | None = None) -> None:
        self.path = path
        self.handlers = handlers
        self.hub = hub
        self.group = group
        self.group_gid = grp.getgrnam(group).gr_gid if group else None
        self._server: asyncio.AbstractServer | None = None
        self.clients = 0
        self.reserved = 0
        self.refused = 0
        self.errors = 0
        self.dropped = 0  # clients cut off for not reading or not asking
        self._streams = asyncio.Semaphore(MAX_STREAMS)

    def prepare_folder(self) -> None:
        """The socket's folder, made 0700 if missing; refused when someone else could write to it."""
        problem = socket_folder_problem(self.path, serving=True)
        if problem is None and not self.path.parent.exists():
            try:
                self.path.parent.mkdir(mode=0o700, parents=True, exist_ok=True)
            except OSError as exc:
                raise SocketFolderError(f"control socket {self.path}: cannot make its folder ({exc.strerror})"
                                        ) from None
            problem = socket_folder_problem(self.path, serving=True)
        if problem:
            raise SocketFolderError(f"control socket {self.path}: {problem}; use --socket in a folder of your own")

    async def start(self) -> None:
        """Bind the socket, in a folder only its owner may write to (``socket_folder_problem``)."""
        self.prepare_folder()
        with contextlib.suppress(FileNotFoundError):
            self.path.unlink()
        old = os.umask(0o117)  # the socket is never world-accessible, not even for an instant
        try:
            self._server = await asyncio.start_unix_server(self._client, path=str(self.path), limit=MAX_LINE)
        finally:
            os.umask(old)
        if self.group_gid is not None:
            os.chown(self.path, -1, self.group_gid)
        os.chmod(self.path, 0o660)

    async def close(self) -> None:
        if self._server is not None:
            self._server.close()
            with contextlib.suppress(Exception):
                await asyncio.wait_for(self._server.wait_closed(), 1.0)
        with contextlib.suppress(FileNotFoundError):
            self.path.unlink()

    async def _client(self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        """One connection: bounded in what it may hold (a line, a write buffer), in time (idle, not reading) and in
        number (MAX_CLIENTS, then RESERVED_CLIENTS that may only abort or stop the heating)."""
        peer = peer_credentials(writer.get_extra_info("socket"))
        conn = _Conn(writer)
        slot: str | None = None
        sub_task: asyncio.Task[None] | None = None
        served = 0
        try:
            if not peer_allowed(peer, self.group_gid):
                self.refused += 1
                log.warning("refused client pid %s uid %s gid %s: not in group %s", peer.pid, peer.uid, peer.gid,
                            self.group)
                await conn.send(encode({"ok": False, "error": f"permission denied: uid {peer.uid} is not in the "
                                        f"control group {self.group}"}))
                return
            if self.clients < MAX_CLIENTS:
                slot, self.clients = "normal", self.clients + 1
            elif self.reserved < RESERVED_CLIENTS:
                slot, self.reserved = "reserved", self.reserved + 1
            busy = {"ok": False, "error": f"too many clients ({MAX_CLIENTS}); close one and retry"
                                          + ("" if slot is None else "; this connection serves abort, "
                                                                     "stop_heating and status only")}
            if slot != "normal":
                self.refused += 1
                await conn.send(encode(busy))
                if slot is None:
                    return
            log.info("client connected: pid %s uid %s gid %s (%s slot)", peer.pid, peer.uid, peer.gid, slot)

            def patience() -> float | None:  # how long to wait for this client's next request
                if slot == "reserved":
                    return RESERVED_WAIT_S
                return None if sub_task is not None else IDLE_TIMEOUT_S

            async for line in self._lines(reader, patience):
                if len(line) > MAX_LINE:
                    self.errors += 1
                    reply: dict[str, Any] = {"ok": False, "error": f"request longer than {MAX_LINE} bytes; ignored"}
                else:
                    reply = await self._handle(line, peer, RESERVED_OPS if slot == "reserved" else None)
                streamed = reply.pop("_streamed", None)
                if reply.pop("_subscribe", False) and sub_task is None:
                    sub_task = asyncio.create_task(self._stream(conn))
                if isinstance(streamed, Streamed):
                    await self._send_streamed(conn, reply, streamed)
                else:
                    await conn.send(encode(reply))
                served += 1
                if slot == "reserved" and served >= RESERVED_REQUESTS:
                    break
                await asyncio.sleep(0)  # a client sending a flood of requests must not starve the rig
        except (ConnectionError, OSError, TimeoutError) as exc:
            if isinstance(exc, TimeoutError):
                self.dropped += 1
                log.info("client pid %s dropped: %s", peer.pid, "not reading" if conn.waiting else "idle")
        except asyncio.CancelledError:
            pass  # shutting down; ending normally keeps asyncio 3.11's stream callback from raising
        except Exception:  # a bug serving one client must not reach the loop's handler, which stops the daemon
            self.errors += 1
            log.exception("client pid %s: connection ended by an error", peer.pid)
        finally:
            if slot == "normal":
                self.clients -= 1
            elif slot == "reserved":
                self.reserved -= 1
            if sub_task is not None:
                sub_task.cancel()
                with contextlib.suppress(asyncio.CancelledError, Exception):
                    await sub_task
            await conn.close()

    @staticmethod
    async def _lines(reader: asyncio.StreamReader, timeout: Callable[[], float | None]) -> AsyncIterator[bytes]:
        """Request lines, each at most MAX_LINE (a longer one is answered once and skipped to its newline)."""
        buf = bytearray()
        discarding = False
        while True:
            chunk = await asyncio.wait_for(reader.read(MAX_LINE), timeout())
            if not chunk:
                return
            buf += chunk
            while True:
                end = buf.find(b"\n")
                if end < 0:
                    if len(buf) > MAX_LINE:
                        if not discarding:
                            yield bytes(buf[: MAX_LINE + 1])  # over-long: the caller answers it
                        discarding = True
                        buf.clear()
                    break
                line = bytes(buf[:end])
                del buf[: end + 1]
                if discarding:  # the tail of a request that was too long
                    discarding = False
                    continue
                if line.strip():
                    yield line

    async def _send_streamed(self, conn: _Conn, envelope: dict[str, Any], streamed: Streamed) -> None:
        async with self._streams:
            pieces = streamed.pieces(envelope)
            try:
                try:
                    first = await anext(pieces)
                except RequestError as exc:
                    await conn.send(encode({"id": envelope.get("id"), "ok": False, "error": str(exc)}))
                    return
                async with conn.lock:
                    await conn.write(first)
                    async for piece in pieces:
                        await conn.write(piece)
            except Exception:
                conn.abort()  # half a line is worse than none
                raise
            finally:
                await pieces.aclose()

    async def _handle(self, line: bytes, peer: Peer, only: frozenset[str] | None = None) -> dict[str, Any]:
        try:
            req = json.loads(line)
        except (ValueError, RecursionError) as exc:  # bad JSON, bad UTF-8, absurd nesting
            self.errors += 1
            return {"ok": False, "error": f"not a JSON request: {str(exc)[:200]}"}
        if not isinstance(req, dict) or not isinstance(req.get("op"), str):
            self.errors += 1
            return {"ok": False, "error": 'a request is a JSON object with a string "op"'}
        rid = req.get("id")
        if not isinstance(rid, int | str | None) or isinstance(rid, bool):
            rid = None
        op = req["op"]
        if only is not None and op not in only:
            return {"id": rid, "ok": False, "error": f"too many clients ({MAX_CLIENTS}): only "
                                                     f"{', '.join(sorted(only))} are served now; close a client"}
        handler = self.handlers.get(op)
        if handler is None:
            self.errors += 1
            known = ", ".join(sorted(self.handlers))
            return {"id": rid, "ok": False, "error": f"unknown op {op[:80]!r}; known: {known}"}
        try:
            result = await handler(req, peer)
        except RequestError as exc:
            return {"id": rid, "ok": False, "error": str(exc)}
        except Exception as exc:  # a bug in one request must not take the daemon down
            self.errors += 1
            log.exception("request %s failed", op)
            return {"id": rid, "ok": False, "error": f"internal error: {type(exc).__name__}: {exc}"}
        if isinstance(result, Streamed):
            return {"id": rid, "ok": True, "_streamed": result}
        return {"id": rid, "ok": True, **result}

    async def _stream(self, conn: _Conn) -> None:
        q = self.hub.subscribe()
        try:
            while True:
                chunk = [await q.get()]
                while len(chunk) < 256 and q.ready:  # whatever else is waiting goes in the same write
                    chunk.append(await q.get())
                await conn.send(b"".join(chunk))
        except (ConnectionError, OSError, TimeoutError):
            self.dropped += 1
            conn.abort()
        finally:
            self.hub.unsubscribe(q)


class _Conn:
    """One client's writing side: whole messages under a lock (a streamed reply and events never interleave),
    a bounded buffer, and a close that never waits on a client that does not read."""

    def __init__(self, writer: asyncio.StreamWriter) -> None:
        self.writer = writer
        self.lock = asyncio.Lock()
        self.waiting = False  # a write is waiting for the client to read
        writer.transport.set_write_buffer_limits(high=WRITE_HIGH)

    async def send(self, data: bytes) -> None:
        async with self.lock:
            await self.write(data)

    async def write(self, data: bytes) -> None:
        """Write and, past WRITE_HIGH buffered, wait up to DRAIN_TIMEOUT_S for the client to take it."""
        self.writer.write(data)
        self.waiting = True
        try:
            await asyncio.wait_for(self.writer.drain(), DRAIN_TIMEOUT_S)
        finally:
            self.waiting = False

    def abort(self) -> None:
        """Drop whatever the client did not take, and the descriptor with it, now."""
        self.writer.transport.abort()

    async def close(self) -> None:
        transport = self.writer.transport
        if transport.get_write_buffer_size():  # a close would wait for a client that may never read
            transport.abort()
        else:
            self.writer.close()
        with contextlib.suppress(Exception):
            await asyncio.wait_for(self.writer.wait_closed(), 1.0)
