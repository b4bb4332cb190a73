"""Parquet for table_io: one file per table, or a hive-partitioned dataset.

Batches are buffered per part (a partition, and within it a file per value of
the spec's split_by column) and written as large row groups; encoding runs on
the Background lanes. Files are written without the Arrow schema blob, so any
reader sees plain Parquet types; the spec's kinds and units, and what the
caller adds per part, go in the key-value metadata.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from slipless.errors import InputError
from slipless.io.table_io import (
    FLOAT,
    INT,
    STR,
    UTC,
    Background,
    Col,
    Column,
    Const,
    Spec,
    TableWriter,
    plain_values,
    run_now,
)

ROW_GROUP_ROWS = 1 << 18  # Parquet rows buffered per part before a row group is written
MAX_BUFFERED_ROWS = 4 * ROW_GROUP_ROWS  # all parts of one table together: memory bound
MAX_OPEN_PARTS = 64  # Parquet files open per table; the least recent is closed beyond it
PARQUET_HINT = "--format parquet needs pyarrow: pip install 'slipless[parquet]'"
def _pyarrow() -> tuple[Any, Any]:
    try:
        import pyarrow as pa
        import pyarrow.parquet as pq
    except ImportError as exc:
        raise InputError(PARQUET_HINT) from exc
    return pa, pq


def arrow_type(pa: Any, c: Col) -> Any:
    kind = c.kind
    if kind == FLOAT:
        return pa.float64()
    if kind == UTC:
        return pa.timestamp("ns", tz="UTC")
    if kind == STR:
        return pa.dictionary(pa.int32(), pa.string()) if c.repeats else pa.string()
    return pa.int64()


def _arrow(pa: Any, col: Column, n: int, c: Col) -> Any:
    typ, kind = arrow_type(pa, c), c.kind
    if isinstance(col, Const) and col.value is None:
        return pa.nulls(n, typ)
    if kind == STR:
        if isinstance(col, Const):
            text = None if col.value is None else str(col.value)
            arr = pa.DictionaryArray.from_arrays(pa.array(np.zeros(n, np.int32)),
                                                 pa.array([text], pa.string()))
            return arr if c.repeats else arr.cast(pa.string())
        vals = plain_values(col, n, kind)
        if isinstance(vals, np.ndarray):
            vals = vals.tolist()
        arr = pa.array([None if v is None else str(v) for v in vals], pa.string())
        return arr.dictionary_encode() if c.repeats else arr
    vals = plain_values(col, n, kind)
    if isinstance(vals, np.ndarray):
        if kind == FLOAT:
            vals = vals.astype(np.float64, copy=False)
            nan = np.isnan(vals)
            return pa.array(vals, type=typ, mask=nan if nan.any() else None)
        if vals.dtype.kind == "f":  # int column from floats: NaN is missing
            nan = np.isnan(vals)
            return pa.array(np.where(nan, 0, vals).astype(np.int64), type=typ,
                            mask=nan if nan.any() else None)
        return pa.array(vals.astype(np.int64, copy=False), type=typ)
    if kind == FLOAT:
        return pa.array([None if v is None or v != v else float(v) for v in vals], type=typ)
    return pa.array(vals, type=typ)


class _Part:
    __slots__ = ("writer", "path", "run", "buffer", "rows", "used")

    def __init__(self, writer: Any, path: Path, run: Callable[..., None]) -> None:
        self.writer, self.path, self.run = writer, path, run
        self.buffer: list[Any] = []
        self.rows = 0
        self.used = 0


class ParquetWriter(TableWriter):
    """Parquet file or hive-partitioned dataset with large row groups.

    Batches are buffered per part until ROW_GROUP_ROWS, then written as one
    row group. Written without the Arrow schema blob, so readers see plain
    types (string, not dictionary); units and kinds go in key-value metadata.
    """

    def __init__(self, path: Path, spec: Spec,
                 part_metadata: Callable[[tuple[Any, ...]], Mapping[str, str]] | None = None,
                 background: Background | None = None) -> None:
        super().__init__(spec)
        self._background = background
        self._pa, self._pq = _pyarrow()
        self.path = path
        self._meta = part_metadata
        self._parts: dict[tuple[Any, ...], _Part] = {}
        self._files: dict[tuple[Any, ...], int] = {}  # files started per partition
        self._buffered = 0
        self._clock = 0
        self.written: list[Path] = []
        self._data_cols = [c for c in spec.columns if c.name not in spec.partition]
        self._schema = self._pa.schema([(c.name, arrow_type(self._pa, c)) for c in self._data_cols])
        if spec.partition:
            path.mkdir(parents=True, exist_ok=True)
            _clear_dataset(path, spec.partition)

    def _write(self, cols: Sequence[Column], n: int) -> None:
        by_name = dict(zip(self.spec.names, cols))
        keys: list[tuple[tuple[Any, ...], np.ndarray | None]]
        split = by_name.get(self.spec.split_by)
        shard = (split.value,) if isinstance(split, Const) else ()  # its own file and lane
        if all(isinstance(by_name[p], Const) for p in self.spec.partition):
            keys = [(tuple(by_name[p].value for p in self.spec.partition) + shard, None)]
        else:
            parts = np.column_stack([np.asarray(plain_values(by_name[p], n, INT), dtype=np.int64)
                                     for p in self.spec.partition])
            if (parts == parts[0]).all():  # the usual case: one board and run per batch
                keys = [(tuple(int(v) for v in parts[0]) + shard, None)]
            else:
                uniq, inverse = np.unique(parts, axis=0, return_inverse=True)
                keys = [(tuple(int(v) for v in u) + shard,
                         np.flatnonzero(inverse.reshape(-1) == i)) for i, u in enumerate(uniq)]
        pa = self._pa
        arrays = [_arrow(pa, by_name[c.name], n, c) for c in self._data_cols]
        for key, rows in keys:
            batch = arrays if rows is None else [a.take(pa.array(rows)) for a in arrays]
            self._add(key, batch)

    def _add(self, key: tuple[Any, ...], arrays: list[Any]) -> None:
        part = self._parts.get(key)
        if part is None:
            part = self._open_part(key)
        self._clock += 1
        part.used = self._clock
        batch = self._pa.RecordBatch.from_arrays(arrays, schema=self._schema)
        part.buffer.append(batch)
        part.rows += batch.num_rows
        self._buffered += batch.num_rows
        if part.rows >= ROW_GROUP_ROWS:
            self._flush(part)
        while self._buffered > MAX_BUFFERED_ROWS:
            self._flush(max(self._parts.values(), key=lambda p: p.rows))

    def _open_part(self, key: tuple[Any, ...]) -> _Part:
        if len(self._parts) >= MAX_OPEN_PARTS:
            self._close_part(min(self._parts, key=lambda k: self._parts[k].used))
        if self.spec.partition and key:
            where = key[: len(self.spec.partition)]
            folder = self.path.joinpath(*(f"{p}={v}" for p, v in zip(self.spec.partition, where)))
            folder.mkdir(parents=True, exist_ok=True)
            number = self._files.get(where, 0)
            path = folder / f"part-{number}.parquet"
            self._files[where] = number + 1
        elif self.spec.partition:  # no rows at all: one empty file at the top
            path = self.path / "part-0.parquet"
        else:
            path = self.path
        pa, schema = self._pa, self._schema
        strs = [f.name for f in schema if not (pa.types.is_integer(f.type) or
                                               pa.types.is_floating(f.type) or
                                               pa.types.is_timestamp(f.type))]
        ints = [f.name for f in schema if pa.types.is_integer(f.type)]
        writer = self._pq.ParquetWriter(
            path, schema, store_schema=False, compression="snappy",
            use_dictionary=strs or False,  # few distinct texts; numbers are plain or delta
            write_statistics=[f.name for f in schema if f.name not in strs] or False,
            column_encoding={n: "DELTA_BINARY_PACKED" for n in ints} or None)
        run = self._background.lane() if self._background is not None else run_now
        part = self._parts[key] = _Part(writer, path, run)
        self.written.append(path)
        return part

    def _flush(self, part: _Part) -> None:
        if not part.buffer:
            return
        table = self._pa.Table.from_batches(part.buffer, schema=self._schema)
        part.run(part.writer.write_table, table, max(table.num_rows, 1))
        self._buffered -= part.rows
        part.buffer, part.rows = [], 0

    def _close_part(self, key: tuple[Any, ...]) -> None:
        part = self._parts.pop(key)
        self._flush(part)
        meta = dict(self.spec.metadata())
        if self._meta is not None:
            meta.update(self._meta(key))
        part.run(part.writer.add_key_value_metadata, meta)
        part.run(part.writer.close)

    def close(self) -> None:
        for key in list(self._parts):
            self._close_part(key)
        if not self.written:  # an empty table is still a file (its columns and metadata)
            self._open_part(())
            self._close_part(())


def _clear_dataset(folder: Path, partition: Sequence[str]) -> None:
    """Remove the part files an earlier write left (as a CSV file is overwritten);
    only files of our own layout are touched."""
    pattern = "/".join([f"{p}=*" for p in partition] + ["part-*.parquet"])
    for old in [*folder.glob(pattern), *folder.glob("part-*.parquet")]:
        old.unlink()
    for depth in range(len(partition), 0, -1):
        for d in folder.glob("/".join(f"{p}=*" for p in partition[:depth])):
            if d.is_dir() and not any(d.iterdir()):
                d.rmdir()



def read_arrow(path: Path, columns: Sequence[str] | None = None) -> Any:
    """A Parquet file or dataset folder as one pyarrow Table (partitions typed int64);
    of `columns`, those the table has."""
    pa, _ = _pyarrow()
    import pyarrow.dataset as ds

    if path.is_dir():
        names = sorted({part.split("=", 1)[0] for f in path.rglob("*.parquet")
                        for part in f.relative_to(path).parts[:-1] if "=" in part})
        partitioning = ds.partitioning(pa.schema([(n, pa.int64()) for n in names]),
                                       flavor="hive") if names else None
        files = sorted(str(f) for f in path.rglob("*.parquet"))  # nothing else in the folder
        data = ds.dataset(files, format="parquet", partitioning=partitioning,
                          partition_base_dir=str(path))
        names = data.schema.names
        return data.to_table(columns=None if columns is None else
                             [c for c in columns if c in names])  # the others: reported missing
    import pyarrow.parquet as pq

    names = pq.read_schema(path).names
    return pq.read_table(path, columns=None if columns is None else
                         [c for c in columns if c in names])


def read_parquet(path: Path, columns: Sequence[str]) -> dict[str, np.ndarray]:
    t = read_arrow(path, columns)
    missing = [c for c in columns if c not in t.column_names]
    if missing and t.num_rows:
        raise InputError(f"{path}: not a slipless table (no column {missing[0]!r})")
    out: dict[str, np.ndarray] = {c: np.zeros(0, np.int64) for c in missing}  # empty: no folders
    for c in columns:
        if c in out:
            continue
        col = t.column(c)
        typ = col.type
        if getattr(typ, "value_type", None) is not None:  # dictionary
            col = col.cast(typ.value_type)
            typ = col.type
        if str(typ).startswith(("int", "uint")) and col.null_count == 0:
            out[c] = col.to_numpy().astype(np.int64)
        elif str(typ).startswith(("double", "float")):
            out[c] = col.cast("float64").fill_null(float("nan")).to_numpy()
        else:
            out[c] = np.asarray(col.to_pylist(), dtype=object)
    return out
