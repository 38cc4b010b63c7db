"""Bytes in and out of a pyserial URL, without threads.

A real port, a pseudo-terminal and ``socket://`` all come through
``serial.serial_for_url``. Reading waits on the file descriptor with the event
loop when the port has one, and polls briefly when it does not.

A serial port is held exclusively: pyserial's lock (flock, which another linerigd or a
careful program respects) and the terminal's own exclusive mode (TIOCEXCL: the kernel refuses
every later open by anyone without CAP_SYS_ADMIN), released again when the port is closed.
Whoever else can write to the front end can switch its heater on.
"""

from __future__ import annotations

import asyncio
import contextlib
import fcntl
import os
import termios
import weakref

import serial

from linerig.daemon.errors import LinkError

POLL_S = 0.005


_OPEN: weakref.WeakSet[SerialTransport] = weakref.WeakSet()


def close_all() -> None:
    """Close every port this process holds (before a last-resort safe-off opens the port again)."""
    for transport in list(_OPEN):
        transport.close()


class SerialTransport:
    def __init__(self, url: str, baudrate: int = 115200) -> None:
        self.url = url
        self.baudrate = baudrate
        self._port: serial.SerialBase | None = None
        self._fd: int | None = None
        self._pending = bytearray()

    @property
    def is_open(self) -> bool:
        return self._port is not None

    def open(self) -> None:
        try:
            port = serial.serial_for_url(self.url, baudrate=self.baudrate, timeout=0, write_timeout=1.0,
                                         exclusive=True)
        except (serial.SerialException, OSError, ValueError) as exc:
            held = "lock" in str(exc) or "busy" in str(exc).lower()
            raise LinkError(f"cannot open {self.url}: {exc}" + ("; another program holds the port (a second "
                                                               "linerigd, a terminal program?)" if held else "")
                            ) from exc
        self._port = port
        try:
            self._fd = port.fileno()
        except (AttributeError, NotImplementedError, serial.SerialException):
            self._fd = None
        if self._fd is not None and os.isatty(self._fd):
            fcntl.ioctl(self._fd, termios.TIOCEXCL)
        _OPEN.add(self)

    def close(self) -> None:
        port, self._port = self._port, None
        fd, self._fd = self._fd, None
        _OPEN.discard(self)
        if port is not None:
            if fd is not None:
                with contextlib.suppress(OSError):
                    fcntl.ioctl(fd, termios.TIOCNXCL)  # a pty keeps the mode after the last close; a USB port not
            with contextlib.suppress(Exception):
                port.close()

    def _require(self) -> serial.SerialBase:
        if self._port is None:
            raise LinkError(f"{self.url} is not open")
        return self._port

    async def read(self) -> bytes:
        """Wait for at least one byte and return what is there."""
        port = self._require()
        while True:
            try:
                data = port.read(max(1, port.in_waiting))
            except (serial.SerialException, OSError) as exc:
                self.close()
                raise LinkError(f"{self.url}: {exc}") from exc
            except TypeError as exc:  # pyserial selecting on a descriptor that another side already closed
                self.close()
                raise LinkError(f"{self.url}: the port went away (device unplugged or its process ended)") from exc
            if data:
                # Yield once even when bytes were waiting: a front end that never pauses (a fast rate, or one
                # babbling) must not starve the lease renewals, the watchdog and the API on the same loop.
                await asyncio.sleep(0)
                return data
            await self._wait_readable()

    async def _wait_readable(self) -> None:
        if self._fd is None:
            await asyncio.sleep(POLL_S)
            return
        loop = asyncio.get_running_loop()
        fut: asyncio.Future[None] = loop.create_future()
        fd = self._fd
        loop.add_reader(fd, lambda: fut.done() or fut.set_result(None))
        try:
            await fut
        finally:
            loop.remove_reader(fd)

    async def write(self, data: bytes) -> None:
        port = self._require()
        try:
            port.write(data)
        except (serial.SerialException, OSError) as exc:
            self.close()
            raise LinkError(f"{self.url}: {exc}") from exc

    async def readline(self, timeout: float) -> bytes:
        """Bytes up to and including LF; on timeout, whatever arrived so far (maybe empty, no LF)."""
        loop = asyncio.get_running_loop()
        deadline = loop.time() + timeout
        while b"\n" not in self._pending:
            left = deadline - loop.time()
            if left <= 0:
                partial = bytes(self._pending)
                self._pending.clear()
                return partial
            try:
                self._pending += await asyncio.wait_for(self.read(), left)
            except TimeoutError:
                continue
        i = self._pending.index(b"\n") + 1
        line = bytes(self._pending[:i])
        del self._pending[:i]
        return line

    def discard_input(self) -> None:
        self._pending.clear()
        port = self._require()
        with contextlib.suppress(serial.SerialException, OSError):
            port.reset_input_buffer()

    def reset_input_buffer(self) -> None:
        """Drop stale bytes before a query (the SCPI driver's resynchronisation step)."""
        self.discard_input()
