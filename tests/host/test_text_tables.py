"""Terminal tables at 80 columns: every number whole (never cut to "…"), a wide
table printed in parts that each repeat the row names."""

from __future__ import annotations

import io

from rich.console import Console

from slipless.cli.text_tables import column, print_table, table


def _render(width: int, n_cols: int) -> str:
    t = table("a wide table of numbers")
    column(t, "row", left=True)
    for k in range(n_cols):
        column(t, f"column {k}")
    for r in range(3):
        t.add_row(f"row {r}", *(f"{123456789.125 * (r + 1) * (k + 1):,.3f}" for k in range(n_cols)))
    buf = io.StringIO()
    print_table(Console(file=buf, width=width, color_system=None), t)
    return buf.getvalue()


def test_every_number_whole_at_80_columns() -> None:
    out = _render(80, 9)
    assert "…" not in out and max(len(line) for line in out.splitlines()) <= 80
    for r in range(3):
        for k in range(9):
            assert f"{123456789.125 * (r + 1) * (k + 1):,.3f}" in out
    assert out.count("row 2") >= 3  # each part repeats the row names
    assert "(1/" in out


def test_a_table_that_fits_is_printed_whole() -> None:
    out = _render(200, 3)
    assert "(1/" not in out and "a wide table of numbers" in out.splitlines()[0]
