"""Writes to a terminal whose window has closed (a real pseudo-terminal whose master side is closed)."""

from __future__ import annotations

import contextlib
import os
import pty

import pytest

from linerig.tui.terminal_output import OutputPastHangup


def test_writes_after_the_terminal_is_gone_are_dropped_not_raised() -> None:
    master, slave = pty.openpty()
    out = os.fdopen(slave, "w", buffering=1)
    stream = OutputPastHangup(out)
    try:
        assert stream.write("before\n") == 7 and not stream.gone
        assert os.read(master, 100) == b"before\r\n"
        os.close(master)  # the window closes
        with pytest.raises(OSError):   # what the bare stream does: EIO, which kills Textual's writer thread
            out.write("after\n")
            out.flush()
        assert stream.write("after\n") == 6
        stream.flush()
        assert stream.gone and stream.fileno() == slave
    finally:
        with contextlib.suppress(OSError):  # its buffer still holds what the dead terminal refused
            out.close()
