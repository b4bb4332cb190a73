"""One table layer for every command: typed columns, CSV text or Parquet.

A table is declared once (`Spec`: column names with a kind and a unit) and
written in batches of columns; the memory used is bounded by the batch and the
row-group buffer, never by the table. Kinds:

  int    int64; empty / null where missing
  float  float64, NaN written as empty / null; CSV text is Python's repr (the
         shortest decimal that reads back to the same float)
  str    text (UTF-8); CSV quoting as the csv module does it
  utc    laptop wall-clock time, ns since 1970 UTC: ISO 8601 text ending in Z
         in CSV, timestamp[ns, tz=UTC] in Parquet

CSV is one file per table; Parquet is one file per table, or a hive-partitioned
dataset folder (`samples/board=1/run=2/part-0.parquet`) when the spec names
partition columns. Each Parquet file carries the spec (units, kinds) as JSON
in its key-value metadata, plus whatever the writer was given for that part.

The formats live beside this module: table_csv.py (text built in bulk with
numpy) and table_parquet.py (pyarrow, imported only when Parquet is asked for);
table_files.py opens a writer or reader by format. This module holds what
they share, so it imports neither.
"""

from __future__ import annotations

import json
import queue
import threading
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from slipless.errors import InputError

FORMATS = ("csv", "parquet")
INT, FLOAT, STR, UTC = "int", "float", "str", "utc"
KINDS = (INT, FLOAT, STR, UTC)

MAX_PENDING = 1  # writes queued per background lane: each holds one text block or row group
WRITE_LANES = 2  # background threads writing files (Parquet encoding runs in them)


@dataclass(frozen=True)
class Col:
    name: str
    kind: str = INT
    unit: str = ""
    repeats: bool = True  # str only: few distinct values (dictionary-encoded in Parquet)


@dataclass(frozen=True)
class Spec:
    name: str
    columns: tuple[Col, ...]
    partition: tuple[str, ...] = ()  # hive partition columns (Parquet only)
    split_by: str = ""  # Parquet: one file per value of this column in each partition

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(c.name for c in self.columns)

    def metadata(self) -> dict[str, str]:
        cols = {c.name: {"kind": c.kind, **({"unit": c.unit} if c.unit else {})}
                for c in self.columns}
        return {"slipless.table": self.name, "slipless.columns": json.dumps(cols)}


def spec(name: str, columns: Sequence[tuple[str, str] | tuple[str, str, str] | Col],
         partition: Sequence[str] = ()) -> Spec:
    cols = tuple(c if isinstance(c, Col) else Col(*c) for c in columns)
    for c in cols:
        if c.kind not in KINDS:
            raise ValueError(f"column {c.name}: unknown kind {c.kind!r}")
    return Spec(name, cols, tuple(partition))


def kind_of(values: Any) -> str:
    """The kind a column of plain values needs: int, float or str."""
    if isinstance(values, np.ndarray) and values.dtype.kind in "iub":
        return INT
    if isinstance(values, np.ndarray) and values.dtype.kind == "f":
        return FLOAT
    seen = {type(v) for v in values if v is not None}
    if seen and all(issubclass(t, (int, np.integer)) for t in seen):
        return INT
    if seen and all(issubclass(t, (int, float, np.integer, np.floating)) for t in seen):
        return FLOAT
    return STR


# ---- column values a writer accepts besides arrays and lists -------------------------
@dataclass(frozen=True)
class Const:
    """One value for every row of the batch."""

    value: Any


@dataclass(frozen=True)
class Coded:
    """values[codes]: a column with few distinct values (raw 16-bit samples and
    their scaled values); each distinct value is formatted once. `key` names
    the values so a writer may keep their text between batches."""

    codes: np.ndarray
    values: np.ndarray
    key: Any = None


