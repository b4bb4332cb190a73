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
from slipless.io.folders import out_folder
from slipless.io.table_files import find_table, open_table, read_columns
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
    Spec,
    TableWriter,
    TickSeconds,
    check_format,
    spec,
)
from slipless.protocol import wire

__all__ = ["FORMATS", "SCHEMAS", "SPECS", "TableSink", "read_decoded"]

ROWS_PER_WRITE = 65_536  # single rows gathered before a writer formats them in bulk
_RUN = (("board", INT), ("run", INT))
_TIME = (("tick_us", INT, "us"), ("board_time_s", FLOAT, "s"))

SPECS: dict[str, Spec] = {s.name: s for s in (
    spec("samples", [*_RUN, ("stream", INT), ("name", STR), ("seq", INT), *_TIME,
                     ("raw", INT, "count"), ("value", FLOAT, "see unit"), ("unit", STR),
                     ("raw_float", FLOAT)]),
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
SPECS = {k: Spec(v.name, v.columns, ("board", "run"), "stream" if k == "samples" else "")
         for k, v in SPECS.items()}  # samples: a file per stream, so streams encode in parallel
# Column names per table, as `slipless align` repeats them in its own tables (it
# writes raw as float, so it has no raw_float).
SCHEMAS: dict[str, tuple[str, ...]] = {
    name: tuple(n for n in s.names if n != "raw_float") for name, s in SPECS.items()}



def read_decoded(folder: Path, name: str, columns: Sequence[str]) -> dict[str, np.ndarray] | None:
    """Columns of one table in a folder written by `slipless decode` (CSV or
    Parquet), typed as the table declares them; None when there is no such table."""
    path = find_table(folder, name)
    if path is None:
        return None
    return read_columns(path, columns, {c.name: c.kind for c in SPECS[name].columns})


_CODED_BITS = 16  # sample types of at most this many bits are formatted once per value


_KIND_NAMES = wire.KIND_NAMES


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
            self.writer.write([list(c) for c in zip(*self.rows)])
            self.rows.clear()  # the same list: the per-frame callbacks hold it


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
        self._rows = {name: _Rows(t) for name, t in self._t.items() if name != "samples"}
        self._frame_rows = self._rows["frames"].rows
        self._timing_rows = self._rows["timing"].rows
        self._codes: dict[tuple[int, float, float], tuple[np.ndarray, np.ndarray, int]] = {}

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

    def _coded(self, info: StreamInfo) -> tuple[np.ndarray, np.ndarray, int] | None:
        """Every raw value a <= 16-bit stream can send, and its scaled value."""
        dt = info.dtype
        if dt.kind not in "iu" or dt.itemsize * 8 > _CODED_BITS:
            return None
        key = (info.type, info.scale, info.offset)
        got = self._codes.get(key)
        if got is None:
            lo = int(np.iinfo(dt).min)
            raw = np.arange(lo, int(np.iinfo(dt).max) + 1, dtype=np.int64)
            got = self._codes[key] = (raw, raw.astype(np.float64) * info.scale + info.offset, lo)
        return got

    def samples(self, run: RunState, info: StreamInfo, seq: np.ndarray, tick: np.ndarray,
                raw: np.ndarray) -> None:
        self._runs[run.key] = run
        coded = self._coded(info)
        raw_col: Any
        value_col: Any
        raw_float: Any = Const(None)
        if coded is not None:
            raws, values, lo = coded
            codes = raw.astype(np.int32) - lo
            raw_col = Coded(codes, raws, ("raw", info.type))
            value_col = Coded(codes, values, ("value", info.type, info.scale, info.offset))
        else:
            value_col = raw.astype(np.float64) * info.scale + info.offset
            if raw.dtype.kind == "f":  # float samples: raw_float, so raw stays an int column
                raw_col, raw_float = Const(None), raw.astype(np.float64)
            else:
                raw_col = raw.astype(np.int64)
        self._t["samples"].write([
            Const(run.board), Const(run.run), Const(info.stream), Const(info.name), seq, tick,
            TickSeconds(tick, run.tick_hz), raw_col, value_col, Const(info.unit), raw_float])

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
            rows.append((run.board, run.run, seq, None, fate, None, None, None, None, None))
        else:
            wall = arrival.wall_ns if arrival.wall_ns >= 0 else None
            rows.append((run.board, run.run, seq, _KIND_NAMES.get(kind) or f"kind{kind}", fate,
                         origin or None, arrival.source, offset if offset >= 0 else None, wall,
                         wall))
        if len(rows) >= ROWS_PER_WRITE:
            self._rows["frames"].flush()

    def timing(self, run: RunState, seq: int, kind: int, tick: int, arrival: Arrival) -> None:
        rows = self._timing_rows
        wall = arrival.wall_ns if arrival.wall_ns >= 0 else None
        rows.append((run.board, run.run, seq, _KIND_NAMES[kind], tick, arrival.source,
                     arrival.mono_ns if arrival.mono_ns >= 0 else None, wall, wall))
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
        for rows in self._rows.values():
            rows.flush()
        try:
            for t in self._t.values():
                t.close()
        finally:
            self._background.close()
