"""Table files for `slipless align`, written through table_io.

These tables have missing cells (a grid time with no data, a row with no
laptop time): CSV cells are left empty and Parquet cells are null. Float NaN
and None both mean "empty". A column of laptop UTC in ns may get a twin of
kind utc (ISO 8601 text in CSV, timestamp[ns, UTC] in Parquet).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from slipless.io.table_files import open_table
from slipless.io.table_io import UTC, spec


class Table:
    """Write one table at `path`; columns are (name, kind) with kind int, float, str or utc.

    utc_twins maps a column of UTC nanoseconds to the name of its timestamp twin,
    written right after it with the same values."""

    def __init__(self, path: Path, fmt: str, columns: Sequence[tuple[str, str]],
                 utc_twins: Mapping[str, str] | None = None) -> None:
        self.path = path
        self._twins = [(i, utc_twins[n]) for i, (n, _) in enumerate(columns)
                       if utc_twins and n in utc_twins]
        cols = list(columns)
        for i, twin in reversed(self._twins):
            cols.insert(i + 1, (twin, UTC))
        self._writer = open_table(path.parent, spec(path.stem, cols), fmt)

    def write(self, cols: Sequence[Any]) -> None:
        out = list(cols)
        for i, _ in reversed(self._twins):
            out.insert(i + 1, _utc_values(out[i]))
        self._writer.write(out)

    def close(self) -> None:
        self._writer.close()


def _utc_values(col: Any) -> Any:
    if isinstance(col, np.ndarray) and col.dtype.kind == "f":
        return [None if v != v else int(v) for v in col.tolist()]
    return col
