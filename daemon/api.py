"""JSON lines over a Unix socket: requests, replies and an event stream.

The socket file's group and mode decide who may control the heater. A client can
only ever affect a run through the requests below; a slow, broken or hostile
client is cut off without touching the run.
"""

from __future__ import annotations

import asyncio
import contextlib
import grp
import json
import logging
import os
import socket
import struct
from collections.abc import Awaitable, Callable
from pathlib import Path
from typing import Any

log = logging.getLogger("linerigd.api")

MAX_LINE = 64 * 1024
QUEUE_DEPTH = 2000

Handler = Callable[[dict[str, Any]], Awaitable[dict[str, Any]]]


class RequestError(ValueError):
    """A request the daemon understood but will not do; the message says why."""


class Hub:
    """Fan-out of events to subscribers; a slow subscriber loses its oldest events, never blocks a run."""

    def __init__(self) -> None:
        self._queues: set[asyncio.Queue[dict[str, Any]]] = set()

    def publish(self, event: dict[str, Any]) -> None:
        for q in self._queues:
            if q.full():
                with contextlib.suppress(asyncio.QueueEmpty):
                    q.get_nowait()
            q.put_nowait(event)

    def subscribe(self) -> asyncio.Queue[dict[str, Any]]:
        q: asyncio.Queue[dict[str, Any]] = asyncio.Queue(QUEUE_DEPTH)
        self._queues.add(q)
        return q

    def unsubscribe(self, q: asyncio.Queue[dict[str, Any]]) -> None:
        self._queues.discard(q)

    @property
    def subscribers(self) -> int:
        return len(self._queues)


def peer_credentials(sock: socket.socket | None) -> tuple[int, int, int] | None:
    if sock is None or not hasattr(socket, "SO_PEERCRED"):
        return None
    raw = sock.getsockopt(socket.SOL_SOCKET, socket.SO_PEERCRED, struct.calcsize("3i"))
    pid, uid, gid = struct.unpack("3i", raw)
    return pid, uid, gid


def encode(obj: dict[str, Any]) -> bytes:
    return (json.dumps(obj, separators=(",", ":"), allow_nan=False, default=_jsonable) + "\n").encode()


def _jsonable(value: Any) -> Any:
    if hasattr(value, "item"):
        return value.item()
    if isinstance(value, tuple | set):
        return list(value)
    raise TypeError(f"cannot encode {type(value).__name__}")


class ApiServer:
    def __init__(self, path: Path, handlers: dict[str, Handler], hub: Hub, group: str | None = None) -> None:
        self.path = path
        self.handlers = handlers
        self.hub = hub
        self.group = group
        self._server: asyncio.AbstractServer | None = None
        self.clients = 0

    async def start(self) -> None:
        self.path.parent.mkdir(parents=True, exist_ok=True)
        with contextlib.suppress(FileNotFoundError):
            self.path.unlink()
        old = os.umask(0o117)
        try:
            self._server = await asyncio.start_unix_server(self._client, path=str(self.path), limit=MAX_LINE)
        finally:
            os.umask(old)
        os.chmod(self.path, 0o660)
        if self.group:
            os.chown(self.path, -1, grp.getgrnam(self.group).gr_gid)

    async def close(self) -> None:
        if self._server is not None:
            self._server.close()
            with contextlib.suppress(Exception):
                await asyncio.wait_for(self._server.wait_closed(), 1.0)
        with contextlib.suppress(FileNotFoundError):
            self.path.unlink()

    async def _client(self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        creds = peer_credentials(writer.get_extra_info("socket"))
        log.info("client connected: pid/uid/gid %s", creds)
        self.clients += 1
        sub_task: asyncio.Task[None] | None = None
        try:
            while True:
                try:
                    line = await reader.readline()
                except (ValueError, asyncio.LimitOverrunError):
                    writer.write(encode({"ok": False, "error": f"request longer than {MAX_LINE} bytes"}))
                    await writer.drain()
                    break
                if not line:
                    break
                reply = await self._handle(line)
                if reply.pop("_subscribe", False) and sub_task is None:
                    sub_task = asyncio.create_task(self._stream(writer))
                writer.write(encode(reply))
                await writer.drain()
        except (ConnectionError, OSError):
            pass
        finally:
            self.clients -= 1
            if sub_task is not None:
                sub_task.cancel()
                with contextlib.suppress(asyncio.CancelledError, Exception):
                    await sub_task
            writer.close()
            with contextlib.suppress(Exception):
                await writer.wait_closed()

    async def _handle(self, line: bytes) -> dict[str, Any]:
        try:
            req = json.loads(line)
        except (json.JSONDecodeError, UnicodeDecodeError) as exc:
            return {"ok": False, "error": f"not JSON: {exc}"}
        if not isinstance(req, dict) or not isinstance(req.get("op"), str):
            return {"ok": False, "error": 'a request is a JSON object with a string "op"'}
        rid = req.get("id")
        op = req["op"]
        handler = self.handlers.get(op)
        if handler is None:
            return {"id": rid, "ok": False, "error": f"unknown op {op!r}; known: {sorted(self.handlers)}"}
        try:
            result = await handler(req)
        except RequestError as exc:
            return {"id": rid, "ok": False, "error": str(exc)}
        except Exception as exc:  # a bug in one request must not take the daemon down
            log.exception("request %s failed", op)
            return {"id": rid, "ok": False, "error": f"internal error: {type(exc).__name__}: {exc}"}
        return {"id": rid, "ok": True, **result}

    async def _stream(self, writer: asyncio.StreamWriter) -> None:
        q = self.hub.subscribe()
        try:
            while True:
                event = await q.get()
                writer.write(encode(event))
                await writer.drain()
        except (ConnectionError, OSError):
            pass
        finally:
            self.hub.unsubscribe(q)
