"""Tidy tables out of the decoder: one writer per table, CSV or Parquet.

Rows arrive in batches as columns and are written straight through, so the
memory used does not grow with the capture. Column names carry their units
(`tick_us`, `board_time_s`, `battery_mV`).
"""

from __future__ import annotations

import csv
import json
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from slipless.decoder import Arrival, RunState, StreamInfo
from slipless.errors import InputError
from slipless.protocol import wire

FORMATS = ("csv", "parquet")

SCHEMAS: dict[str, tuple[str, ...]] = {
    "samples": ("board", "run", "stream", "name", "seq", "tick_us", "board_time_s", "raw",
                "value", "unit"),
    "events": ("board", "run", "seq", "tick_us", "board_time_s", "event", "code", "value"),
    "status": ("board", "run", "seq", "tick_us", "board_time_s", "battery_mV", "temp_C",
               "free_ram_B", "queue_high", "dropped_frames", "late_samples", "jitter_us"),
    "frames": ("board", "run", "seq", "kind", "fate", "origin", "source", "offset_B",
               "rx_wall_ns"),
    "timing": ("board", "run", "seq", "kind", "tick_us", "source", "rx_mono_ns", "rx_wall_ns"),
    "replies": ("board", "run", "seq", "kind", "fields"),
    "streams": ("board", "run", "stream", "name", "unit", "type", "state", "period_us", "scale",
                "offset"),
    "runs": ("board", "run", "fw", "tick_hz", "frames_received", "frames_missing",
             "frames_corrupt", "frames_duplicate", "samples", "events", "end_reason",
             "ticks_uncertain", "frames_undecodable"),
}


# Column types for formats that store them (Parquet). Raw samples of every
# sample type fit a float64 exactly (u32/i32 < 2**53), so one column holds all.
_FLOAT = {"board_time_s", "raw", "value", "temp_C", "scale", "offset"}
_STR = {"name", "unit", "event", "kind", "fate", "fields", "type", "fw", "end_reason", "origin"}


def _arrow_type(pa: Any, column: str) -> Any:
    if column in _FLOAT:
        return pa.float64()
    if column in _STR:
        return pa.string()
    return pa.int64()


class _CsvTable:
    def __init__(self, path: Path, columns: Sequence[str]) -> None:
        self._file = path.open("w", newline="", encoding="utf-8")
        self._writer = csv.writer(self._file)
        self._writer.writerow(columns)

    def write(self, cols: Sequence[Any]) -> None:
        lists = [c.tolist() if isinstance(c, np.ndarray) else c for c in cols]
        self._writer.writerows(zip(*lists))

    def close(self) -> None:
        self._file.close()


class _ParquetTable:
    def __init__(self, path: Path, columns: Sequence[str]) -> None:
        try:
            import pyarrow as pa
            import pyarrow.parquet as pq
        except ImportError as exc:
            raise InputError("--format parquet needs pyarrow: pip install 'slipless[parquet]'") from exc
        self._pa, self._pq = pa, pq
        self._path = path
        self._columns = list(columns)
        self._schema = pa.schema([(c, _arrow_type(pa, c)) for c in columns])
        self._writer = pq.ParquetWriter(path, self._schema)

    def write(self, cols: Sequence[Any]) -> None:
        arrays = [self._pa.array(c, type=f.type, from_pandas=False) if not isinstance(c, np.ndarray)
                  else self._pa.array(c.astype(f.type.to_pandas_dtype()), type=f.type)
                  for c, f in zip(cols, self._schema)]
        self._writer.write_table(self._pa.Table.from_arrays(arrays, schema=self._schema))

    def close(self) -> None:
        self._writer.close()


class TableSink:
    """A decoder sink that writes every table into one folder."""

    def __init__(self, out_dir: Path, fmt: str = "csv") -> None:
        if fmt not in FORMATS:
            raise InputError(f"unknown table format {fmt!r}; choose one of {', '.join(FORMATS)}")
        out_dir.mkdir(parents=True, exist_ok=True)
        kind = _CsvTable if fmt == "csv" else _ParquetTable
        self.paths = {name: out_dir / f"{name}.{fmt}" for name in SCHEMAS}
        self._t = {name: kind(self.paths[name], cols) for name, cols in SCHEMAS.items()}

    @staticmethod
    def _time(run: RunState, tick: Any) -> Any:
        return tick / run.tick_hz if run.tick_hz else tick * 0.0

    def descriptor(self, run: RunState) -> None:
        rows = [(run.board, run.run, s.stream, s.name, s.unit, chr(s.type), int(s.is_state),
                 s.period_us, s.scale, s.offset) for s in sorted(run.streams.values(),
                                                                 key=lambda s: s.stream)]
        self._t["streams"].write(list(zip(*rows)))

    def samples(self, run: RunState, info: StreamInfo, seq: np.ndarray, tick: np.ndarray,
                raw: np.ndarray) -> None:
        n = raw.size
        value = raw.astype(np.float64) * info.scale + info.offset
        self._t["samples"].write([
            np.full(n, run.board), np.full(n, run.run), np.full(n, info.stream),
            [info.name] * n, seq, tick, tick / run.tick_hz, raw, value, [info.unit] * n,
        ])

    def event(self, run: RunState, seq: int, tick: int, code: int, value: int) -> None:
        name = wire.EVENT_NAMES.get(code, f"code{code}")
        self._t["events"].write([[run.board], [run.run], [seq], [tick],
                                 [self._time(run, tick)], [name], [code], [value]])

    def status(self, run: RunState, seq: int, f: dict[str, Any]) -> None:
        tick = f["tick"]
        self._t["status"].write([[run.board], [run.run], [seq], [tick], [self._time(run, tick)],
                                 [f["battery_mv"]], [f["temp_cdeg"] / 100.0], [f["free_ram"]],
                                 [f["queue_high"]], [f["dropped"]], [f["late"]],
                                 [f["jitter_us"]]])

    def reply(self, run: RunState, seq: int, kind: int, f: dict[str, Any]) -> None:
        self._t["replies"].write([[run.board], [run.run], [seq], [wire.KIND_NAMES[kind]],
                                  [json.dumps(f, sort_keys=True)]])

    def frame(self, run: RunState, seq: int, kind: int, fate: str, offset: int, origin: str,
              arrival: Arrival) -> None:
        name = wire.KIND_NAMES.get(kind, "" if kind < 0 else f"kind{kind}")
        self._t["frames"].write([[run.board], [run.run], [seq], [name], [fate], [origin],
                                 [arrival.source], [offset], [arrival.wall_ns]])

    def timing(self, run: RunState, seq: int, kind: int, tick: int, arrival: Arrival) -> None:
        self._t["timing"].write([[run.board], [run.run], [seq], [wire.KIND_NAMES[kind]], [tick],
                                 [arrival.source], [arrival.mono_ns], [arrival.wall_ns]])

    def close(self, runs: Sequence[RunState], missing: Any, corrupt: Any) -> None:
        rows = []
        for r in runs:
            reason = ""
            if r.end is not None:
                reason = wire.END_REASON_NAMES.get(r.end["reason"], str(r.end["reason"]))
            rows.append((r.board, r.run, r.fw, r.tick_hz, r.received, missing(r) - corrupt(r),
                         corrupt(r), r.duplicates, r.samples, r.events, reason,
                         r.ticks_uncertain, r.undecodable))
        if rows:
            self._t["runs"].write(list(zip(*rows)))
        for t in self._t.values():
            t.close()
