"""Terminal tables that keep their numbers whole on a narrow terminal.

A light frame (a rule under the header, no side borders), cells never wrapped
or cut, and a table wider than the terminal printed in parts, each part
repeating the first column (the row's name), so at 80 columns every number
is still there, whole.
"""

from __future__ import annotations

from rich import box
from rich.console import Console
from rich.table import Table

GAP = 1  # spaces each side of a cell


def table(title: str) -> Table:
    return Table(title=title, title_justify="left", box=box.SIMPLE_HEAD, pad_edge=False,
                 padding=(0, GAP), show_edge=False)


def column(t: Table, name: str, left: bool = False) -> None:
    t.add_column(name, justify="left" if left else "right", no_wrap=True)


def _part(t: Table, title: str, cols: list[int]) -> Table:
    sub = table(title)
    for i in cols:
        c = t.columns[i]
        sub.add_column(c.header, justify=c.justify, no_wrap=True)
    for r in range(t.row_count):
        sub.add_row(*(t.columns[i]._cells[r] for i in cols))
    return sub


def print_table(console: Console, t: Table) -> None:
    """Print t whole, or in parts of columns that fit the console's width (as
    rich measures them), each part led by the first column."""
    wide = console.options.update_width(1 << 16)  # measure unclamped: the natural width

    def fits(x: Table) -> bool:
        return console.measure(x, options=wide).maximum <= console.width

    if fits(t) or len(t.columns) < 3:
        t.min_width = min(console.width, len(str(t.title or "")))  # the title on one line
        console.print(t)
        return
    parts: list[list[int]] = []
    for i in range(1, len(t.columns)):
        if parts and fits(_part(t, "", [0, *parts[-1], i])):
            parts[-1].append(i)
        else:
            parts.append([i])
    for k, part in enumerate(parts):
        title = f"{t.title} ({k + 1}/{len(parts)})" if t.title else ""
        sub = _part(t, title, [0, *part])
        sub.min_width = min(console.width, len(title))  # the title on one line
        console.print(sub)
