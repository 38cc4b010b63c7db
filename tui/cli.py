"""``linerig``: the operator's screen with no arguments; subcommands for everything else.

Each module in tui/commands/ adds one subcommand through ``add_parser(subparsers)``.
"""

from __future__ import annotations

import argparse
import importlib
import os
import pkgutil
import select
import signal
import sys
from pathlib import Path

import tui.commands


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="linerig", description="linerig: line-source thermal probe rig.")
    p.add_argument("--socket", type=Path, default=None, help="the daemon's control socket")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    for info in sorted(pkgutil.iter_modules(tui.commands.__path__), key=lambda i: i.name):
        mod = importlib.import_module(f"tui.commands.{info.name}")
        if hasattr(mod, "add_parser"):
            mod.add_parser(sub)
    return p


# what a shell reports for a program that a closed pipe ended (128 + SIGPIPE), as `yes | head -1` shows
EXIT_PIPE_CLOSED = 128 + signal.SIGPIPE


def main(argv: list[str] | None = None) -> int:
    try:
        try:
            status = _main(argv)
        except SystemExit:  # --help and usage errors print, then exit
            sys.stdout.flush()
            raise
        sys.stdout.flush()  # here, not at interpreter exit, so a closed pipe is seen below
        return status
    except BrokenPipeError:
        if not _stdout_closed():
            raise  # the daemon's socket, not our reader: that is a real error
        # the reader (`| head`) has what it wanted; stdout goes to /dev/null so the exit flush stays quiet
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        os.close(devnull)
        return EXIT_PIPE_CLOSED


def _stdout_closed() -> bool:
    """True when stdout is a pipe whose reading end is gone (poll reports an error on the writing end)."""
    try:
        fd = sys.stdout.fileno()
        poller = select.poll()
    except (AttributeError, OSError, ValueError):
        return True  # no way to ask: the usual cause of a broken pipe is the reader
    poller.register(fd, select.POLLOUT)
    return any(ev & select.POLLERR for _, ev in poller.poll(0))


def _main(argv: list[str] | None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        from tui.app import run_app

        return run_app(args.socket)
    return int(args.func(args))


if __name__ == "__main__":
    sys.exit(main())
