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
import math
import os
import pwd
import socket
import struct
from collections import deque
from collections.abc import Awaitable, Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

log = logging.getLogger("linerigd.api")

MAX_LINE = 64 * 1024  # longest request accepted, bytes
QUEUE_DEPTH = 2000  # samples held for a subscriber that reads slowly; the oldest go first
MAX_CLIENTS = 64
DRAIN_TIMEOUT_S = 10.0  # a client that takes no bytes for this long is disconnected


class RequestError(ValueError):
    """A request the daemon understood but will not do; the message says why."""


@dataclass(frozen=True)
class Peer:
    pid: int | None = None
    uid: int | None = None
    gid: int | None = None

    def to_dict(self) -> dict[str, int | None]:
        return {"pid": self.pid, "uid": self.uid, "gid": self.gid}


Handler = Callable[[dict[str, Any], Peer], Awaitable[dict[str, Any]]]


def _finite(value: Any) -> Any:
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _finite(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_finite(v) for v in value]
    return value


def _jsonable(value: Any) -> Any:
    if hasattr(value, "item"):
        return value.item()
    if isinstance(value, tuple | set):
        return list(value)
    raise TypeError(f"cannot encode {type(value).__name__}")


def encode(obj: dict[str, Any]) -> bytes:
    """One line of strict JSON; a NaN or infinity anywhere becomes null."""
    try:
        text = json.dumps(obj, separators=(",", ":"), allow_nan=False, default=_jsonable)
    except ValueError:
        text = json.dumps(_finite(obj), separators=(",", ":"), allow_nan=False, default=_jsonable)
    return (text + "\n").encode()


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
        self.refused = 0
        self.errors = 0

    async def start(self) -> None:
        self.path.parent.mkdir(parents=True, exist_ok=True)
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

    async def _send(self, writer: asyncio.StreamWriter, data: bytes) -> None:
        writer.write(data)
        await asyncio.wait_for(writer.drain(), DRAIN_TIMEOUT_S)

    async def _client(self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        peer = peer_credentials(writer.get_extra_info("socket"))
        sub_task: asyncio.Task[None] | None = None
        counted = False
        try:
            if not peer_allowed(peer, self.group_gid):
                self.refused += 1
                log.warning("refused client pid %s uid %s gid %s: not in group %s", peer.pid, peer.uid, peer.gid,
                            self.group)
                await self._send(writer, encode({"ok": False, "error": f"permission denied: uid {peer.uid} is "
                                                 f"not in the control group {self.group}"}))
                return
            if self.clients >= MAX_CLIENTS:
                self.refused += 1
                await self._send(writer, encode({"ok": False, "error": f"too many clients ({MAX_CLIENTS}); "
                                                 "close one and retry"}))
                return
            self.clients += 1
            counted = True
            log.info("client connected: pid %s uid %s gid %s", peer.pid, peer.uid, peer.gid)
            buf = bytearray()
            discarding = False
            while chunk := await reader.read(MAX_LINE):
                buf += chunk
                while True:
                    end = buf.find(b"\n")
                    if end < 0:
                        if len(buf) > MAX_LINE:
                            if not discarding:
                                self.errors += 1
                                await self._send(writer, encode({"ok": False, "error": f"request longer than "
                                                                 f"{MAX_LINE} bytes; ignored"}))
                            discarding = True
                            buf.clear()
                        break
                    line = bytes(buf[:end])
                    del buf[: end + 1]
                    if discarding:  # the tail of a request that was too long
                        discarding = False
                        continue
                    if not line.strip():
                        continue
                    if len(line) > MAX_LINE:
                        self.errors += 1
                        reply = {"ok": False, "error": f"request longer than {MAX_LINE} bytes; ignored"}
                    else:
                        reply = await self._handle(line, peer)
                    if reply.pop("_subscribe", False) and sub_task is None:
                        sub_task = asyncio.create_task(self._stream(writer))
                    await self._send(writer, encode(reply))
                    await asyncio.sleep(0)  # a client sending a flood of requests must not starve the rig
        except (ConnectionError, OSError, TimeoutError):
            pass
        except asyncio.CancelledError:
            pass  # shutting down; ending normally keeps asyncio 3.11's stream callback from raising
        finally:
            if counted:
                self.clients -= 1
                log.debug("client gone: pid %s uid %s", peer.pid, peer.uid)
            if sub_task is not None:
                sub_task.cancel()
                with contextlib.suppress(asyncio.CancelledError, Exception):
                    await sub_task
            writer.close()
            with contextlib.suppress(Exception):
                await writer.wait_closed()

    async def _handle(self, line: bytes, peer: Peer) -> dict[str, Any]:
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
        return {"id": rid, "ok": True, **result}

    async def _stream(self, writer: asyncio.StreamWriter) -> None:
        q = self.hub.subscribe()
        try:
            while True:
                chunk = [await q.get()]
                while len(chunk) < 256 and q.ready:  # whatever else is waiting goes in the same write
                    chunk.append(await q.get())
                await self._send(writer, b"".join(chunk))
        except (ConnectionError, OSError, TimeoutError):
            writer.close()
        finally:
            self.hub.unsubscribe(q)
