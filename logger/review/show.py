"""Printing review text: Markdown tables drawn as aligned tables on a terminal, left as Markdown elsewhere.

The review modules write Markdown (it reads well in a report and in a file); on a terminal the pipe tables of
a wide summary would wrap into a jumble, so they are drawn with rich's own table, fitted to the width.
"""

from __future__ import annotations

import sys

from rich import box
from rich.console import Console
from rich.table import Table


def show(text: str) -> None:
    """Print ``text``: as it is when stdout is not a terminal, with its tables drawn when it is."""
    if not sys.stdout.isatty():
        print(text)
        return
    console = Console(highlight=False)
    block: list[str] = []
    for line in [*text.splitlines(), ""]:
        if line.startswith("|"):
            block.append(line)
            continue
        if block:
            console.print(_table(block))
            block = []
        console.print(line, markup=False)


def _table(lines: list[str]) -> Table:
    """A pipe table (header, rule, rows) as a rich table."""
    rows = [[cell.strip() for cell in line.strip().strip("|").split("|")] for line in lines]
    header, body = rows[0], [r for r in rows[1:] if not all(set(c) <= {"-", ":"} for c in r)]
    table = Table(box=box.SIMPLE_HEAD, pad_edge=False, show_edge=False)
    for name in header:
        table.add_column(name, overflow="fold")
    for row in body:
        table.add_row(*row[: len(header)])
    return table
