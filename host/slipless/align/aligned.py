"""`slipless align`: every sample, event and status row on the laptop's clock.

Per board and run: fit the board clock to the laptop's monotonic clock
(clockmodel.fit_clock), then turn monotonic time into UTC with the input's
wall/monotonic anchor. Channels of one board share its clock, so they align
exactly through their ticks; each board gets its own mapping. Writes the
aligned tables, the wide grid table and clock.json into the output folder.
"""

from __future__ import annotations

import json
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from slipless.align.clockfit import FitError
from slipless.align.clockmodel import ClockModel, Exchanges, fit_clock
from slipless.align.collect import Collected, Key, RunTimes, collect
from slipless.align.grid import (
    MAX_GRID_ROWS,
    column_name,
    gaps_after,
    grid_rows,
    grid_span,
    on_grid,
    samples_needed,
)
from slipless.align.tables import Table
from slipless.decode.store import CHUNK_SAMPLES, ChannelStore
from slipless.decode.tables import SCHEMAS
from slipless.errors import InputError
from slipless.io.folders import out_folder
from slipless.io.table_io import Coded, Const, TickSeconds
from slipless.protocol import wire

ANCHOR_MATCH_NS = 1_000_000_000  # inputs whose wall-mono anchors agree this well share a clock
TIME_COL = "laptop_utc_ns"
_I64 = 1 << 63  # board ticks and host stamps are u64 on the wire; numpy holds int64
_FLOAT = {"board_time_s", "raw", "value", "temp_C"}
_STR = {"name", "unit", "event"}
# Long runs are written a piece at a time, so memory does not grow with the run:
SAMPLE_CHUNK = CHUNK_SAMPLES  # samples of one channel per write (runstore: about 30 MB of columns)
GRID_CHUNK_ROWS = 1 << 20  # grid rows per write at most: 8 MB a column
GRID_CHUNK_SAMPLES = CHUNK_SAMPLES  # ... and about this many samples of a channel behind them
_CODED_BITS = 16  # raw types this narrow: each distinct value's text is made once


@dataclass
class RunClock:
    key: Key
    tick_hz: float
    model: ClockModel | None = None
    anchor_ns: int | None = None  # UTC minus laptop monotonic, ns
    notes: list[str] = field(default_factory=list)

    @property
    def has_utc(self) -> bool:
        return self.model is not None and self.anchor_ns is not None

    def utc_ns(self, ticks: np.ndarray) -> np.ndarray | None:
        if self.model is None or self.anchor_ns is None:
            return None
        return self.model.laptop_ns(ticks) + self.anchor_ns


@dataclass
class AlignResult:
    clocks: dict[Key, RunClock]
    grid_rows: int = 0
    grid_columns: list[str] = field(default_factory=list)
    grid_clock: str = TIME_COL
    notes: list[str] = field(default_factory=list)

    def to_json(self) -> dict[str, Any]:
        runs = []
        for key in sorted(self.clocks):
            c = self.clocks[key]
            row: dict[str, Any] = {"board": key[0], "run": key[1], "utc_minus_mono_ns": c.anchor_ns}
            row.update(c.model.to_json() if c.model is not None else {"model": None})
            row["notes"] = c.notes + (c.model.notes if c.model is not None else [])
            runs.append(row)
        return {"runs": runs, "grid": {"clock": self.grid_clock, "rows": self.grid_rows,
                                       "columns": self.grid_columns}, "notes": self.notes}


def align_files(inputs: Sequence[Path], out: Path, fmt: str, period_ns: int, window_s: float,
                progress: Any = None, mirrors: Sequence[Path] = ()) -> AlignResult:
    return align_collected(collect(inputs, mirrors, progress), out, fmt, period_ns, window_s)


def align_collected(col: Collected, out: Path, fmt: str, period_ns: int,
                    window_s: float, asymmetry_s: float = 0.0) -> AlignResult:
    """Fit every run's clock and write the aligned tables, the grid and clock.json.
    asymmetry_s: least latency board -> laptop minus laptop -> board (fit_clock)."""
    out_folder(out)
    extents = _extents(col)
    clocks = {key: fit_run(col, key, extents[key], window_s, asymmetry_s) for key in sorted(extents)}
    result = AlignResult(clocks, notes=list(col.decoder.notes))
    _write_samples(col, clocks, out, fmt)
    _write_events(col, clocks, out, fmt)
    _write_status(col, clocks, out, fmt)
    write_grid(col, clocks, out, fmt, period_ns, result)
    (out / "clock.json").write_text(json.dumps(result.to_json(), indent=2) + "\n", encoding="utf-8")
    return result


