"""Parquet for table_io: one file per table, or a hive-partitioned dataset.

Batches are kept per part (a partition, and within it a folder per value of
the spec's split_by column) in the compact form they came in (frames' form,
codes), and every ROW_GROUP_ROWS rows become one row group: the columns are
made into Arrow arrays and encoded on the Background lanes, so the caller
does not wait for them. Files are written without the Arrow schema blob, so
any reader sees plain Parquet types; the spec's kinds and units, and what
the caller adds per part, go in the key-value metadata.
"""

from __future__ import annotations

import threading
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
    Coded,
    Col,
    Column,
    Const,
    PerFrame,
    Spec,
    Stepped,
    TableWriter,
    TickSeconds,
    frame_values,
    plain_values,
    repeat_frames,
    run_now,
    slice_batch,
    take_batch,
    ticks_of,
)

ROW_GROUP_ROWS = 1 << 18  # Parquet rows of a part gathered into one row group
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


class _Dictionaries:
    """A Coded text column's values as an Arrow dictionary (each distinct text
    once) and each code's place in it (-1: null), kept per key."""

    def __init__(self) -> None:
        self._kept: dict[Any, tuple[Any, np.ndarray]] = {}
        self._lock = threading.Lock()  # lanes share it

    def get(self, pa: Any, col: Coded) -> tuple[Any, np.ndarray]:
        with self._lock:
            got = self._kept.get(col.key) if col.key is not None else None
        if got is None:
            where: dict[str, int] = {}
            index = np.array([-1 if v is None else where.setdefault(str(v), len(where))
                              for v in np.asarray(col.values).tolist()], dtype=np.int32)
            got = (_strings(pa, list(where)), index)
            if col.key is not None:
                with self._lock:
                    if len(self._kept) >= _MAX_DICTIONARIES:
                        self._kept.pop(next(iter(self._kept)))
                    self._kept[col.key] = got
        return got


_MAX_DICTIONARIES = 16  # text tables kept per table (one per code space)


class _Scratch:
    """Arrays used again by every row group a lane writes: fresh memory costs a
    page fault a page, about as much as encoding it. A row group's batches fill
    one array per column, each batch its own rows of it (start(), then batch()
    before each batch's columns, which take() in the same order every time)."""

    def __init__(self) -> None:
        self._kept: dict[tuple[str, int], np.ndarray] = {}
        self._used: dict[str, int] = {}
        self._rows = self._at = 0
        self.nulls: dict[str, Any] = {}  # all-null Arrow arrays (immutable), by type

    def start(self, rows: int) -> None:
        self._rows, self._at = rows, 0

    def batch(self, at: int) -> None:
        self._used, self._at = {}, at

    def take(self, dtype: Any, n: int) -> np.ndarray:
        dt = np.dtype(dtype)
        i = self._used.get(dt.str, 0)
        self._used[dt.str] = i + 1
        need = max(self._rows, self._at + n)
        buf = self._kept.get((dt.str, i))
        if buf is None or buf.size < need:
            buf = self._kept[(dt.str, i)] = np.empty(need, dtype=dt)
        return buf[self._at : self._at + n]

    def zero_indices(self, pa: Any, n: int) -> Any:
        """n dictionary indices 0 (int32), sliced from one array never written."""
        got = self.nulls.get("zeros")
        if got is None or len(got) < n:
            got = self.nulls["zeros"] = _numbers(pa, pa.int32(),
                                                 np.zeros(max(n, ROW_GROUP_ROWS), np.int32))
        return got.slice(0, n)

    def null(self, pa: Any, n: int, typ: Any) -> Any:
        """n nulls of typ: a slice of one long array (slices share its memory)."""
        key = str(typ)
        got = self.nulls.get(key)
        if got is None or len(got) < n:
            if len(self.nulls) >= 8:
                self.nulls.clear()
            got = self.nulls[key] = pa.nulls(max(n, ROW_GROUP_ROWS), typ)
        return got.slice(0, n)


def _expanded(col: Stepped, made: dict[int, np.ndarray], scratch: _Scratch) -> np.ndarray:
    got = made.get(id(col))
    if got is None:
        got = made[id(col)] = col.expand(scratch.take(np.int64, int(col.counts.sum())))
    return got


