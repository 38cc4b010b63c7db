"""`linerig ... | head`: a reader that leaves early ends the command quietly, as with any Unix tool."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from linerig.daemon.workflows.calibration import MEDIA

ROOT = Path(__file__).resolve().parents[1]
CLI = [sys.executable, "-m", "linerig.tui.cli"]
# an offline command that needs neither daemon nor database and prints several lines
COMMAND = ["calibrate", "--media"]


def test_a_pipe_closed_before_the_first_line_gives_status_141_and_no_traceback() -> None:
    # the reading end is closed before the command starts, so its very first write meets a broken pipe: no race
    r, w = os.pipe()
    os.close(r)
    try:
        done = subprocess.run([*CLI, *COMMAND], stdout=w, stderr=subprocess.PIPE, text=True, cwd=ROOT, timeout=60)
    finally:
        os.close(w)
    # 128 + SIGPIPE (13 on Linux): what bash reports for a command a signal ended (bash manual, "Exit Status")
    assert done.returncode == 141, done.stderr
    assert done.stderr == ""


@pytest.mark.skipif(shutil.which("head") is None or shutil.which("sh") is None, reason="needs sh and head")
def test_piped_into_head_the_first_line_arrives_and_nothing_is_said_on_stderr(tmp_path: Path) -> None:
    first = next(iter(MEDIA.values()))  # what `calibrate --media` prints first
    # the shell pipeline as an operator types it, the command's stderr kept in a file for the check
    err = tmp_path / "stderr.txt"
    piped = subprocess.run(["sh", "-c", '"$@" 2>"$ERR" | head -1', "sh", *CLI, *COMMAND], capture_output=True,
                           text=True, cwd=ROOT, timeout=60, env={**os.environ, "ERR": str(err)})
    assert piped.stdout.startswith(f"{first.name}: {first.description}") and piped.stdout.count("\n") == 1
    assert err.read_text() == ""


def test_only_a_pipe_whose_reader_has_gone_counts_as_closed(monkeypatch: pytest.MonkeyPatch) -> None:
    """A broken pipe elsewhere (the daemon's socket) must not pass for `| head` and be hidden."""
    from linerig.tui.cli import _stdout_closed

    r, w = os.pipe()
    with os.fdopen(w, "w") as out:
        monkeypatch.setattr(sys, "stdout", out)
        assert not _stdout_closed()  # a reader is there
        os.close(r)
        assert _stdout_closed()
        monkeypatch.undo()
