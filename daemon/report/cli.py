"""Small pieces shared by the offline subcommands (report, export, calibrate, profile, dryout, cylinder, cycles)."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from linerig.daemon.paths import default_db_path

from .html import render_html
from .model import Report
from .pdf import render_pdf

EXIT_BAD_INPUT = 2


def add_db_option(p: argparse.ArgumentParser) -> None:
    p.add_argument("--db", type=Path, default=None, metavar="PATH",
                   help="the linerig database (default: the daemon's, $LINERIG_DB or the data directory)")


def db_path(args: argparse.Namespace) -> Path:
    return args.db if args.db is not None else default_db_path()


def fail(cmd: str, msg: str) -> int:
    print(f"linerig {cmd}: error: {msg}", file=sys.stderr)
    return EXIT_BAD_INPUT


def write_report(rep: Report, path: Path) -> str:
    """Write HTML or PDF by the file's suffix; returns what was written."""
    suffix = path.suffix.lower()
    if suffix == ".pdf":
        render_pdf(rep, path)
        return "PDF"
    if suffix in (".html", ".htm"):
        path.write_text(render_html(rep), encoding="utf-8")
        return "HTML"
    raise ValueError(f"{path}: the report name must end in .html or .pdf")


def write_text(text: str, path: Path | None) -> None:
    if path is None or str(path) == "-":
        sys.stdout.write(text)
    else:
        path.write_text(text, encoding="utf-8")