def _text(pa: Any, col: Column, n: int, c: Col, dicts: _Dictionaries, scratch: _Scratch) -> Any:
    """A text column as Arrow: dictionary-encoded when its texts repeat."""
    typ = arrow_type(pa, c)
    if isinstance(col, Const):
        if col.value is None:
            return scratch.null(pa, n, typ)
        arr = pa.DictionaryArray.from_arrays(scratch.zero_indices(pa, n),
                                             _strings(pa, [str(col.value)]))
        return arr if c.repeats else arr.cast(pa.string())
    coded: Coded | None = None
    counts = None
    if isinstance(col, Coded):
        coded = col
    elif isinstance(col, PerFrame) and isinstance(col.values, Coded):
        coded, counts = col.values, col.counts
    if coded is not None:
        dictionary, index = dicts.get(pa, coded)
        codes = coded.codes
        if len(codes) and not (codes != codes[0]).any():  # one text throughout (a stream's name)
            at = int(index[codes[0]])
            if at >= 0:
                arr = pa.DictionaryArray.from_arrays(scratch.zero_indices(pa, n), dictionary[at:at + 1])
                return arr if c.repeats else arr.cast(pa.string())
        if counts is not None:
            idx = repeat_frames(np.take(index, coded.codes, mode="clip"), counts,
                               scratch.take(np.int32, n))
        else:
            idx = np.take(index, coded.codes, out=scratch.take(np.int32, n), mode="clip")
        missing = idx < 0
        if missing.any():
            np.maximum(idx, 0, out=idx)
        indices = _numbers(pa, pa.int32(), idx, missing)
        arr = pa.DictionaryArray.from_arrays(indices, dictionary)
        return arr if c.repeats else arr.cast(pa.string())
    vals = plain_values(col, n, STR)
    if isinstance(vals, np.ndarray):
        vals = vals.tolist()
    arr = _strings(pa, [None if v is None else str(v) for v in vals])
    return arr.dictionary_encode() if c.repeats else arr


# Arrays are made from their buffers, not by pa.array: that checks and copies every
# value (a millisecond a row group a column) and imports pandas when it is installed
# (0.3 s a process).
def _validity(pa: Any, missing: np.ndarray | None) -> Any:
    """Arrow's validity bitmap (bit set: a value) for a mask of missing values."""
    if missing is None or not missing.any():
        return None
    return pa.py_buffer(np.packbits(~missing, bitorder="little"))


def _numbers(pa: Any, typ: Any, vals: np.ndarray, missing: np.ndarray | None = None) -> Any:
    """A fixed-width Arrow array over the values' own memory (missing: nulls)."""
    dtype = {pa.int32(): np.int32, pa.float64(): np.float64}.get(typ, np.int64)
    vals = np.ascontiguousarray(vals, dtype=dtype)
    return pa.Array.from_buffers(typ, len(vals), [_validity(pa, missing), pa.py_buffer(vals)])


def _strings(pa: Any, texts: Sequence[str | None]) -> Any:
    """A string array of texts (None: null)."""
    data = [b"" if t is None else t.encode("utf-8", "replace") for t in texts]
    offsets = np.zeros(len(data) + 1, dtype=np.int64)
    np.cumsum([len(d) for d in data], out=offsets[1:])
    if offsets[-1] >= 2**31:  # a row group's texts beyond 32-bit offsets (never ours)
        raise ValueError("text column too large for one row group")
    missing = np.fromiter((t is None for t in texts), bool, len(texts))
    return pa.Array.from_buffers(pa.string(), len(data), [
        _validity(pa, missing), pa.py_buffer(offsets.astype(np.int32)), pa.py_buffer(b"".join(data))])