def _extents(col: Collected) -> dict[Key, tuple[int, int]]:
    """Lowest and highest board tick each run's rows need a time for."""
    span: dict[Key, list[int]] = {}

    def add(key: Key, lo: int, hi: int) -> None:
        s = span.setdefault(key, [lo, hi])
        s[0], s[1] = min(s[0], lo), max(s[1], hi)

    for (b, r, _), ch in col.sink.channels.items():
        ticks = ch.tick_range()
        if ticks is not None:
            add((b, r), *ticks)
    for b, r, _, tick, _, _ in col.sink.events:
        add((b, r), tick, tick)
    for b, r, _, f in col.sink.status_rows:
        add((b, r), f["tick"], f["tick"])
    for key, times in col.sink.times.items():
        ticks = times.timing.tick_range()
        if ticks is not None:
            add(key, *ticks)
    return {k: (v[0], v[1]) for k, v in span.items()}


def fit_run(col: Collected, key: Key, extent: tuple[int, int], window_s: float,
            asymmetry_s: float = 0.0) -> RunClock:
    run = col.decoder.runs.get(key)
    clock = RunClock(key, float(run.tick_hz) if run is not None and run.tick_hz else 1e6)
    times = col.sink.times.get(key, RunTimes())
    rows = times.rows()  # rows beyond int64 are left out there: no tick or stamp of ours
    rows = rows[(rows[:, 1] >= 0) & (rows[:, 0] >= 0)]
    if rows.shape[0] == 0:
        clock.notes.append("no laptop receive times (raw stream or mirror file only): "
                           "no laptop time can be given")
        return clock
    inputs, counts = np.unique(rows[:, 3], return_counts=True)
    main = int(inputs[np.argmax(counts)])
    same = _same_clock(col.anchors, main, [int(i) for i in inputs])
    if len(same) < inputs.size:
        clock.notes.append(f"receive times from {inputs.size - len(same)} input(s) recorded on "
                           "another laptop clock were left out of the fit")
    rows = rows[np.isin(rows[:, 3], same)]
    ex = _exchanges(times, same)
    try:
        clock.model = fit_clock(rows[:, 0], rows[:, 1], ex, clock.tick_hz, window_s, extent,
                                asymmetry_s)
    except FitError as exc:
        clock.notes.append(f"no clock fit: {exc}")
        return clock
    clock.anchor_ns = col.anchors[main]
    if clock.anchor_ns is None:
        clock.notes.append("receive times carry no wall-clock date: no UTC time can be given")
    return clock


def _same_clock(anchors: Sequence[int | None], main: int, inputs: list[int]) -> list[int]:
    a0 = anchors[main]
    if a0 is None:
        return [main]
    return [i for i in inputs if i == main or (
        (a := anchors[i]) is not None and abs(a - a0) < ANCHOR_MATCH_NS)]


def _exchanges(times: RunTimes, inputs: list[int]) -> Exchanges:
    rows = [(f[0], f[1], f[2], times.sync_rx[seq][0]) for seq, f in times.sync_fields.items()
            if seq in times.sync_rx and times.sync_rx[seq][1] in inputs
            and times.sync_rx[seq][0] >= 0 and max(f) < _I64]  # u64 fields: garbage can overflow
    a = np.array(rows, dtype=np.int64).reshape(-1, 4)
    return Exchanges(a[:, 0], a[:, 1], a[:, 2], a[:, 3])


def _columns(name: str) -> list[tuple[str, str]]:
    cols = list(SCHEMAS[name]) + [TIME_COL]
    return [(c, "float" if c in _FLOAT else "str" if c in _STR else "int") for c in cols]


def _utc(clock: RunClock | None, ticks: np.ndarray) -> Any:
    t = clock.utc_ns(ticks) if clock is not None else None
    return t if t is not None else Const(None)


def _write_samples(col: Collected, clocks: dict[Key, RunClock], out: Path, fmt: str) -> None:
    table = Table(out / f"samples.{fmt}", fmt, _columns("samples"), utc_twins={TIME_COL: "laptop_utc"})
    for (b, r, s) in sorted(col.sink.channels):
        ch = col.sink.channels[(b, r, s)]
        info = ch.info
        clock = clocks.get((b, r))
        hz = clock.tick_hz if clock is not None else 1e6
        coded = _code_tables(ch)
        for lo, hi in ch.chunks(SAMPLE_CHUNK):
            tick = ch.ticks(lo, hi)
            table.write([Const(b), Const(r), Const(s), Const(info.name), ch.seqs(lo, hi), tick,
                         _seconds(tick, hz), *_raw_and_value(ch, lo, hi, coded),
                         Const(info.unit), _utc(clock, tick)])
    table.close()


