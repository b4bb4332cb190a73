"""Table writers for `slipless align`: explicit column types and empty cells.

The decode tables never have missing cells; these do (a grid time with no
data, a row with no laptop time), so CSV cells are left empty and Parquet
cells are null. Float NaN and None both mean "empty".
"""

from __future__ import annotations

import csv
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from slipless.errors import InputError

CHUNK_ROWS = 50_000  # rows per write: bounds the Python lists CSV writing needs


def _cells(col: Any) -> list[Any]:
    if isinstance(col, np.ndarray):
        if col.dtype.kind == "f" and np.isnan(col).any():
            return [None if v != v else v for v in col.tolist()]
        return list(col.tolist())
    return list(col)


class Table:
    """Write one table; columns are (name, type) with type "int", "float" or "str"."""

    def __init__(self, path: Path, fmt: str, columns: Sequence[tuple[str, str]]) -> None:
        self.path = path
        self._fmt = fmt
        self._types = [t for _, t in columns]
        names = [n for n, _ in columns]
        if fmt == "csv":
            self._file = path.open("w", newline="", encoding="utf-8")
            self._csv = csv.writer(self._file)
            self._csv.writerow(names)
            return
        try:
            import pyarrow as pa
            import pyarrow.parquet as pq
        except ImportError as exc:
            raise InputError("--format parquet needs pyarrow: pip install 'slipless[parquet]'") from exc
        kinds = {"int": pa.int64(), "float": pa.float64(), "str": pa.string()}
        self._pa = pa
        self._schema = pa.schema([(n, kinds[t]) for n, t in columns])
        self._pq = pq.ParquetWriter(path, self._schema)

    def write(self, cols: Sequence[Any]) -> None:
        n = len(cols[0]) if cols else 0
        for lo in range(0, max(n, 1), CHUNK_ROWS):
            part = [c[lo : lo + CHUNK_ROWS] for c in cols]
            if self._fmt == "csv":
                self._csv.writerows(zip(*(_cells(c) for c in part)))
            else:
                self._write_arrow(part)

    def _write_arrow(self, cols: Sequence[Any]) -> None:
        pa = self._pa
        arrays = []
        for c, f in zip(cols, self._schema):
            if isinstance(c, np.ndarray) and c.dtype.kind == "f":
                arrays.append(pa.array(c, type=f.type, mask=np.isnan(c)))
            elif isinstance(c, np.ndarray):
                arrays.append(pa.array(c, type=f.type))
            else:
                arrays.append(pa.array(list(c), type=f.type))
        self._pq.write_table(pa.Table.from_arrays(arrays, schema=self._schema))

    def close(self) -> None:
        if self._fmt == "csv":
            self._file.close()
        else:
            self._pq.close()