def _arrow(pa: Any, col: Column, n: int, c: Col, dicts: _Dictionaries,
           ticks: dict[int, np.ndarray], scratch: _Scratch) -> Any:
    """A column as an Arrow array of its kind's type, numbers in the lane's
    scratch arrays. ticks: Stepped columns already made (a batch's ticks and its
    seconds share one)."""
    typ, kind = arrow_type(pa, c), c.kind
    if isinstance(col, Const) and col.value is None:
        return scratch.null(pa, n, typ)
    if kind == STR:
        return _text(pa, col, n, c, dicts, scratch)
    whole = False  # numbers known to hold no NaN (no missing values to look for)
    if isinstance(col, Stepped):
        vals: Any = _expanded(col, ticks, scratch)
    elif isinstance(col, TickSeconds) and col.tick_hz:
        tick = col.tick
        made = _expanded(tick, ticks, scratch) if isinstance(tick, Stepped) else ticks_of(tick)
        vals = np.divide(made, col.tick_hz, out=scratch.take(np.float64, n))
        whole = True
    elif isinstance(col, PerFrame):
        per = frame_values(col.values)
        vals = repeat_frames(per, col.counts, None if per.dtype.kind == "O" else
                             scratch.take(per.dtype, n))
    elif isinstance(col, Coded) and np.asarray(col.values).dtype.kind in "iuf":
        table = np.asarray(col.values)
        # codes are in range by construction: "clip" skips np.take's bounds check,
        # which costs ten times the gather itself for int32 codes
        vals = np.take(table, col.codes, out=scratch.take(table.dtype, n), mode="clip")
        whole = table.dtype.kind != "f" or not np.isnan(table).any()
    else:
        vals = plain_values(col, n, kind)
    if isinstance(vals, np.ndarray) and vals.dtype.kind != "O":
        if kind == FLOAT:
            vals = vals.astype(np.float64, copy=False)
            if whole:
                return pa.Array.from_buffers(pa.float64(), len(vals), [None, pa.py_buffer(vals)])
            nan = np.isnan(vals, out=scratch.take(np.bool_, n)) if vals.size == n else np.isnan(vals)
            return _numbers(pa, typ, vals, nan)
        if vals.dtype.kind == "f":  # int column from floats: NaN is missing
            nan = np.isnan(vals)
            return _numbers(pa, typ, np.where(nan, 0, vals).astype(np.int64), nan)
        return _numbers(pa, typ, vals)
    if isinstance(vals, np.ndarray):
        vals = vals.tolist()
    if kind == FLOAT:
        missing = np.fromiter((v is None or v != v for v in vals), bool, len(vals))
        return _numbers(pa, typ, np.array([0.0 if m else float(v) for v, m in zip(vals, missing)],
                                          dtype=np.float64), missing)
    missing = np.fromiter((v is None for v in vals), bool, len(vals))
    return _numbers(pa, typ, np.array([0 if v is None else v for v in vals], dtype=np.int64),
                    missing)


class _Part:
    __slots__ = ("writer", "path", "run", "buffer", "rows", "used")

    def __init__(self, writer: Any, path: Path, run: Callable[..., None]) -> None:
        self.writer, self.path, self.run = writer, path, run
        self.buffer: list[tuple[list[Column], int]] = []  # batches in their own form
        self.rows = 0
        self.used = 0