def _seconds(tick: np.ndarray, hz: float) -> Any:
    """tick / hz; as TickSeconds (the same values) when hz is a whole number."""
    return TickSeconds(tick, int(hz)) if hz > 0 and float(hz).is_integer() else tick / hz


def _code_tables(ch: ChannelStore) -> tuple[np.ndarray, np.ndarray, int] | None:
    """Every raw value a <= 16-bit stream can send as float, its scaled value, the lowest."""
    info = ch.info
    dt = info.dtype
    if dt.kind not in "iu" or dt.itemsize * 8 > _CODED_BITS:
        return None
    lo = int(np.iinfo(dt).min)
    raw = np.arange(lo, int(np.iinfo(dt).max) + 1, dtype=np.int64).astype(np.float64)
    return raw, raw * info.scale + info.offset, lo


def _raw_and_value(ch: ChannelStore, lo: int, hi: int,
                   coded: tuple[np.ndarray, np.ndarray, int] | None) -> tuple[Any, Any]:
    """The raw (as float) and value columns of samples lo..hi: raw * scale + offset."""
    info = ch.info
    raw = ch.raw_values(lo, hi)
    if coded is None:
        raw_f = raw.astype(np.float64)
        return raw_f, raw_f * info.scale + info.offset
    raws, values, low = coded
    codes = raw.astype(np.int32) - low
    return (Coded(codes, raws, ("raw_f", info.type)),
            Coded(codes, values, ("value", info.type, info.scale, info.offset)))


def _write_events(col: Collected, clocks: dict[Key, RunClock], out: Path, fmt: str) -> None:
    table = Table(out / f"events.{fmt}", fmt, _columns("events"), utc_twins={TIME_COL: "laptop_utc"})
    rows = sorted(col.sink.events, key=lambda e: (e[0], e[1], e[3], e[2]))
    for key in sorted({(e[0], e[1]) for e in rows}):
        ev = [e for e in rows if (e[0], e[1]) == key]
        tick = np.array([e[3] for e in ev], dtype=np.int64)
        clock = clocks.get(key)
        hz = clock.tick_hz if clock is not None else 1e6
        table.write([[e[0] for e in ev], [e[1] for e in ev], [e[2] for e in ev], tick, tick / hz,
                     [wire.EVENT_NAMES.get(e[4], f"code{e[4]}") for e in ev], [e[4] for e in ev],
                     [e[5] for e in ev], _utc(clock, tick)])
    table.close()


def _write_status(col: Collected, clocks: dict[Key, RunClock], out: Path, fmt: str) -> None:
    table = Table(out / f"status.{fmt}", fmt, _columns("status"), utc_twins={TIME_COL: "laptop_utc"})
    rows = sorted(col.sink.status_rows, key=lambda s: (s[0], s[1], s[2]))
    for key in sorted({(s[0], s[1]) for s in rows}):
        st = [s for s in rows if (s[0], s[1]) == key]
        f = [s[3] for s in st]
        tick = np.array([x["tick"] for x in f], dtype=np.int64)
        clock = clocks.get(key)
        hz = clock.tick_hz if clock is not None else 1e6
        table.write([[s[0] for s in st], [s[1] for s in st], [s[2] for s in st], tick, tick / hz,
                     [x["battery_mv"] for x in f], [x["temp_cdeg"] / 100.0 for x in f],
                     [x["free_ram"] for x in f], [x["queue_high"] for x in f],
                     [x["dropped"] for x in f], [x["late"] for x in f], [x["jitter_us"] for x in f],
                     _utc(clock, tick)])
    table.close()


