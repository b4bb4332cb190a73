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
dataset folder (`samples/board=1/run=2/stream=0/part-0.parquet`) when the spec
names partition columns: these are in the path, not in the files. Each Parquet
file carries the spec (units, kinds) as JSON in its key-value metadata, plus
whatever the writer was given for that part.

Besides arrays and lists a batch may hold compact columns (Const, Coded,
TickSeconds, and the decoder's frames' form: PerFrame, Stepped); writers
expand them only as far as their format needs.

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
    # Parquet encoding for a number column: "dictionary" (few distinct values, such as
    # scaled 16-bit samples), "split" (BYTE_STREAM_SPLIT: smooth floats such as times)
    encoding: str = ""
    # never missing: Parquet writes it as a required field (no definition levels)
    required: bool = False
    # Parquet keeps min/max per page (what readers filter on: times, seqs)
    statistics: bool = True


@dataclass(frozen=True)
class Spec:
    name: str
    columns: tuple[Col, ...]
    partition: tuple[str, ...] = ()  # hive partition columns (Parquet only)
    split_by: str = ""  # Parquet: a partition level below the others, split frame by frame

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
class PerFrame:
    """One value per frame, repeated over that frame's counts[k] rows (the
    decoder's frames' form: a seq, stream or name per frame)."""

    values: Any  # ndarray or sequence, one value per frame
    counts: np.ndarray


@dataclass(frozen=True)
class Stepped:
    """first[k] + j * step[k] for row j of frame k's counts[k] rows: the ticks
    of evenly spaced samples, kept as one first tick and a period per frame."""

    first: np.ndarray
    step: np.ndarray
    counts: np.ndarray

    def expand(self, out: np.ndarray | None = None) -> np.ndarray:
        """The ticks, one per row (into `out` when given: n int64)."""
        counts, step, first = self.counts, self.step, self.first
        n = int(counts.sum())
        out = np.empty(n, dtype=np.int64) if out is None else out
        if not len(counts):
            return out
        every = int(step[0])
        if (step == every).all():  # a period per stream: frames alike but for the ends
            ramp = np.arange(int(counts.max()), dtype=np.int64) * every
            if _by_frames(out, counts, first, lambda k, m: first[k] + ramp[:m],
                          lambda a, c: a[:, None] + ramp[:c]):
                return out
        start = np.cumsum(counts) - counts
        within = np.arange(n, dtype=np.int64) - np.repeat(start, counts)
        out[:] = np.repeat(first, counts) + within * np.repeat(step, counts)
        return out


def _by_frames(out: np.ndarray, counts: np.ndarray, values: np.ndarray,
               one: Callable[[int, int], Any], many: Callable[[np.ndarray, int], Any]
               ) -> bool:
    """Fill out in one broadcast when the frames between the first and the last
    are alike in length (a batch cut from a longer one): one(k, m) gives frame k's
    m rows, many(values, c) the rows of frames of c rows each. False (nothing
    done) when they differ."""
    frames = len(counts)
    middle = counts[1:-1]
    each = int(middle[0]) if len(middle) else int(counts[0])
    if frames > 2 and not (middle == each).all():
        return False
    at, lo, hi = 0, 0, frames
    if int(counts[0]) != each or frames == 1:
        at, lo = int(counts[0]), 1
        out[:at] = one(0, at)
    if hi > lo and int(counts[-1]) != each:
        hi -= 1
        out[len(out) - int(counts[-1]):] = one(frames - 1, int(counts[-1]))
    if hi > lo:
        out[at : at + (hi - lo) * each].reshape(hi - lo, each)[:] = many(values[lo:hi], each)
    return True


@dataclass(frozen=True)
class TickSeconds:
    """tick / tick_hz as float seconds (null when tick_hz is 0). A tick rate that
    is a power of ten lets CSV place the decimal point instead of formatting a
    float: the same text as repr (see table_csv). tick: an int64 array or Stepped."""

    tick: Any
    tick_hz: int


Column = Any  # np.ndarray | Sequence | Const | Coded | TickSeconds | PerFrame | Stepped


def column_rows(col: Column) -> int:
    if isinstance(col, Const):
        return -1
    if isinstance(col, Coded):
        return len(col.codes)
    if isinstance(col, TickSeconds):
        return column_rows(col.tick)
    if isinstance(col, (PerFrame, Stepped)):
        return int(col.counts.sum())
    return len(col)


