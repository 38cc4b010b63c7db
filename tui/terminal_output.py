"""Terminal output that survives the terminal going away.

Textual writes the screen from a writer thread through a bounded queue. When the window is closed while the UI
runs (or the SSH link drops with the hang-up signal ignored), the next write fails with EIO, the writer thread
dies, its queue fills, and the app blocks for ever in a write or in its own shutdown: the demo then keeps its
daemon and simulator running. A write to a terminal that is gone is dropped here instead, so the UI notices the
hang-up (``LinerigApp._watch_terminal``) and leaves normally.
"""

from __future__ import annotations

from typing import IO, Any

from textual.driver import Driver


class OutputPastHangup:
    """A text stream whose writes and flushes after an OSError (EIO from a closed pty) are dropped."""

    def __init__(self, file: IO[str]) -> None:
        self._file = file
        self.gone = False

    def write(self, text: str) -> int:
        if not self.gone:
            try:
                self._file.write(text)
            except OSError:
                self.gone = True
        return len(text)

    def flush(self) -> None:
        if not self.gone:
            try:
                self._file.flush()
            except OSError:
                self.gone = True

    def __getattr__(self, name: str) -> Any:  # fileno, isatty, encoding … as the real stream has them
        return getattr(self._file, name)


def surviving_hangup(base: type[Driver]) -> type[Driver]:
    """``base`` with its output stream wrapped (a driver without one, e.g. headless, writes nothing to wrap)."""

    class HangupSafeDriver(base):  # type: ignore[valid-type,misc]
        def __init__(self, *args: Any, **kwargs: Any) -> None:
            super().__init__(*args, **kwargs)
            out = getattr(self, "_file", None)
            if out is not None and not isinstance(out, OutputPastHangup):
                self._file = OutputPastHangup(out)

    return HangupSafeDriver