class ParquetWriter(TableWriter):
    """Parquet file or hive-partitioned dataset with large row groups.

    Batches are kept per part until ROW_GROUP_ROWS, then written as one
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
        # hive levels: the partition columns, then split_by; they are in the path, not the files
        self._levels = (*spec.partition, spec.split_by) if spec.split_by else spec.partition
        self._data_cols = [c for c in spec.columns if c.name not in self._levels]
        self._data_at = [spec.names.index(c.name) for c in self._data_cols]
        self._schema = self._pa.schema([self._pa.field(c.name, arrow_type(self._pa, c),
                                                       nullable=not c.required)
                                        for c in self._data_cols])
        self._dicts = _Dictionaries()
        self._scratch = threading.local()  # each lane's _Scratch
        if spec.partition:
            path.mkdir(parents=True, exist_ok=True)
            _clear_dataset(path, self._levels)

    def _write(self, cols: Sequence[Column], n: int) -> None:
        for key, part_cols, rows in self._split(list(cols), n):
            self._add(key, [part_cols[i] for i in self._data_at], rows)

    def _split(self, cols: list[Column], n: int
               ) -> list[tuple[tuple[Any, ...], list[Column], int]]:
        """The batch's rows by part: (key, columns, rows), parts in order of first row."""
        names = self.spec.names
        parts = [cols[names.index(p)] for p in self.spec.partition]
        if not all(isinstance(p, Const) for p in parts):
            cols = [plain_values(c, n, k.kind) if isinstance(c, (PerFrame, Stepped)) else c
                    for c, k in zip(cols, self.spec.columns)]
            by = np.column_stack([np.asarray(plain_values(cols[names.index(p)], n, INT),
                                             dtype=np.int64) for p in self.spec.partition])
            if not (by == by[0]).all():  # rows of several boards or runs, in their order
                uniq, inverse = np.unique(by, axis=0, return_inverse=True)
                out = []
                for i in range(len(uniq)):
                    rows = np.flatnonzero(inverse.reshape(-1) == i)
                    sub = [_rows_of(c, rows, k.kind) for c, k in zip(cols, self.spec.columns)]
                    out += self._shards(tuple(int(v) for v in uniq[i]), sub, len(rows))
                return out
            return self._shards(tuple(int(v) for v in by[0]), cols, n)
        return self._shards(tuple(p.value for p in parts), cols, n)

    def _shards(self, where: tuple[Any, ...], cols: list[Column], n: int
                ) -> list[tuple[tuple[Any, ...], list[Column], int]]:
        """A part per value of split_by (a constant, or one value per frame)."""
        if not self.spec.split_by:
            return [(where, cols, n)]
        split = cols[self.spec.names.index(self.spec.split_by)]
        if isinstance(split, Const):
            return [(where + (split.value,), cols, n)]
        if not isinstance(split, PerFrame):  # a value per row: each row its own frame
            cols = [plain_values(c, n, k.kind) if isinstance(c, (PerFrame, Stepped)) else c
                    for c, k in zip(cols, self.spec.columns)]
            split = PerFrame(np.asarray(plain_values(split, n, INT), dtype=np.int64),
                             np.ones(n, dtype=np.int64))
            cols[self.spec.names.index(self.spec.split_by)] = split
        values = frame_values(split.values)
        uniq, first = np.unique(values, return_index=True)
        if len(uniq) == 1:
            return [(where + (uniq[0].item(),), cols, n)]
        out = []
        for i in np.argsort(first, kind="stable").tolist():
            frames = values == uniq[i]
            rows = np.repeat(frames, split.counts)
            sub = take_batch(cols, frames, rows)
            out.append((where + (uniq[i].item(),), sub, int(split.counts[frames].sum())))
        return out

    def _add(self, key: tuple[Any, ...], cols: list[Column], rows: int) -> None:
        part = self._parts.get(key)
        if part is None:
            part = self._open_part(key)
        self._clock += 1
        part.used = self._clock
        part.buffer.append((cols, rows))
        part.rows += rows
        self._buffered += rows
        while part.rows >= ROW_GROUP_ROWS:
            self._flush(part, ROW_GROUP_ROWS)
        while self._buffered > MAX_BUFFERED_ROWS:
            self._flush(max(self._parts.values(), key=lambda p: p.rows))

    def _open_part(self, key: tuple[Any, ...]) -> _Part:
        if len(self._parts) >= MAX_OPEN_PARTS:
            self._close_part(min(self._parts, key=lambda k: self._parts[k].used))
        if self.spec.partition and key:
            where = key[: len(self._levels)]
            folder = self.path.joinpath(*(f"{p}={v}" for p, v in zip(self._levels, where)))
            folder.mkdir(parents=True, exist_ok=True)
            number = self._files.get(where, 0)
            path = folder / f"part-{number}.parquet"
            self._files[where] = number + 1
        elif self.spec.partition:  # no rows at all: one empty file at the top
            path = self.path / "part-0.parquet"
        else:
            path = self.path
        pa, schema = self._pa, self._schema
        by_name = {c.name: c for c in self._data_cols}
        strs = [f.name for f in schema if not (pa.types.is_integer(f.type) or
                                               pa.types.is_floating(f.type) or
                                               pa.types.is_timestamp(f.type))]
        ints = [f.name for f in schema if pa.types.is_integer(f.type)]
        few = [n for n, c in by_name.items() if c.encoding == "dictionary" and n not in strs]
        split = [n for n, c in by_name.items() if c.encoding == "split" and n not in strs + ints]
        encodings = {n: "DELTA_BINARY_PACKED" for n in ints if n not in few}
        encodings.update({n: "BYTE_STREAM_SPLIT" for n in split})
        # snappy, but not where an encoding leaves nothing to squeeze: dictionary
        # indices and delta-packed counts of noisy samples (it would cost time only)
        plain = {n: "NONE" for n, c in by_name.items() if not c.statistics and n not in strs}
        writer = self._pq.ParquetWriter(
            path, schema, store_schema=False,
            compression={f.name: plain.get(f.name, "SNAPPY") for f in schema},
            use_dictionary=strs + few or False,  # few distinct texts; numbers plain or delta
            write_statistics=[f.name for f in schema
                              if f.name not in strs and by_name[f.name].statistics] or False,
            column_encoding=encodings or None)
        run = self._background.lane() if self._background is not None else run_now
        part = self._parts[key] = _Part(writer, path, run)
        self.written.append(path)
        return part

    def _flush(self, part: _Part, rows: int | None = None) -> None:
        """Hand the part's first `rows` rows (all of them by default) to its lane
        as one row group."""
        if not part.buffer:
            return
        take = part.rows if rows is None else min(rows, part.rows)
        batches: list[tuple[list[Column], int]] = []
        got = 0
        while got < take:
            cols, n = part.buffer[0]
            if got + n <= take:
                batches.append(part.buffer.pop(0))
                got += n
                continue
            cut = take - got
            batches.append((slice_batch(cols, 0, cut), cut))
            part.buffer[0] = (slice_batch(cols, cut, n), n - cut)
            got = take
        part.rows -= take
        self._buffered -= take
        part.run(self._write_group, part.writer, batches, take)

    def _write_group(self, writer: Any, batches: list[tuple[list[Column], int]],
                     rows: int) -> None:
        """One row group from kept batches (runs on a lane: numpy and Arrow work
        without the GIL for the most part)."""
        pa = self._pa
        scratch = getattr(self._scratch, "arrays", None)
        if scratch is None:
            scratch = self._scratch.arrays = _Scratch()
        scratch.start(rows)
        arrays = []
        at = 0
        for cols, n in batches:
            scratch.batch(at)
            ticks: dict[int, np.ndarray] = {}
            arrays.append([_arrow(pa, col, n, c, self._dicts, ticks, scratch)
                           for col, c in zip(cols, self._data_cols)])
            at += n
        table = pa.Table.from_batches(
            [pa.RecordBatch.from_arrays(a, schema=self._schema) for a in arrays],
            schema=self._schema)
        writer.write_table(table, max(rows, 1))

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


