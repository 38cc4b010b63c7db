"""What the importer says back: the choices it made (each with the map key that overrides it) and its errors.

Every error names where the problem is (the logger file's line and column, or the map's key and line) and what
to do; an import never guesses its way past an ambiguity.
"""

from __future__ import annotations

from dataclasses import dataclass


class LoggerImportError(ValueError):
    """A logger file that cannot be turned into a run CSV without a guess; the message says where and what to set."""


class MapError(LoggerImportError):
    """A mapping file (TOML) with a wrong key or value; the message names the file, the key and its line."""


@dataclass(frozen=True)
class Choice:
    """One decision, how it was reached, and the map key that would make it instead."""

    topic: str
    value: str
    how: str
    key: str = ""

    def text(self) -> str:
        tail = f"; {self.key} changes it" if self.key else ""
        return f"{self.topic}: {self.value} ({self.how}{tail})"
