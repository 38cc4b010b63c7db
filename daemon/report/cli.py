"""Small pieces shared by the offline subcommands (report, export, calibrate, profile, dryout, cylinder, cycles)."""

from __future__ import annotations

import argparse
import contextlib
import sys
from collections.abc import Iterator
from pathlib import Path
from typing import TYPE_CHECKING

from linerig.daemon.paths import default_db_path

from .html import render_html
from .model import Report
from .pdf import render_pdf

if TYPE_CHECKING:
    from .sources import RunSource

EXIT_BAD_INPUT = 2


def add_db_option(p: argparse.ArgumentParser) -> None:
    p.add_argument("--db", type=Path, default=None, metavar="PATH",
                   help="the linerig database (default: the daemon's, $LINERIG_DB or the data directory)")


def db_path(args: argparse.Namespace) -> Path:
    return args.db if args.db is not None else default_db_path()


def add_central_option(p: argparse.ArgumentParser) -> None:
    p.add_argument("--central", metavar="URL", help="read every rig's runs from the central PostgreSQL database "
                                                     "(a libpq connection string) instead of --db")


@contextlib.contextmanager
def run_source(args: argparse.Namespace) -> Iterator[RunSource]:
    """The runs a site-wide command reads: --central URL (every rig) or --db PATH (this rig). Raises SourceError,
    or CentralError for the server (both carry a message that says what to do)."""
    from .sources import LocalRuns

    if getattr(args, "central", None) is None:
        yield LocalRuns(db_path(args))
        return
    if args.db is not None:
        from .sources import SourceError

        raise SourceError("give --db PATH (one rig) or --central URL (every rig), not both")
    from linerig.daemon.central.connect import connect, describe
    from linerig.daemon.central.read import CentralRuns

    with connect(args.central, application="linerig-read") as conn:
        yield CentralRuns(conn, describe(args.central))


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