def ticks_of(tick: Any) -> np.ndarray:
    """An int64 array of ticks from an array or a Stepped."""
    if isinstance(tick, Stepped):
        return tick.expand()
    return np.asarray(tick, dtype=np.int64)


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
        return ticks_of(col.tick) / col.tick_hz
    if isinstance(col, Stepped):
        return col.expand()
    if isinstance(col, PerFrame):
        return repeat_frames(frame_values(col.values), col.counts)
    return col


def repeat_frames(values: np.ndarray, counts: np.ndarray,
                  out: np.ndarray | None = None) -> np.ndarray:
    """values[k] repeated counts[k] times (np.repeat, quicker for the usual cases:
    one value throughout, or frames of one length; into `out` when given)."""
    n = int(counts.sum())
    if values.dtype.kind == "O":
        return np.repeat(values, counts)
    out = np.empty(n, dtype=values.dtype) if out is None else out
    if not len(values):
        return out
    if (values == values[0]).all():
        out.fill(values[0])
    elif not _by_frames(out, counts, values, lambda k, m: values[k], lambda a, c: a[:, None]):
        out[:] = np.repeat(values, counts)
    return out


_NP = {INT: np.int64, FLOAT: np.float64, UTC: np.int64}


def frame_values(values: Any) -> np.ndarray:
    """A PerFrame column's values, one per frame, as an array."""
    if isinstance(values, Coded):
        return np.asarray(values.values)[values.codes]
    if isinstance(values, np.ndarray):
        return values
    return np.array(values, dtype=object) if len(values) else np.zeros(0, object)


def _some_frames(values: Any, which: Any, memo: dict[int, Any]) -> Any:
    """PerFrame values of the frames `which` selects (a slice or a mask)."""
    if isinstance(values, Coded):
        return Coded(_shared(values.codes, which, memo), values.values, values.key)
    return frame_values(values)[which]


def _shared(a: np.ndarray, which: Any, memo: dict[int, Any]) -> Any:
    """a[which], once per array: columns that shared an array still share its part
    (a writer may take Coded columns with the same codes together)."""
    got = memo.get(id(a))
    if got is None:
        got = memo[id(a)] = a[which]
    return got


def _frame_span(counts: np.ndarray, lo: int, hi: int) -> tuple[int, int, np.ndarray, int]:
    """Frames holding rows lo..hi-1: (first frame, end frame, their counts cut to
    the rows, rows of the first frame before lo)."""
    ends = np.cumsum(counts)
    f0 = int(np.searchsorted(ends, lo, side="right"))
    f1 = int(np.searchsorted(ends, hi, side="left")) + 1 if hi > lo else f0
    f1 = min(f1, len(counts))
    cut = counts[f0:f1].copy()
    skip = 0
    if f1 > f0:
        skip = lo - int(ends[f0] - counts[f0])
        cut[0] -= skip
        cut[-1] -= int(ends[f1 - 1]) - hi
    return f0, f1, cut, skip


def slice_batch(cols: Sequence[Column], lo: int, hi: int) -> list[Column]:
    """Rows lo..hi-1 of a batch, each column kept in its own form."""
    memo: dict[int, Any] = {}
    return [slice_rows(c, lo, hi, memo) for c in cols]


def slice_rows(col: Column, lo: int, hi: int, memo: dict[int, Any] | None = None) -> Column:
    """Rows lo..hi-1 of a column, kept in its own form (memo: see slice_batch)."""
    memo = {} if memo is None else memo
    if isinstance(col, Const):
        return col
    if isinstance(col, Coded):
        return Coded(_shared(col.codes, slice(lo, hi), memo), col.values, col.key)
    if isinstance(col, TickSeconds):
        return TickSeconds(slice_rows(col.tick, lo, hi, memo), col.tick_hz)
    if isinstance(col, (PerFrame, Stepped)):
        got = memo.get(id(col))
        if got is not None:
            return got
        span = memo.get(id(col.counts))
        if span is None:
            span = memo[id(col.counts)] = _frame_span(col.counts, lo, hi)
        f0, f1, cut, skip = span
        if isinstance(col, PerFrame):
            got = PerFrame(_some_frames(col.values, slice(f0, f1), memo), cut)
        else:
            first = col.first[f0:f1].copy()
            if len(first):
                first[0] += skip * col.step[f0]
            got = Stepped(first, col.step[f0:f1], cut)
        memo[id(col)] = got
        return got
    return col[lo:hi]


