"""Loading runs for the pulse analysis: every channel of a run in board time.

Captures and raw streams go through the decoder; a folder of tables written by
`slipless decode` is read back. Either way a run becomes named series of
(board time in s, value in the stream's unit) plus its coil events.
"""

from __future__ import annotations

from collections import defaultdict
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from slipless.decoder import Decoder, NullSink, RunState, StreamInfo
from slipless.errors import InputError
from slipless.inputs import Source, classify, feed_all
from slipless.protocol import wire
from slipless.tables import read_decoded


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
    cols = read_decoded(folder, "samples", ("board", "run", "name", "board_time_s", "value",
                                            "unit"))
    if cols is None:
        raise InputError(f"{folder}: is a folder without samples.csv or a samples/ Parquet dataset "
                         "(expected a capture file or a folder written by `slipless decode`)")
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
    ev = read_decoded(folder, "events", ("board", "run", "event", "board_time_s", "value"))
    if ev is not None:
        coil = ev["event"] == "coil"
        for key in out:
            sel = coil & (ev["board"].astype(int) == key[0]) & (ev["run"].astype(int) == key[1])
            t = ev["board_time_s"][sel].astype(float)
            order = np.argsort(t, kind="stable")
            out[key].coil_t_s = t[order]
            out[key].coil_state = ev["value"][sel].astype(int)[order]
    return [out[k] for k in sorted(out)]
