"""``linerig``: the operator's screen with no arguments; subcommands for everything else.

Each module in tui/commands/ adds one subcommand through ``add_parser(subparsers)``.
"""

from __future__ import annotations

import argparse
import importlib
import pkgutil
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


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        from tui.app import run_app

        return run_app(args.socket)
    return int(args.func(args))


if __name__ == "__main__":
    sys.exit(main())
