"""``linerig-setup``: set up (or remove) linerigd as a service on this machine, from the installed package.

Exit codes: 0 done (or nothing to do), 1 a system command failed or the self-check found a problem, 2 bad
arguments or a request linerig-setup cannot carry out (the message says what to change).
"""

from __future__ import annotations

import argparse
import os
import sys
import sysconfig
from pathlib import Path

from linerig.daemon.install import selfcheck
from linerig.daemon.install.changes import RunCommand, WriteFile
from linerig.daemon.install.host import CommandFailed, Host, ThrowawayRoot
from linerig.daemon.install.layout import CONFIG, DATABASE
from linerig.daemon.install.plan import Options, Plan, SetupError, install_plan, uninstall_plan
from linerig.daemon.install.render import RenderError

SYSTEMD_RUNNING = Path("/run/systemd/system")
"""There when systemd is the init system (what sd_booted checks)."""
HIDDEN_FROM_SERVICE = ("/home", "/root", "/tmp", "/var/tmp", "/run/user")
"""Folders the unit's ProtectHome and PrivateTmp hide from the service: linerig must not be installed there."""


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="linerig-setup",
        description="Set up linerigd as a service on this machine (run as root): the service user and groups, the "
                    "udev rule for the ports found, the unit, /etc/linerig/rig.toml, then start it and check it. "
                    "Running it again changes nothing unless something is different.")
    p.add_argument("--dry-run", action="store_true", help="print every change (files as diffs), change nothing")
    p.add_argument("--root", type=Path, default=None, metavar="DIR",
                   help="set up a copy of the system under DIR instead of / (commands are printed, not run)")
    p.add_argument("--operator", action="append", default=[], metavar="USER",
                   help="let USER control the rig (group linerig); repeat for each operator")
    p.add_argument("--probe", default=None, metavar="NAME",
                   help="the probe in use: a profile NAME.toml in /etc/linerig/probes (default lab-needle)")
    p.add_argument("--frontend", default=None, metavar="PORT",
                   help="the front end's /dev/serial/by-id/ name, when it cannot be found by asking each port")
    p.add_argument("--supply", default=None, metavar="PORT",
                   help="the SCPI supply's /dev/serial/by-id/ name, likewise")
    p.add_argument("--uninstall", action="store_true",
                   help="stop the service and remove what linerig-setup installed; the measurements and "
                        "rig.toml stay")
    return p


def _bin_dir(live: bool) -> Path:
    """The folder of this installation's commands, which the unit runs."""
    here = Path(sysconfig.get_path("scripts"))
    if not (here / "linerigd").is_file():
        raise SetupError(f"no linerigd beside this linerig-setup in {here}: install linerig into a virtual "
                         "environment with pip (systemd/README.md), then run that environment's linerig-setup")
    if " " in str(here):
        raise SetupError(f"{here}: the unit cannot run commands from a folder with a space in its name")
    hidden = next((h for h in HIDDEN_FROM_SERVICE if here.is_relative_to(h)), None)
    if live and hidden:
        raise SetupError(f"linerig is installed in {here.parent}, under {hidden}, which the service cannot see "
                         "(ProtectHome, PrivateTmp): install it in /opt/linerig (systemd/README.md)")
    return here


def _print_plan(plan: Plan, host: Host, dry: bool, uninstall: bool) -> None:
    for line in plan.found.lines() if not uninstall else []:
        print(f"  {line}")
    if not plan.changes:
        print("nothing to change: " + ("nothing of linerig-setup's is installed here" if uninstall
                                      else "this rig is already set up as asked"))
    else:
        print("changes to make (none made: --dry-run):" if dry else "changes:")
    for change in plan.changes:
        printed = isinstance(change, RunCommand) and not host.live
        print(f"  {change.summary()}" + ("  [printed, not run: --root]" if printed else ""))
        if dry and isinstance(change, WriteFile):
            for line in change.detail():
                print(f"      {line}")
    for note in plan.notes:
        print(f"note: {note}")


def _apply(plan: Plan, host: Host) -> None:
    for change in plan.changes:
        change.apply(host)


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    if args.uninstall and (args.operator or args.probe or args.frontend or args.supply):
        print("linerig-setup: --uninstall takes only --root and --dry-run", file=sys.stderr)
        return 2
    if args.root is not None and not args.root.is_dir():
        print(f"linerig-setup: --root {args.root}: no such folder", file=sys.stderr)
        return 2
    host: Host = ThrowawayRoot(args.root.resolve()) if args.root is not None else Host()
    if host.live and not args.dry_run and os.geteuid() != 0:
        print("linerig-setup: changing the system needs root: run it with sudo (or try --dry-run, or --root DIR)",
              file=sys.stderr)
        return 2
    if host.live and not args.dry_run and not SYSTEMD_RUNNING.is_dir():
        print(f"linerig-setup: this machine does not run systemd ({SYSTEMD_RUNNING} is missing), which the service "
              "needs; --root DIR writes the files into a folder instead", file=sys.stderr)
        return 2
    where = "this machine" if host.live else f"the throwaway root {host.root}"
    try:
        if args.uninstall:
            print(f"linerig-setup: removing linerigd from {where}")
            plan = uninstall_plan(host)
        else:
            print(f"linerig-setup: setting up linerigd on {where}")
            opts = Options(bin_dir=_bin_dir(host.live), operators=tuple(args.operator), probe=args.probe,
                           frontend=args.frontend, supply=args.supply)
            print("ports:")
            plan = install_plan(host, opts)
    except (SetupError, RenderError) as exc:
        print(f"linerig-setup: {exc}", file=sys.stderr)
        return 2
    _print_plan(plan, host, args.dry_run, args.uninstall)
    if args.dry_run:
        return 0
    try:
        _apply(plan, host)
    except (CommandFailed, OSError) as exc:
        print(f"linerig-setup: stopped: {exc}", file=sys.stderr)
        return 1
    if args.uninstall:
        print(f"done: linerigd is removed; {DATABASE} and {CONFIG} are where they were")
        return 0
    ok, lines = selfcheck.report(host, plan)
    print("self-check:")
    for line in lines:
        print(f"  {line}")
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
