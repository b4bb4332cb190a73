"""Tidy tables out of the decoder: the decode sink over table_io's writers.

Rows arrive in batches (samples) or one at a time (frames, timing, events...);
single rows are gathered into blocks of ROWS_PER_WRITE before they reach a
writer, so the memory used does not grow with the capture. Column names carry
their units (`tick_us`, `board_time_s`, `battery_mV`); Parquet files also
carry them in their metadata, with each run's stream descriptions.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from slipless.decode.decoder import Arrival, RunState, StreamInfo
from slipless.errors import InputError
from slipless.io.folders import out_folder
from slipless.io.table_files import column_names, find_table, open_table, read_columns
from slipless.io.table_io import (
    FLOAT,
    FORMATS,
    INT,
    STR,
    UTC,
    Background,
    Coded,
    Col,
    Const,
    PerFrame,
    Spec,
    Stepped,
    TableWriter,
    check_format,
    spec,
)
from slipless.protocol import wire

__all__ = ["FORMATS", "SCHEMAS", "SPECS", "TableSink", "read_decoded"]

ROWS_PER_WRITE = 65_536  # single rows gathered before a writer formats them in bulk
_RUN = (("board", INT), ("run", INT))
# Parquet encodings: times in seconds are smooth (byte stream split packs them small),
# scaled samples have at most 65536 values per stream (a dictionary)
_TIME = (("tick_us", INT, "us"), Col("board_time_s", FLOAT, "s", encoding="split"))

SPECS: dict[str, Spec] = {s.name: s for s in (
    # samples: the columns every sample has are required in Parquet; the values keep no
    # page statistics (readers filter on stream, seq and tick; min/max per page costs
    # time). What follows from a stream or a run is not repeated on every row: the
    # stream's name and unit are in `streams` (a sixth of the CSV text), and board_time_s
    # is tick_us / the run's tick_hz in `runs` (a fifth of the rest, and of Parquet's
    # encoding time). read_decoded gives all three back as columns.
    spec("samples", [*_RUN, Col("stream", INT, required=True),
                     Col("seq", INT, required=True), Col("tick_us", INT, "us", required=True),
                     Col("raw", INT, "count", statistics=False),
                     Col("value", FLOAT, "streams.unit", encoding="dictionary", statistics=False),
                     Col("raw_float", FLOAT, statistics=False)]),
    spec("events", [*_RUN, ("seq", INT), *_TIME, ("event", STR), ("code", INT),
                    ("value", INT)]),
    spec("status", [*_RUN, ("seq", INT), *_TIME, ("battery_mV", INT, "mV"),
                    ("temp_C", FLOAT, "degC"), ("free_ram_B", INT, "B"), ("queue_high", INT),
                    ("dropped_frames", INT), ("late_samples", INT), ("jitter_us", INT, "us")]),
    spec("frames", [*_RUN, ("seq", INT), ("kind", STR), ("fate", STR), ("origin", STR),
                    ("source", INT), ("offset_B", INT, "B"), ("rx_wall_ns", INT, "ns"),
                    ("rx_wall_utc", UTC)]),
    spec("timing", [*_RUN, ("seq", INT), ("kind", STR), ("tick_us", INT, "us"), ("source", INT),
                    ("rx_mono_ns", INT, "ns"), ("rx_wall_ns", INT, "ns"), ("rx_wall_utc", UTC)]),
    spec("replies", [*_RUN, ("seq", INT), ("kind", STR), Col("fields", STR, repeats=False)]),
    spec("streams", [*_RUN, ("stream", INT), ("name", STR), ("unit", STR), ("type", STR),
                     ("state", INT), ("period_us", INT, "us"), ("scale", FLOAT),
                     ("offset", FLOAT)]),
    spec("runs", [*_RUN, ("fw", STR), ("tick_hz", INT, "Hz"), ("frames_received", INT),
                  ("frames_missing", INT), ("frames_corrupt", INT), ("frames_duplicate", INT),
                  ("samples", INT), ("events", INT), ("end_reason", STR),
                  ("ticks_uncertain", INT), ("frames_undecodable", INT)]),
)}
# samples: a file per stream (Parquet: the folder stream=S), so streams encode in parallel
SPECS = {k: Spec(v.name, v.columns, ("board", "run"), "stream" if k == "samples" else "")
         for k, v in SPECS.items()}
# Column names per table, as `slipless align` writes them in its own tables: it
# writes raw as float, so it has no raw_float, and its samples (every board's
# streams in one file) keep each row's stream name and unit.
SCHEMAS: dict[str, tuple[str, ...]] = {
    name: tuple(n for n in s.names if n != "raw_float") for name, s in SPECS.items()}
SCHEMAS["samples"] = ("board", "run", "stream", "name", "seq", "tick_us", "board_time_s", "raw",
                      "value", "unit")
_NAMED = ("name", "unit")  # samples' columns that come from streams when a table lacks them
_LOOKED_UP = {"name": STR, "unit": STR, "board_time_s": FLOAT}  # ... and the run's tick rate



def read_decoded(folder: Path, name: str, columns: Sequence[str]) -> dict[str, np.ndarray] | None:
    """Columns of one table in a folder written by `slipless decode` (CSV or
    Parquet), typed as the table declares them; None when there is no such table."""
    path = find_table(folder, name)
    if path is None:
        return None
    kinds = {c.name: c.kind for c in SPECS[name].columns}
    if name == "samples":
        kinds.update(_LOOKED_UP)  # typed alike where an older release stored them
        have = set(column_names(path))
        looked_up = [c for c in columns if c in _LOOKED_UP and c not in have]
        if looked_up:
            return _samples_looked_up(folder, path, list(columns), looked_up, kinds)
    return read_columns(path, columns, kinds)


def _samples_looked_up(folder: Path, path: Path, columns: list[str], looked_up: list[str],
                       kinds: dict[str, str]) -> dict[str, np.ndarray]:
    """Samples' columns with what each row's stream or run holds looked up: the
    stream's name and unit in `streams` (a run lists each of its streams once
    there), board_time_s as tick_us / the run's tick_hz in `runs` (null at 0 Hz).
    Folders of older releases have these columns in the samples table itself."""
    keys = ("board", "run", "stream")
    extra = ["tick_us"] if "board_time_s" in looked_up else []
    got = read_columns(path, [c for c in dict.fromkeys([*columns, *keys, *extra])
                              if c not in looked_up], kinds)
    out = {c: got[c] for c in columns if c not in looked_up}
    named = [c for c in looked_up if c in _NAMED]
    if named:
        streams = read_decoded(folder, "streams", [*keys, *named])
        if streams is None:
            raise InputError(f"{folder}: samples without a streams table (their names and units)")
        at = _row_in(got, streams, keys, f"{folder}: samples of a stream its streams table "
                                         "does not list")
        out.update({c: streams[c][at] for c in named})
    if extra:
        runs = read_decoded(folder, "runs", [*keys[:2], "tick_hz"])
        if runs is None:
            raise InputError(f"{folder}: samples without a runs table (their tick rates)")
        at = _row_in(got, runs, keys[:2], f"{folder}: samples of a run its runs table "
                                          "does not list")
        hz = runs["tick_hz"][at].astype(np.float64)
        with np.errstate(divide="ignore", invalid="ignore"):
            seconds = got["tick_us"] / hz
        out["board_time_s"] = np.where(hz > 0, seconds, np.nan)
    return {c: out[c] for c in columns}


def _row_in(rows: dict[str, np.ndarray], table: dict[str, np.ndarray], keys: Sequence[str],
            unknown: str) -> np.ndarray:
    """For each row, the index of the table's row with the same keys (a few
    streams or runs: one mask each); InputError `unknown` when one has none."""
    n = len(rows[keys[0]])
    at = np.full(n, -1, dtype=np.int64)
    for i, key in enumerate(zip(*(table[k].tolist() for k in keys))):
        match = np.ones(n, dtype=bool)
        for k, v in zip(keys, key):
            match &= rows[k] == v
        at[match] = i
    if (at < 0).any():
        raise InputError(unknown)
    return at


_CODED_BITS = 16  # sample types of at most this many bits are formatted once per value
SAMPLE_CHUNK = 1 << 17  # samples gathered, in call order, before the writer gets them
MAX_CODE_BLOCKS = 16  # stream descriptions sharing one code space (a few MB of text)
_MISSING_KIND = 16  # frame kinds are 4 bits: this code is a frame that never arrived

_KIND_NAMES = wire.KIND_NAMES
_KIND_TEXT = np.array([_KIND_NAMES.get(k) or f"kind{k}" for k in range(16)] + [None],
                      dtype=object)


class _Rows:
    """Single rows of one table, written in blocks."""

    def __init__(self, writer: TableWriter) -> None:
        self.writer = writer
        self.rows: list[tuple[Any, ...]] = []

    def add(self, row: tuple[Any, ...]) -> None:
        rows = self.rows
        rows.append(row)
        if len(rows) >= ROWS_PER_WRITE:
            self.flush()

    def flush(self) -> None:
        if self.rows:
            self.writer.write(self.columns())
            self.rows.clear()  # the same list: the per-frame callbacks hold it

    def columns(self) -> list[Any]:
        return [list(c) for c in zip(*self.rows)]


class _Names:
    """Texts seen in one column, each given a code in order of appearance."""

    def __init__(self, *first: str | None) -> None:
        self.codes: dict[str | None, int] = {t: i for i, t in enumerate(first)}

    def coded(self, texts: Any, name: str) -> Coded:
        if isinstance(texts, _Repeat):  # one text throughout
            code = self.codes.setdefault(texts.value, len(self.codes))
            return Coded(np.full(texts.n, code, dtype=np.int64),
                         np.array(list(self.codes), dtype=object), (name, len(self.codes)))
        codes = self.codes
        for t in dict.fromkeys(texts):  # the new ones, in order of appearance
            codes.setdefault(t, len(codes))
        idx = np.fromiter(map(codes.__getitem__, texts), np.int64, len(texts))
        return Coded(idx, np.array(list(codes), dtype=object), (name, len(codes)))


class _FrameRows(_Rows):
    """The frames table: kind, fate and origin as codes into their few texts.
    Single rows (tuples, appended by TableSink.frame) and stretches of frames
    received in order (received_frames) are kept in their order."""

    def __init__(self, writer: TableWriter) -> None:
        super().__init__(writer)
        self._fates = _Names()
        self._origins = _Names(None)
        # the rows before the last stretch: tuples, or (run, seq0, offsets, origin, source, wall)
        self._parts: list[list[tuple[Any, ...]] | tuple[Any, ...]] = []
        self._held = 0  # rows in _parts

    def stretch(self, run: RunState, seq0: int, offsets: np.ndarray, origin: str,
                arrival: Arrival) -> None:
        if self.rows:
            self._parts.append(list(self.rows))
            self._held += len(self.rows)
            self.rows.clear()  # the same list: TableSink.frame holds it
        self._parts.append((run, seq0, offsets, origin or None, arrival.source,
                            arrival.wall_ns if arrival.wall_ns >= 0 else None))
        self._held += len(offsets)
        if self._held >= ROWS_PER_WRITE:
            self.flush()

    def flush(self) -> None:
        if self.rows or self._parts:
            self.writer.write(self.columns())
            self.rows.clear()
            self._parts, self._held = [], 0

    def columns(self) -> list[Any]:
        parts = [*self._parts, self.rows] if self.rows else self._parts
        # per column, each part's values: an array, or a list when they may hold None
        cols: list[list[Any]] = [[] for _ in range(9)]
        for part in parts:
            if isinstance(part, list):
                for col, values in zip(cols, zip(*part)):
                    col.append(list(values))
                continue
            state, seq0, offsets, how, src, at = part
            n = len(offsets)
            for col, value in zip(cols, (state.board, state.run, None, wire.SAMPLES, "received",
                                         how, src, None, at)):
                col.append(_Repeat(value, n))
            cols[2][-1] = np.arange(seq0, seq0 + n, dtype=np.int64)
            cols[7][-1] = np.asarray(offsets, dtype=np.int64)
        n = sum(p.n if isinstance(p, _Repeat) else len(p) for p in cols[2])
        board, run, seq, kind, fate, origin, source, offset, wall = (_joined(c, n) for c in cols)
        kinds = (np.full(n, kind.value, dtype=np.int64) if isinstance(kind, _Repeat)
                 else np.asarray(kind, dtype=np.int64))
        return [_plain(board), _plain(run), _plain(seq), Coded(kinds, _KIND_TEXT, "kind"),
                self._fates.coded(fate, "fate"), self._origins.coded(origin, "origin"),
                _plain(source), _plain(offset), _plain(wall), _plain(wall)]


class _Repeat:
    """One value for n rows (a stretch of frames in a column of the frames table)."""

    __slots__ = ("value", "n")

    def __init__(self, value: Any, n: int) -> None:
        self.value, self.n = value, n


def _joined(parts: list[Any], n: int) -> Any:
    """A frames-table column of n rows from its parts (lists, arrays, _Repeat): a
    _Repeat when one value fills it, an int64 array when it holds ints only,
    else a list."""
    seen = {p.value for p in parts if isinstance(p, _Repeat)}
    for p in parts:
        if isinstance(p, list):
            seen.update(p)
    arrays = any(isinstance(p, np.ndarray) for p in parts)
    if len(seen) == 1 and not arrays:
        return _Repeat(next(iter(seen)), n)
    if all(type(v) is int for v in seen):
        return np.concatenate([np.full(p.n, p.value, dtype=np.int64) if isinstance(p, _Repeat)
                               else np.asarray(p, dtype=np.int64) for p in parts])
    out: list[Any] = []
    for p in parts:
        if isinstance(p, _Repeat):
            out.extend([p.value] * p.n)
        else:
            out.extend(p.tolist() if isinstance(p, np.ndarray) else p)
    return out


def _plain(col: Any) -> Any:
    return Const(col.value) if isinstance(col, _Repeat) else col


class _TimingRows(_Rows):
    def columns(self) -> list[Any]:
        board, run, seq, kind, tick, source, mono, wall = zip(*self.rows)
        return [list(board), list(run), list(seq),
                Coded(np.array(kind, dtype=np.int64), _KIND_TEXT, "kind"), list(tick),
                list(source), list(mono), list(wall), list(wall)]


class _Streams:
    """Every stream description seen, each with a code (the frames' form names a
    frame's stream by it), and the code space of the <= 16-bit ones: each such
    description's raw values and scaled values as one block of codes."""

    def __init__(self) -> None:
        self.index: dict[tuple[Any, ...], int] = {}
        self.infos: list[StreamInfo] = []
        self.blocks: dict[tuple[Any, ...], int] = {}  # (type, scale, offset) -> first code
        self._raw: list[np.ndarray] = []
        self._value: list[np.ndarray] = []
        self.space = 0  # the code space's number: its texts are kept under it
        self._entries: dict[int, tuple[StreamInfo, int, int | None]] = {}
        self.tables: tuple[np.ndarray, np.ndarray] | None = None
        self.columns: tuple[np.ndarray, np.ndarray] | None = None

    def known(self, info: StreamInfo) -> tuple[int, int | None] | None:
        """entry(info) if it was asked for before (the decoder keeps its objects)."""
        got = self._entries.get(id(info))
        return (got[1], got[2]) if got is not None and got[0] is info else None

    def entry(self, info: StreamInfo) -> tuple[int, int | None]:
        """(the description's code, what turns its raw values into codes: None for
        wider and float samples), kept per description object (called per piece)."""
        got = self.known(info)
        if got is not None:
            return got
        code = self.code(info)
        shift = self._shift(info) if self.coded(info) else None
        self._entries[id(info)] = (info, code, shift)
        return code, shift

    def code(self, info: StreamInfo) -> int:
        key = (info.stream, info.type, info.flags, info.period_us, info.scale, info.offset,
               info.name, info.unit)
        got = self.index.get(key)
        if got is None:
            got = self.index[key] = len(self.infos)
            self.infos.append(info)
            self.columns = None
        return got

    def per_stream(self) -> tuple[np.ndarray, np.ndarray]:
        """stream id and period of every code."""
        if self.columns is None:
            infos = self.infos
            self.columns = (np.array([i.stream for i in infos], np.int64),
                            np.array([i.period_us for i in infos], np.int64))
        return self.columns

    @staticmethod
    def coded(info: StreamInfo) -> bool:
        dt = info.dtype
        return dt.kind in "iu" and dt.itemsize * 8 <= _CODED_BITS

    def full(self, info: StreamInfo) -> bool:
        """A new block would not fit this code space."""
        return (self.coded(info) and self._key(info) not in self.blocks
                and len(self.blocks) >= MAX_CODE_BLOCKS)

    def reset(self) -> None:
        self.blocks, self._raw, self._value = {}, [], []
        self.tables = None
        self._entries = {}
        self.space += 1

    @staticmethod
    def _key(info: StreamInfo) -> tuple[Any, ...]:
        return (info.type, info.scale, info.offset)

    def _shift(self, info: StreamInfo) -> int:
        """What a raw value of info's stream adds to become its code in this space
        (its description's block, made on first use)."""
        key = self._key(info)
        base = self.blocks.get(key)
        dt = info.dtype
        lo = int(np.iinfo(dt).min)
        if base is None:
            base = self.blocks[key] = sum(len(r) for r in self._raw)
            values = np.arange(lo, int(np.iinfo(dt).max) + 1, dtype=np.int64)
            self._raw.append(values)
            self._value.append(values.astype(np.float64) * info.scale + info.offset)
            self.tables = None
            self.space += 1
        return base - lo

    def values(self) -> tuple[np.ndarray, np.ndarray]:
        if self.tables is None:
            self.tables = (np.concatenate(self._raw), np.concatenate(self._value))
        return self.tables


class _Samples:
    """The samples table: the decoder's pieces in their frames' form, gathered in
    call order (streams interleaved as they came) into chunks of about
    SAMPLE_CHUNK samples of one run, each written as one batch."""

    def __init__(self, writer: TableWriter) -> None:
        self.writer = writer
        self.streams = _Streams()
        self.run: RunState | None = None
        # per piece: description's code, what makes its raw values codes (None: not
        # coded), seqs, first ticks, counts, raw values
        self.pieces: list[tuple[int, int | None, np.ndarray, np.ndarray, np.ndarray,
                                np.ndarray]] = []
        self.rows = 0

    def add(self, run: RunState, info: StreamInfo, seqs: np.ndarray, ticks: np.ndarray,
            counts: np.ndarray, raw: np.ndarray) -> None:
        if self.run is not None and run is not self.run:
            self.flush()
        streams = self.streams
        known = streams.known(info)
        if known is None:
            if streams.full(info):  # a new block would not fit this code space
                self.flush()
                streams.reset()
            known = streams.entry(info)
        self.run = run
        self.pieces.append((known[0], known[1], seqs, ticks, counts, raw))
        self.rows += raw.size
        if self.rows >= SAMPLE_CHUNK:
            self.flush()

    def flush(self) -> None:
        if not self.pieces or self.run is None:
            return
        run, pieces = self.run, self.pieces
        self.pieces, self.rows = [], 0
        streams = self.streams
        frames = np.repeat(np.array([p[0] for p in pieces], dtype=np.int64),
                           [len(p[2]) for p in pieces])
        seqs, ticks, counts = (np.concatenate([p[i] for p in pieces]) for i in (2, 3, 4))
        sid, period = streams.per_stream()
        known = len(streams.infos)  # the tables grow with new descriptions: their name
        tick = Stepped(ticks, period[frames], counts)
        cols = [Const(run.board), Const(run.run), PerFrame(Coded(frames, sid, ("sid", known)),
                                                           counts),
                PerFrame(seqs, counts), tick]
        if all(p[1] is not None for p in pieces):
            raws, values = streams.values()
            codes = np.concatenate([p[5] for p in pieces]).astype(np.int32)
            codes += np.repeat(np.array([p[1] for p in pieces], dtype=np.int32),
                               [p[5].size for p in pieces])
            space = streams.space
            cols += [Coded(codes, raws, ("raw", space)), Coded(codes, values, ("value", space)),
                     Const(None)]
        else:
            cols += self._plain(pieces)
        self.writer.write(cols)

    def _plain(self, pieces: Sequence[tuple[int, Any, Any, Any, Any, np.ndarray]]) -> list[Any]:
        """raw, value and raw_float of a chunk holding a stream of wider or float
        samples: float samples go in raw_float (raw is empty there)."""
        has_float = any(p[5].dtype.kind == "f" for p in pieces)
        raws, values, floats = [], [], []
        for p in pieces:
            info, raw = self.streams.infos[p[0]], p[5]
            as_float = raw.astype(np.float64)
            values.append(as_float * info.scale + info.offset)
            if raw.dtype.kind == "f":
                raws.append(np.full(raw.size, np.nan))
                floats.append(as_float)
            else:
                raws.append(as_float if has_float else raw.astype(np.int64))
                floats.append(np.full(raw.size, np.nan))
        return [np.concatenate(raws), np.concatenate(values),
                np.concatenate(floats) if has_float else Const(None)]


class TableSink:
    """A decoder sink that writes every table into one folder."""

    def __init__(self, out_dir: Path, fmt: str = "csv") -> None:
        check_format(fmt)
        out_folder(out_dir)
        self._runs: dict[tuple[int, int], RunState] = {}
        self._background = Background()
        self._t = {name: open_table(out_dir, s, fmt, self._part_metadata, self._background)
                   for name, s in SPECS.items()}
        self.paths = {name: getattr(t, "path", out_dir / name) for name, t in self._t.items()}
        kinds = {"frames": _FrameRows, "timing": _TimingRows}
        self._rows = {name: kinds.get(name, _Rows)(t) for name, t in self._t.items()
                      if name != "samples"}
        self._samples = _Samples(self._t["samples"])
        frames = self._rows["frames"]
        assert isinstance(frames, _FrameRows)
        self._frames = frames
        self._frame_rows = frames.rows
        self._timing_rows = self._rows["timing"].rows

    def _part_metadata(self, key: tuple[Any, ...]) -> dict[str, str]:
        run = self._runs.get((int(key[0]), int(key[1]))) if len(key) >= 2 else None
        if run is None:
            return {}
        streams = [{"stream": s.stream, "name": s.name, "unit": s.unit, "type": chr(s.type),
                    "state": s.is_state, "period_us": s.period_us, "scale": s.scale,
                    "offset": s.offset} for s in sorted(run.streams.values(),
                                                        key=lambda s: s.stream)]
        return {"slipless.tick_hz": str(run.tick_hz), "slipless.fw": run.fw,
                "slipless.streams": json.dumps(streams)}

    @staticmethod
    def _time(run: RunState, tick: int) -> float | None:
        return tick / run.tick_hz if run.tick_hz else None

    def descriptor(self, run: RunState) -> None:
        self._runs[run.key] = run
        for s in sorted(run.streams.values(), key=lambda s: s.stream):
            self._rows["streams"].add((run.board, run.run, s.stream, s.name, s.unit, chr(s.type),
                                       int(s.is_state), s.period_us, s.scale, s.offset))

    def sample_frames(self, run: RunState, info: StreamInfo, seqs: np.ndarray,
                      ticks: np.ndarray, counts: np.ndarray, raw: np.ndarray) -> None:
        self._runs[run.key] = run
        self._samples.add(run, info, seqs, ticks, counts, raw)

    def samples(self, run: RunState, info: StreamInfo, seq: np.ndarray, tick: np.ndarray,
                raw: np.ndarray) -> None:
        """Samples one by one (each its own frame of one)."""
        self.sample_frames(run, info, seq, tick, np.ones(len(seq), dtype=np.int64), raw)

    def event(self, run: RunState, seq: int, tick: int, code: int, value: int) -> None:
        name = wire.EVENT_NAMES.get(code, f"code{code}")
        self._rows["events"].add((run.board, run.run, seq, tick, self._time(run, tick), name,
                                  code, value))

    def status(self, run: RunState, seq: int, f: dict[str, Any]) -> None:
        tick = f["tick"]
        self._rows["status"].add((run.board, run.run, seq, tick, self._time(run, tick),
                                  f["battery_mv"], f["temp_cdeg"] / 100.0, f["free_ram"],
                                  f["queue_high"], f["dropped"], f["late"], f["jitter_us"]))

    def reply(self, run: RunState, seq: int, kind: int, f: dict[str, Any]) -> None:
        self._rows["replies"].add((run.board, run.run, seq, wire.KIND_NAMES[kind],
                                   json.dumps(f, sort_keys=True)))

    def frame(self, run: RunState, seq: int, kind: int, fate: str, offset: int, origin: str,
              arrival: Arrival) -> None:
        # Called for every frame: one tuple appended, the rest is done per block.
        rows = self._frame_rows
        if kind < 0:  # a frame that never arrived: nothing is known but its number
            rows.append((run.board, run.run, seq, _MISSING_KIND, fate, None, None, None, None))
        else:
            rows.append((run.board, run.run, seq, kind, fate, origin or None, arrival.source,
                         offset if offset >= 0 else None,
                         arrival.wall_ns if arrival.wall_ns >= 0 else None))
        if len(rows) >= ROWS_PER_WRITE:
            self._frames.flush()

    def received_frames(self, run: RunState, seq0: int, offsets: np.ndarray, origin: str,
                        arrival: Arrival) -> None:
        self._frames.stretch(run, seq0, offsets, origin, arrival)

    def timing(self, run: RunState, seq: int, kind: int, tick: int, arrival: Arrival) -> None:
        rows = self._timing_rows
        rows.append((run.board, run.run, seq, kind, tick, arrival.source,
                     arrival.mono_ns if arrival.mono_ns >= 0 else None,
                     arrival.wall_ns if arrival.wall_ns >= 0 else None))
        if len(rows) >= ROWS_PER_WRITE:
            self._rows["timing"].flush()

    def close(self, runs: Sequence[RunState], missing: Any, corrupt: Any) -> None:
        for r in runs:
            self._runs.setdefault(r.key, r)
            reason = None
            if r.end is not None:
                reason = wire.END_REASON_NAMES.get(r.end["reason"], str(r.end["reason"]))
            self._rows["runs"].add((r.board, r.run, r.fw or None, r.tick_hz, r.received,
                                    missing(r) - corrupt(r), corrupt(r), r.duplicates, r.samples,
                                    r.events, reason, r.ticks_uncertain, r.undecodable))
        self._samples.flush()
        for rows in self._rows.values():
            rows.flush()
        try:
            for t in self._t.values():
                t.close()
        finally:
            self._background.close()
