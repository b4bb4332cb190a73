"""Loading runs for the pulse analysis: every channel of a run in board time.

Captures and raw streams go through the decoder; a folder of tables written by
`slipless decode` is read back. Either way a run becomes named series of
(board time in s, value in the stream's unit) plus its coil events.
"""

from __future__ import annotations

import csv
from collections import defaultdict
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from slipless.decoder import Decoder, NullSink, RunState, StreamInfo
from slipless.errors import InputError
from slipless.inputs import Source, classify, feed_all
from slipless.protocol import wire


@dataclass
class Series:
    t_s: np.ndarray
    v: np.ndarray
    unit: str = ""


@dataclass
class RunData:
    board: int
    run: int
    streams: dict[str, Series] = field(default_factory=dict)
    coil_t_s: np.ndarray = field(default_factory=lambda: np.zeros(0))
    coil_state: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))

    @property
    def label(self) -> str:
        return f"board {self.board} run {self.run}"


class ArraySink(NullSink):
    """Keeps samples as numpy arrays per (board, run, stream) and the coil events."""

    def __init__(self) -> None:
        self._parts: dict[tuple[int, int, int], list[tuple[np.ndarray, np.ndarray]]] = \
            defaultdict(list)
        self._info: dict[tuple[int, int, int], tuple[str, str]] = {}
        self._hz: dict[tuple[int, int], int] = {}
        self._events: dict[tuple[int, int], list[tuple[int, int]]] = defaultdict(list)

    def samples(self, run: RunState, info: StreamInfo, seq: np.ndarray, tick: np.ndarray,
                raw: np.ndarray) -> None:
        key = (run.board, run.run, info.stream)
        self._info[key] = (info.name, info.unit)
        self._hz[run.key] = run.tick_hz
        value = raw.astype(np.float64) * info.scale + info.offset
        self._parts[key].append((tick.copy(), value))

    def event(self, run: RunState, seq: int, tick: int, code: int, value: int) -> None:
        if code == wire.EV_COIL:
            self._events[run.key].append((tick, value))

    def runs(self, tick_hz: dict[tuple[int, int], int]) -> list[RunData]:
        out: dict[tuple[int, int], RunData] = {}
        for (board, run, _), parts in sorted(self._parts.items()):
            hz = tick_hz.get((board, run)) or self._hz.get((board, run)) or 1_000_000
            tick = np.concatenate([p[0] for p in parts])
            value = np.concatenate([p[1] for p in parts])
            name, unit = self._info[(board, run, _)]
            rd = out.setdefault((board, run), RunData(board, run))
            rd.streams[name] = _series(tick / hz, value, unit)
        for key, evs in self._events.items():
            rd = out.setdefault(key, RunData(*key))
            hz = tick_hz.get(key) or 1_000_000
            arr = np.array(sorted(set(evs)), dtype=np.int64).reshape(-1, 2)
            rd.coil_t_s, rd.coil_state = arr[:, 0] / hz, arr[:, 1]
        return [out[k] for k in sorted(out)]


def _series(t: np.ndarray, v: np.ndarray, unit: str) -> Series:
    """Sorted by time, one sample per time (resent frames arrive twice)."""
    order = np.argsort(t, kind="stable")
    t, v = t[order], v[order]
    keep = np.ones(t.size, dtype=bool)
    keep[1:] = t[1:] != t[:-1]
    return Series(t[keep], v[keep], unit)


def decode_runs(chunks_per_input: Iterable[Iterable[bytes]]) -> list[RunData]:
    """Decode byte chunks (one iterable per input) into runs."""
    sink = ArraySink()
    dec = Decoder(sink)
    for chunks in chunks_per_input:
        dec.new_input()
        for c in chunks:
            dec.feed(c)
    dec.finish()
    return sink.runs({k: r.tick_hz for k, r in dec.runs.items()})


