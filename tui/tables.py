"""Tables for the terminal through rich, as ``linerig reduce`` prints them: headers, aligned numbers, no cut cells."""

from __future__ import annotations

import sys
from collections.abc import Iterable, Sequence
from typing import TextIO


def print_table(title: str, headers: Sequence[str], rows: Iterable[Sequence[str]], *, right: Sequence[int] = (),
                file: TextIO | None = None) -> None:
    """A titled table; columns in ``right`` (numbers) align right. A pipe or a file gets a wide fixed width so a
    cell is never cut to "…"."""
    from rich.console import Console
    from rich.table import Table

    out = file or sys.stdout
    table = Table()
    for i, h in enumerate(headers):
        table.add_column(h, justify="right" if i in right else "left", overflow="fold")
    for r in rows:
        table.add_row(*r)
    console = Console(file=out) if out.isatty() else Console(file=out, width=200, no_color=True)
    if title:
        console.print(title, highlight=False, markup=False)
    console.print(table)
