"""Table writers and readers by format: the one place that tells CSV and
Parquet apart (table_csv.py, table_parquet.py; pyarrow is imported only when
Parquet is asked for). The declarations they share are in table_io.py.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from slipless.errors import InputError
from slipless.io.table_io import Background, Spec, TableWriter, check_format


def open_table(folder: Path, spec: Spec, fmt: str,
               part_metadata: Callable[[tuple[Any, ...]], Mapping[str, str]] | None = None,
               background: Background | None = None) -> TableWriter:
    """A writer of `spec` in `folder`: NAME.csv, NAME.parquet, or the dataset
    folder NAME/ when the spec is partitioned and the format is Parquet. With
    `background`, file writes run on its thread (close it after the writers)."""
    check_format(fmt)
    if fmt == "csv":
        from slipless.io.table_csv import CsvWriter

        return CsvWriter(folder / f"{spec.name}.csv", spec, background)
    from slipless.io.table_parquet import ParquetWriter

    if spec.partition:
        return ParquetWriter(folder / spec.name, spec, part_metadata, background)
    return ParquetWriter(folder / f"{spec.name}.parquet", spec, part_metadata, background)



# ---- readers ----------------------------------------------------------------------------
def find_table(folder: Path, name: str) -> Path | None:
    """NAME.csv, the dataset folder NAME/ or NAME.parquet inside `folder`."""
    for p in (folder / f"{name}.csv", folder / name, folder / f"{name}.parquet"):
        if p.is_file() or (p.is_dir() and p.suffix == "" and any(p.rglob("*.parquet"))):
            return p
    return None


def column_names(path: Path) -> list[str]:
    """The columns a table holds (a dataset's partition keys included)."""
    try:
        if path.suffix == ".csv":
            import csv

            with path.open(newline="", encoding="utf-8") as f:
                return next(csv.reader(f), [])
        from slipless.io.table_parquet import parquet_columns

        return parquet_columns(path)
    except (OSError, ValueError) as exc:
        raise InputError(f"{path}: cannot read ({exc})") from exc


def read_columns(path: Path, columns: Sequence[str],
                 kinds: Mapping[str, str] | None = None) -> dict[str, np.ndarray]:
    """Named columns of a table (CSV file, Parquet file or dataset folder).

    Floats come back as float64 (NaN where missing), ints as int64 (or, with
    missing values, an object array of ints and None), the rest as object
    arrays. CSV cells are typed by `kinds` (column -> kind); columns not named
    there stay text (an empty cell is "")."""
    try:
        if path.suffix == ".csv":
            from slipless.io.table_csv import read_csv

            return read_csv(path, columns, kinds or {})
        from slipless.io.table_parquet import read_parquet

        return read_parquet(path, columns)
    except (OSError, ValueError, KeyError) as exc:
        raise InputError(f"{path}: cannot read ({exc})") from exc