def decode_sources(sources: Sequence[Source]) -> list[RunData]:
    """Decode inputs of any kind `slipless decode` reads (merged the same way)."""
    sink = ArraySink()
    dec = Decoder(sink)
    feed_all(dec, sources)
    return sink.runs({k: r.tick_hz for k, r in dec.runs.items()})


def load_runs(inputs: Sequence[Path], mirrors: Sequence[Path] = ()) -> list[RunData]:
    """Captures, raw streams, mirror files or folders of decoded tables -> runs."""
    runs: list[RunData] = []
    for d in (p for p in inputs if p.is_dir()):
        runs += read_tables(d)
    files = [p for p in inputs if not p.is_dir()]
    if files or mirrors:
        sources = [classify(p) for p in files] + [classify(p, mirror=True) for p in mirrors]
        decoded = decode_sources(sources)
        if not decoded:
            names = ", ".join(str(s.path) for s in sources)
            raise InputError(f"{names}: no slipless frames found (not a capture, or wholly damaged)")
        runs += decoded
    return runs


# ---- folders written by `slipless decode` --------------------------------------------
def read_tables(folder: Path) -> list[RunData]:
    samples = _find(folder, "samples")
    if samples is None:
        raise InputError(f"{folder}: is a folder without samples.csv or samples.parquet "
                         "(expected a capture file or a folder written by `slipless decode`)")
    cols = _read(samples, ("board", "run", "name", "board_time_s", "value", "unit"))
    keys = list(zip(cols["board"].astype(int).tolist(), cols["run"].astype(int).tolist(),
                    cols["name"].tolist()))
    groups: dict[tuple[int, int, str], list[int]] = defaultdict(list)
    for i, k in enumerate(keys):
        groups[k].append(i)
    out: dict[tuple[int, int], RunData] = {}
    t_all = cols["board_time_s"].astype(float)
    v_all = cols["value"].astype(float)
    for (board, run, name), idx in groups.items():
        rd = out.setdefault((board, run), RunData(board, run))
        ix = np.asarray(idx)
        rd.streams[name] = _series(t_all[ix], v_all[ix], str(cols["unit"][ix[0]]))
    events = _find(folder, "events")
    if events is not None:
        ev = _read(events, ("board", "run", "event", "board_time_s", "value"))
        coil = ev["event"] == "coil"
        for key in out:
            sel = coil & (ev["board"].astype(int) == key[0]) & (ev["run"].astype(int) == key[1])
            t = ev["board_time_s"][sel].astype(float)
            order = np.argsort(t, kind="stable")
            out[key].coil_t_s = t[order]
            out[key].coil_state = ev["value"][sel].astype(int)[order]
    return [out[k] for k in sorted(out)]


def _find(folder: Path, name: str) -> Path | None:
    for ext in ("csv", "parquet"):
        if (folder / f"{name}.{ext}").is_file():
            return folder / f"{name}.{ext}"
    return None


def _read(path: Path, columns: Sequence[str]) -> dict[str, np.ndarray]:
    try:
        if path.suffix == ".parquet":
            import pyarrow.parquet as pq

            t = pq.read_table(path, columns=list(columns))
            return {c: np.asarray(t.column(c).to_pylist(), dtype=object) for c in columns}
        with path.open(newline="", encoding="utf-8") as f:
            reader = csv.reader(f)
            header = next(reader, [])
            missing = [c for c in columns if c not in header]
            if missing:
                raise InputError(f"{path}: not a slipless table (no column {missing[0]!r})")
            pos = [header.index(c) for c in columns]
            rows: list[Any] = [[r[i] for i in pos] for r in reader if r]
    except ImportError as exc:
        raise InputError(f"{path}: reading Parquet needs pyarrow: pip install 'slipless[parquet]'") \
            from exc
    except (OSError, ValueError, KeyError) as exc:
        raise InputError(f"{path}: cannot read ({exc})") from exc
    arr = np.array(rows, dtype=object).reshape(-1, len(columns))
    return {c: arr[:, i] for i, c in enumerate(columns)}
