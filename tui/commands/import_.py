"""``linerig import FILE -o RUN.csv [--map MAP.toml]``: a data logger's export as a run CSV.

Every choice the importer makes is printed, with the map key that would change it, and written into the run
CSV's header comments. Exit codes: 0 written; 2 bad or ambiguous input (the message names the line and column,
or the map's key and line) or an output that would overwrite a file.
"""

from __future__ import annotations

import argparse
import io
import os
import sys
import tempfile
from pathlib import Path

from linerig.daemon.logger_import import LoggerImportError, LoggerMap, import_file, read_map
from linerig.daemon.runcsv import RunCsvError, read_run_csv, write_run_csv

CMD = "import"
EXIT_BAD_INPUT = 2


def add_parser(subparsers: argparse._SubParsersAction) -> None:  # type: ignore[type-arg]
    p = subparsers.add_parser(CMD, help="turn a data logger's export into a run CSV",
                              description="Read a delimited text export from a data logger (comma, semicolon or "
                                          "tab; decimal point or comma; a units line; timestamps or elapsed time; "
                                          "heater power as W/m, W, or volts and amps) and write a run CSV for "
                                          "`linerig reduce`. What the file cannot say goes in a small TOML map "
                                          "(docs/logger-import.md).")
    p.add_argument("file", metavar="FILE", type=Path, help="the logger's export")
    p.add_argument("-o", "--output", metavar="RUN.csv", type=Path, required=True, help="the run CSV to write")
    p.add_argument("--map", metavar="MAP.toml", type=Path, help="columns, units and heater length the file lacks")
    p.add_argument("--force", action="store_true", help="overwrite RUN.csv if it exists")
    p.set_defaults(func=run)


def _fail(msg: str) -> int:
    print(f"linerig {CMD}: error: {msg}", file=sys.stderr)
    return EXIT_BAD_INPUT


def run(args: argparse.Namespace) -> int:
    out: Path = args.output
    if out.exists() and out.resolve() == args.file.resolve():
        return _fail(f"-o {out} is the logger file itself; write the run CSV elsewhere")
    if out.exists() and not args.force:
        return _fail(f"{out} exists; choose another name or give --force to overwrite it")
    try:
        imported = import_file(args.file, read_map(args.map) if args.map else LoggerMap())
    except LoggerImportError as e:
        return _fail(str(e))
    buf = io.StringIO()
    write_run_csv(imported.data, buf, imported.comments())
    text = buf.getvalue()
    try:
        read_run_csv(text)  # what reduce will read: a run CSV that would not read back is never written
    except RunCsvError as e:
        return _fail(f"{args.file}: the run would not make a usable run CSV: {e}")
    try:
        _write_whole(out, text)
    except OSError as e:
        return _fail(f"cannot write {out}: {e.strerror or e}")
    for c in imported.choices:
        print(f"  {c.text()}")
    d = imported.data
    n_base = int((d.time_s < 0).sum())
    print(f"wrote {out}: {d.time_s.size} rows ({n_base} before heating, {d.time_s.size - n_base} from t = 0), "
          f"sensors {', '.join(d.temps_C)}")
    return 0


def _write_whole(path: Path, text: str) -> None:
    """All or nothing: a half-written run CSV never takes the name."""
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent or Path("."))
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as f:
            f.write(text)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
