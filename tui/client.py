"""A small JSON-lines client for the daemon's socket, used by the CLI, the UI and the tests."""

from __future__ import annotations

import asyncio
import json
from collections.abc import AsyncIterator
from pathlib import Path
from typing import Any

from linerig.daemon.paths import default_socket_path, socket_folder_problem


class DaemonError(RuntimeError):
    """The daemon refused a request or could not be reached; the message says which."""


class Client:
    def __init__(self, path: Path | None = None) -> None:
        self.path = path or default_socket_path()
        self._reader: asyncio.StreamReader | None = None
        self._writer: asyncio.StreamWriter | None = None
        self._next_id = 0
        self._events: asyncio.Queue[dict[str, Any]] = asyncio.Queue()
        self._replies: dict[int, asyncio.Future[dict[str, Any]]] = {}
        self._pump: asyncio.Task[None] | None = None

    async def connect(self) -> Client:
        problem = socket_folder_problem(self.path, serving=False)
        if problem:
            raise DaemonError(f"not connecting to {self.path}: {problem}")
        try:
            # a day of samples at 8 channels is one reply line of about 10 MB
            self._reader, self._writer = await asyncio.open_unix_connection(str(self.path), limit=1 << 26)
        except (FileNotFoundError, ConnectionRefusedError) as exc:
            raise DaemonError(f"cannot reach linerigd at {self.path}: is it running? ({exc.strerror})") from exc
        except PermissionError as exc:
            raise DaemonError(f"no permission for {self.path}: join the group that controls the rig") from exc
        self._pump = asyncio.create_task(self._read())
        return self

    async def __aenter__(self) -> Client:
        return await self.connect()

    async def __aexit__(self, *exc: object) -> None:
        await self.close()

    async def close(self) -> None:
        if self._pump is not None:
            self._pump.cancel()
        if self._writer is not None:
            self._writer.close()

    async def _read(self) -> None:
        assert self._reader is not None
        try:
            while line := await self._reader.readline():
                msg = json.loads(line)
                rid = msg.get("id") if "ok" in msg else None
                fut = self._replies.pop(rid, None) if isinstance(rid, int) else None
                if fut is not None and not fut.done():
                    fut.set_result(msg)
                elif "event" in msg:
                    self._events.put_nowait(msg)
        finally:
            err = DaemonError("the daemon closed the connection")
            for fut in self._replies.values():
                if not fut.done():
                    fut.set_exception(err)
            self._events.put_nowait({"event": "_closed"})

    async def request(self, op: str, **fields: Any) -> dict[str, Any]:
        assert self._writer is not None, "connect() first"
        self._next_id += 1
        rid = self._next_id
        fut: asyncio.Future[dict[str, Any]] = asyncio.get_running_loop().create_future()
        self._replies[rid] = fut
        self._writer.write((json.dumps({"op": op, "id": rid, **fields}) + "\n").encode())
        await self._writer.drain()
        reply = await fut
        if not reply.get("ok"):
            raise DaemonError(reply.get("error", "request failed"))
        return reply

    async def events(self) -> AsyncIterator[dict[str, Any]]:
        while True:
            ev = await self._events.get()
            if ev.get("event") == "_closed":
                raise DaemonError("the daemon closed the connection")
            yield ev