@dataclass(frozen=True)
class TickSeconds:
    """tick / tick_hz as float seconds (null when tick_hz is 0). A tick rate that
    is a power of ten lets CSV place the decimal point instead of formatting a
    float: the same text as repr (see _tick_words)."""

    tick: np.ndarray
    tick_hz: int


Column = Any  # np.ndarray | Sequence | Const | Coded | TickSeconds


def column_rows(col: Column) -> int:
    if isinstance(col, Const):
        return -1
    if isinstance(col, Coded):
        return len(col.codes)
    if isinstance(col, TickSeconds):
        return len(col.tick)
    return len(col)


def plain_values(col: Column, n: int, kind: str) -> Any:
    """The plain values of a column: an ndarray or a list (None = missing)."""
    if isinstance(col, Const):
        if col.value is None:
            return [None] * n
        return np.full(n, col.value, dtype=_NP.get(kind, object))
    if isinstance(col, Coded):
        return np.asarray(col.values)[col.codes]
    if isinstance(col, TickSeconds):
        if not col.tick_hz:
            return np.full(n, np.nan)
        return np.asarray(col.tick, dtype=np.int64) / col.tick_hz
    return col


_NP = {INT: np.int64, FLOAT: np.float64, UTC: np.int64}


# ---- writers ----------------------------------------------------------------------------
class TableWriter:
    """Writes one table; `write` takes the columns of a batch in spec order."""

    def __init__(self, spec: Spec) -> None:
        self.spec = spec

    def write(self, cols: Sequence[Column]) -> None:
        if len(cols) != len(self.spec.columns):
            raise ValueError(f"{self.spec.name}: {len(cols)} columns for {len(self.spec.columns)}")
        n = max((column_rows(c) for c in cols), default=0)
        if n > 0:
            self._write(cols, n)

    def _write(self, cols: Sequence[Column], n: int) -> None:
        raise NotImplementedError

    def close(self) -> None:
        raise NotImplementedError


def check_format(fmt: str) -> None:
    if fmt not in FORMATS:
        raise InputError(f"unknown table format {fmt!r}; choose one of {', '.join(FORMATS)}")


class Background:
    """Threads ("lanes") that run file writes, each lane in order, while the
    caller keeps working.

    File writes and Parquet encoding release the GIL, so the decoder runs on
    meanwhile, and two lanes encode two files at once. Each lane's queue is
    short (MAX_PENDING), so memory stays bounded; an error in a lane is raised
    by the next submit or by close().
    """

    def __init__(self, lanes: int = WRITE_LANES) -> None:
        self._queues: list[queue.Queue[tuple[Callable[..., Any], tuple[Any, ...]] | None]] = [
            queue.Queue(maxsize=MAX_PENDING) for _ in range(max(1, lanes))]
        self._error: BaseException | None = None
        self._next = 0
        self._threads = [threading.Thread(target=self._run, args=(q,), daemon=True,
                                          name=f"slipless-tables-{i}")
                         for i, q in enumerate(self._queues)]
        for t in self._threads:
            t.start()

    def _run(self, jobs: queue.Queue[tuple[Callable[..., Any], tuple[Any, ...]] | None]) -> None:
        while (job := jobs.get()) is not None:
            if self._error is None:
                try:
                    job[0](*job[1])
                except BaseException as exc:  # handed to the caller's thread
                    self._error = exc

    def lane(self) -> Callable[..., None]:
        """A submit function for the next lane (round robin): one per file."""
        jobs = self._queues[self._next % len(self._queues)]
        self._next += 1

        def submit(fn: Callable[..., Any], *args: Any) -> None:
            self._raise()
            jobs.put((fn, args))

        return submit

    def _raise(self) -> None:
        if self._error is not None:
            error, self._error = self._error, None
            raise error

    def close(self) -> None:
        for q, t in zip(self._queues, self._threads):
            if t.is_alive():
                q.put(None)
                t.join()
        self._raise()


def run_now(fn: Callable[..., Any], *args: Any) -> None:
    fn(*args)