def _rows_of(col: Column, rows: np.ndarray, kind: str) -> Column:
    """Some rows (indices) of a column that is not in its frames' form."""
    if isinstance(col, Const):
        return col
    if isinstance(col, Coded):
        return Coded(col.codes[rows], col.values, col.key)
    if isinstance(col, TickSeconds):
        return TickSeconds(ticks_of(col.tick)[rows], col.tick_hz)
    if isinstance(col, np.ndarray):
        return col[rows]
    values = list(col)
    return [values[i] for i in rows.tolist()]


def _clear_dataset(folder: Path, partition: Sequence[str]) -> None:
    """Remove the part files an earlier write left (as a CSV file is overwritten);
    only files of our own layout are touched, at every level of it (an older
    release wrote samples one level higher: board=B/run=R/part-N.parquet)."""
    for depth in range(len(partition) + 1):
        for old in folder.glob("/".join([f"{p}=*" for p in partition[:depth]]
                                        + ["part-*.parquet"])):
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


def parquet_columns(path: Path) -> list[str]:
    """Column names of a Parquet file or dataset folder (partition keys first)."""
    _, pq = _pyarrow()
    if not path.is_dir():
        return list(pq.read_schema(path).names)
    files = sorted(path.rglob("*.parquet"))
    keys = [] if not files else [p.split("=", 1)[0] for p in files[0].relative_to(path).parts[:-1]]
    return keys + ([] if not files else list(pq.read_schema(files[0]).names))


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