def write_grid(col: Collected, clocks: dict[Key, RunClock], out: Path, fmt: str, period_ns: int,
               result: AlignResult) -> None:
    """The wide table: one column per board and stream on one grid."""
    to_time: dict[Key, Callable[[np.ndarray], Any]] = {
        k: c.utc_ns for k, c in clocks.items() if c.has_utc}
    # runs with samples (a board's idle boot run has none and needs no place on the grid)
    sampled = {k[:2] for k, ch in col.sink.channels.items() if ch.n} & set(clocks)
    boards = {b for b, _ in sampled}
    rates = {clocks[k].tick_hz for k in sampled}
    if not to_time and len(boards) == 1 and len(rates) == 1:
        # one board, no laptop time: its own clock (ticks since boot) still aligns its runs
        hz = rates.pop()
        to_time = {key: lambda t: np.rint(np.asarray(t) * (1e9 / hz)).astype(np.int64)
                   for key in sorted(sampled)}
        result.grid_clock = "board_time_ns"
        result.notes.append("no laptop time: the grid is on the board's own clock (board_time_ns)")
    elif not to_time:
        raise InputError("no input carries laptop receive times (raw streams or mirror files): "
                         "laptop time cannot be given, so several runs cannot share a grid; "
                         "align a capture (.slcap) or a btsnoop log")
    left_out = sorted(k for k in clocks if k not in to_time and k in sampled)
    if left_out:
        result.notes.append("left out of the grid (no laptop time): " + ", ".join(
            f"board {b} run {r}" for b, r in left_out))
    series = _series(col, to_time)
    parts = [p for ps in series.values() for p in ps]
    first = min((p.t_first for p in parts), default=0)
    last = max((p.t_last for p in parts), default=-1)
    rows = max(0, (last - first) // period_ns + 1)
    if rows > MAX_GRID_ROWS:
        raise InputError(f"--grid {period_ns} ns gives {rows:,} rows (more than {MAX_GRID_ROWS:,}); "
                         "choose a coarser grid")
    start, count = grid_span(first, last, period_ns)
    names = sorted(series)
    table = Table(out / f"grid.{fmt}", fmt, [(result.grid_clock, "int")] + [(n, "float") for n in names])
    step = _grid_chunk_rows(parts, period_ns)
    for lo in range(0, count, step):
        grid = grid_rows(start, period_ns, lo, min(count, lo + step))
        columns: list[Any] = [grid]
        for name in names:
            col_v = np.full(grid.size, np.nan)
            for part in series[name]:
                vals = part.on_grid(grid)
                fill = np.isnan(col_v)
                col_v[fill] = vals[fill]
            columns.append(col_v)
        table.write(columns)
    table.close()
    result.grid_rows, result.grid_columns = count, names


def _grid_chunk_rows(parts: Sequence[GridPart], period_ns: int) -> int:
    """Grid rows per write: at most GRID_CHUNK_ROWS, and few enough that the
    densest channel has about GRID_CHUNK_SAMPLES samples behind them."""
    densest_ns = min((p.step_ns for p in parts), default=float(period_ns))
    return max(1, min(GRID_CHUNK_ROWS, int(GRID_CHUNK_SAMPLES * densest_ns // period_ns)))


class GridPart:
    """One run's channel for the grid: its samples with times on the grid's
    clock, looked up by time through the first sample of each segment."""

    def __init__(self, ch: ChannelStore, to_time: Callable[[np.ndarray], Any]) -> None:
        self.ch, self.info, self.to_time = ch, ch.info, to_time
        _, first_tick, count = ch.frame_ends()
        self.first_times = np.asarray(to_time(first_tick))
        self.first_index = np.cumsum(count) - count
        lo, hi = ch.tick_range() or (0, 0)
        ends = np.asarray(to_time(np.array([lo, hi], dtype=np.int64)))
        self.t_first, self.t_last = int(ends[0]), int(ends[1])
        tick_ns = (self.t_last - self.t_first) / (hi - lo) if hi > lo else 1000.0
        self.step_ns = max(self.info.period_us, 1) * tick_ns  # one sample period, roughly

    def on_grid(self, grid: np.ndarray) -> np.ndarray:
        """align_grid.on_grid over the samples around these grid times only."""
        info = self.info
        lo, hi = samples_needed(self.first_times, self.first_index, self.ch.n,
                                int(grid[0]), int(grid[-1]))
        tick = self.ch.ticks(lo, hi)
        # Sample ticks step by period_us (the decoder's rule), so gaps are found in ticks.
        return on_grid(grid, self.to_time(tick), self.ch.values(lo, hi),
                       gaps_after(tick, info.period_us), info.period_us * 1e3, info.is_state)


def _series(col: Collected, to_time: dict[Key, Any]) -> dict[str, list[GridPart]]:
    """Per column name, one part per run."""
    series: dict[str, list[GridPart]] = {}
    for (b, r, s) in sorted(col.sink.channels):
        if (b, r) not in to_time:
            continue
        ch = col.sink.channels[(b, r, s)]
        if ch.n == 0:
            continue
        series.setdefault(column_name(b, ch.info.name, ch.info.unit), []).append(
            GridPart(ch, to_time[(b, r)]))
    return series
