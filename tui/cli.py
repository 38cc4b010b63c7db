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

from linerig.tui import commands


def command_modules() -> list[str]:
    """Subcommand module names; the command is the name with ``-`` for ``_`` (``stop_heating`` → ``stop-heating``)
    and a trailing ``_`` dropped (``import_`` → ``import``, a Python keyword)."""
    return sorted(info.name for info in pkgutil.iter_modules(commands.__path__))


def command_name(module: str) -> str:
    return module.rstrip("_").replace("_", "-")


def build_parser(only: str | None = None) -> argparse.ArgumentParser:
    """The whole parser, or with ``only`` just that subcommand's: some commands pull in the reduction and the
    report code, seconds of imports on a small board that ``linerig status`` should not pay for."""
    p = argparse.ArgumentParser(prog="linerig", description="linerig: line-source thermal probe rig.")
    p.add_argument("--socket", type=Path, default=None, help="the daemon's control socket")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    for name in command_modules():
        if only is not None and name != only:
            continue
        mod = importlib.import_module(f"linerig.tui.commands.{name}")
        if hasattr(mod, "add_parser"):
            mod.add_parser(sub)
    return p


def _command_asked(argv: list[str] | None) -> str | None:
    """The module of the subcommand on the command line when it names one; "" for none (the screen); None
    otherwise, and then all are loaded so that help and a mistyped name read as usual."""
    pre = argparse.ArgumentParser(add_help=False)
    pre.add_argument("--socket")
    pre.add_argument("command", nargs="?")
    try:
        known, _ = pre.parse_known_args(argv)
    except SystemExit:  # argparse's own message follows from the full parser
        return None
    if known.command is None:  # the operator's screen, unless help was asked for
        return None if {"-h", "--help"} & set(sys.argv[1:] if argv is None else argv) else ""
    return next((m for m in command_modules() if command_name(m) == known.command), None)


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
    parser = build_parser(_command_asked(argv))
    args = parser.parse_args(argv)
    if args.command is None:
        from linerig.tui.app import run_app

        return run_app(args.socket)
    return int(args.func(args))


if __name__ == "__main__":
    sys.exit(main())
