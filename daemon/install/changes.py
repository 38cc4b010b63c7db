"""The changes linerig-setup makes, each able to say what it does (``--dry-run`` prints exactly that) and do it.

A plan is an ordered list of these; the same list is printed by a dry run and carried out by a real one, so what
a dry run shows is what a real run does.
"""

from __future__ import annotations

import difflib
import os
import shlex
from dataclasses import dataclass
from pathlib import Path

from linerig.daemon.install.host import Host


class _Step:
    """What every change can do besides saying what it is and doing it: show its content (files only)."""

    def detail(self) -> list[str]:
        return []


@dataclass(frozen=True)
class MakeDir(_Step):
    path: Path
    mode: int = 0o755

    def summary(self) -> str:
        return f"create folder {self.path} (mode {self.mode:04o})"

    def apply(self, host: Host) -> None:
        host.path(self.path).mkdir(mode=self.mode)


@dataclass(frozen=True)
class WriteFile(_Step):
    path: Path
    text: str
    old: str | None = None
    mode: int = 0o644

    def summary(self) -> str:
        return f"write {self.path} ({'new file' if self.old is None else 'changed'}, mode {self.mode:04o})"

    def detail(self) -> list[str]:
        """The change as a unified diff (a new file against /dev/null)."""
        before = "/dev/null" if self.old is None else str(self.path)
        return [line.rstrip("\n") for line in difflib.unified_diff(
            (self.old or "").splitlines(keepends=True), self.text.splitlines(keepends=True), before, str(self.path))]

    def apply(self, host: Host) -> None:
        """Written whole beside the old file and then moved over it: never half a unit or half a config."""
        target = host.path(self.path)
        part = target.with_name(f".{target.name}.linerig-setup")
        part.write_text(self.text, encoding="utf-8")
        part.chmod(self.mode)
        os.replace(part, target)


@dataclass(frozen=True)
class RemoveFile(_Step):
    path: Path

    def summary(self) -> str:
        return f"remove {self.path}"

    def apply(self, host: Host) -> None:
        host.path(self.path).unlink(missing_ok=True)


@dataclass(frozen=True)
class RemoveDir(_Step):
    """A folder linerig-setup made, once what it put there is gone (left alone if anything else is in it)."""

    path: Path

    def summary(self) -> str:
        return f"remove folder {self.path} (if empty)"

    def apply(self, host: Host) -> None:
        folder = host.path(self.path)
        if folder.is_dir() and not any(folder.iterdir()):
            folder.rmdir()


@dataclass(frozen=True)
class RunCommand(_Step):
    argv: tuple[str, ...]
    why: str

    def summary(self) -> str:
        return f"run {shlex.join(self.argv)}  ({self.why})"

    def apply(self, host: Host) -> None:
        host.run(list(self.argv))


Change = MakeDir | WriteFile | RemoveFile | RemoveDir | RunCommand


def folders_for(host: Host, files: list[Path]) -> list[MakeDir]:
    """The folders that must be made before ``files`` can be written, outermost first."""
    missing: set[Path] = set()
    for f in files:
        for parent in f.parents:
            if parent == Path("/") or host.path(parent).is_dir():
                break
            missing.add(parent)
    return [MakeDir(p) for p in sorted(missing, key=lambda p: (len(p.parts), str(p)))]