def take_batch(cols: Sequence[Column], frames: np.ndarray, rows: np.ndarray) -> list[Column]:
    """The rows of the frames where `frames` is True (`rows`: the same as a mask per
    row) of a batch whose frames' form columns share one counts array."""
    memo: dict[int, Any] = {}
    return [take_frames(c, frames, rows, memo) for c in cols]


def take_frames(col: Column, frames: np.ndarray, rows: np.ndarray,
                memo: dict[int, Any] | None = None) -> Column:
    """take_batch for one column."""
    memo = {} if memo is None else memo
    if isinstance(col, Const):
        return col
    if isinstance(col, Coded):
        return Coded(_shared(col.codes, rows, memo), col.values, col.key)
    if isinstance(col, TickSeconds):
        return TickSeconds(take_frames(col.tick, frames, rows, memo), col.tick_hz)
    if isinstance(col, (PerFrame, Stepped)):
        got = memo.get(id(col))
        if got is None:
            counts = _shared(col.counts, frames, memo)
            if isinstance(col, PerFrame):
                got = PerFrame(_some_frames(col.values, frames, memo), counts)
            else:
                got = Stepped(col.first[frames], col.step[frames], counts)
            memo[id(col)] = got
        return got
    if isinstance(col, np.ndarray):
        return col[rows]
    return [v for v, keep in zip(col, rows.tolist()) if keep]


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

    File writes, numpy and Parquet encoding release the GIL, so the decoder runs
    on meanwhile, and two lanes format or encode two batches at once. Each
    lane's queue is short (MAX_PENDING), so memory stays bounded; an error in a
    lane is raised by the next submit or by close().
    """

    def __init__(self, lanes: int = WRITE_LANES) -> None:
        self._queues: list[queue.Queue[_Job | None]] = [
            queue.Queue(maxsize=MAX_PENDING) for _ in range(max(1, lanes))]
        self._error: BaseException | None = None
        self._next = 0
        self._threads = [threading.Thread(target=self._run, args=(q,), daemon=True,
                                          name=f"slipless-tables-{i}")
                         for i, q in enumerate(self._queues)]
        for t in self._threads:
            t.start()

    def _run(self, jobs: queue.Queue[_Job | None]) -> None:
        while (job := jobs.get()) is not None:
            fn, args, done = job
            try:
                if self._error is None:
                    fn(*args)
            except BaseException as exc:  # handed to the caller's thread
                self._error = exc
            finally:
                if done is not None:
                    done.set()

    def lane(self) -> Callable[..., None]:
        """A submit function for the next lane (round robin): one per file."""
        jobs = self._queues[self._next % len(self._queues)]
        self._next += 1

        def submit(fn: Callable[..., Any], *args: Any) -> None:
            self._put(jobs, fn, args, None)

        return submit

    def in_order(self) -> Callable[..., None]:
        """A submit function for jobs of one file that run on every lane in turn:
        fn(*args) -> bytes-like is made at once on several lanes, and its result
        handed to write() in submission order (write is the last argument)."""
        last: list[threading.Event | None] = [None]

        def submit(fn: Callable[..., Any], *args: Any) -> None:
            *fn_args, write = args
            prev, done = last[0], threading.Event()
            last[0] = done
            jobs = self._queues[self._next % len(self._queues)]
            self._next += 1
            self._put(jobs, _then_in_order, (fn, fn_args, write, prev, self), done)

        return submit

    def _put(self, jobs: queue.Queue[_Job | None], fn: Callable[..., Any],
             args: tuple[Any, ...], done: threading.Event | None) -> None:
        self._raise()
        jobs.put((fn, args, done))

    @property
    def failed(self) -> bool:
        return self._error is not None

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


_Job = tuple[Callable[..., Any], tuple[Any, ...], "threading.Event | None"]


def _then_in_order(fn: Callable[..., Any], args: Sequence[Any], write: Callable[[Any], Any],
                   prev: threading.Event | None, background: Background) -> None:
    """Make a job's bytes, then write them once the job before it has written."""
    data = fn(*args)
    if prev is not None:
        prev.wait()
    if not background.failed:  # an earlier job failed: its error is raised, write no more
        write(data)


def run_now(fn: Callable[..., Any], *args: Any) -> None:
    fn(*args)
