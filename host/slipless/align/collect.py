"""Everything `slipless align` needs from the decoder, kept in memory compactly.

One pass over the inputs with a sink that keeps the samples (one
runstore.ChannelStore per stream of a run: segments and raw values), the
events, the status reports, every receive time and every time-sync reply,
each receive time tagged with the input it came from: inputs recorded in
different laptop sessions do not share a monotonic clock.
"""

from __future__ import annotations

from array import array
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from slipless.decode.decoder import Arrival, Decoder, NullSink, RunState, StreamInfo
from slipless.decode.store import ChannelStore
from slipless.io import capture
from slipless.io.inputs import Source, check_decoded, classify_all, feed_all
from slipless.protocol import wire

Key = tuple[int, int]  # (board, run)
ChannelKey = tuple[int, int, int]  # (board, run, stream)


class TimingRows:
    """(tick, mono_ns, wall_ns, input) of every timed frame, in arrival order.

    Held as one flat int64 buffer (32 bytes a frame; a tuple of Python ints
    takes about 220): an 8-hour run has some 600,000 of them. A row with a
    value beyond int64 (u64 garbage on the wire) is kept apart as a tuple."""

    WIDTH = 4

    def __init__(self) -> None:
        self._flat = array("q")
        self._odd: list[tuple[int, ...]] = []

    def append(self, row: tuple[int, int, int, int]) -> None:
        n = len(self._flat)
        try:
            self._flat.extend(row)
        except OverflowError:
            del self._flat[n:]  # extend may have taken the fields before the bad one
            self._odd.append(tuple(row))

    def __len__(self) -> int:
        return len(self._flat) // self.WIDTH + len(self._odd)

    def rows(self) -> np.ndarray:
        """The rows that fit int64, shape (n, 4), in arrival order."""
        if not self._flat:
            return np.zeros((0, self.WIDTH), np.int64)
        return np.frombuffer(self._flat, dtype=np.int64).reshape(-1, self.WIDTH).copy()

    def __iter__(self) -> Iterator[tuple[int, ...]]:
        """Every row as a tuple of ints: those of rows(), then any beyond int64."""
        yield from (tuple(r) for r in self.rows().tolist())
        yield from self._odd

    def tick_range(self) -> tuple[int, int] | None:
        """Lowest and highest tick of every row, or None when there is none."""
        ticks = [int(t) for t, *_ in self._odd]
        if self._flat:
            col = np.frombuffer(self._flat, dtype=np.int64)[:: self.WIDTH]
            ticks += [int(col.min()), int(col.max())]
        return (min(ticks), max(ticks)) if ticks else None


@dataclass
class RunTimes:
    """Receive times (one-way) and time-sync exchanges of one run, per input."""

    timing: TimingRows = field(default_factory=TimingRows)  # tick, mono, wall, input
    sync_fields: dict[int, tuple[int, int, int]] = field(default_factory=dict)  # seq -> t1, t2, t3
    sync_rx: dict[int, tuple[int, int]] = field(default_factory=dict)  # seq -> t4, input

    def rows(self) -> np.ndarray:
        """The receive times as an (n, 4) int64 array: tick, mono, wall, input."""
        return self.timing.rows()


class AlignSink(NullSink):
    def __init__(self) -> None:
        self.input = 0  # index of the input being read (set by collect())
        self.channels: dict[ChannelKey, ChannelStore] = {}
        self.events: list[tuple[int, int, int, int, int, int]] = []
        self.status_rows: list[tuple[int, int, int, dict[str, Any]]] = []
        self.times: dict[Key, RunTimes] = {}

    def samples(self, run: RunState, info: StreamInfo, seq: np.ndarray, tick: np.ndarray,
                raw: np.ndarray) -> None:
        self._channel(run, info).add(seq, tick, raw)

    def _channel(self, run: RunState, info: StreamInfo) -> ChannelStore:
        key = (run.board, run.run, info.stream)
        ch = self.channels.get(key)
        if ch is None or (ch.info is not info and ch.info != info):
            ch = self.channels[key] = _described_anew(ch, info, run)
        return ch

    def sample_frames(self, run: RunState, info: StreamInfo, seqs: np.ndarray, ticks: np.ndarray,
                      counts: np.ndarray, raw: np.ndarray) -> None:
        self._channel(run, info).add_frames(seqs, ticks, counts, raw)

    def seal(self) -> None:
        """Every channel sorted by tick with its repeats merged (after the last input)."""
        for ch in self.channels.values():
            ch.seal()

    def event(self, run: RunState, seq: int, tick: int, code: int, value: int) -> None:
        self.events.append((run.board, run.run, seq, tick, code, value))

    def status(self, run: RunState, seq: int, fields: dict[str, Any]) -> None:
        self.status_rows.append((run.board, run.run, seq, fields))

    def _times(self, run: RunState) -> RunTimes:
        t = self.times.get(run.key)
        if t is None:
            t = self.times[run.key] = RunTimes()
        return t

    def reply(self, run: RunState, seq: int, kind: int, fields: dict[str, Any]) -> None:
        if kind == wire.SYNC:
            self._times(run).sync_fields[seq] = (fields["host_ns"], fields["rx_tick"],
                                                 fields["tx_tick"])

    def timing(self, run: RunState, seq: int, kind: int, tick: int, arrival: Arrival) -> None:
        t = self._times(run)
        if kind == wire.SYNC:
            t.sync_rx[seq] = (arrival.mono_ns, self.input)
        if seq < run.high_seq:
            return  # came after a later frame (a resend): its wait is not the link's delay
        t.timing.append((tick, arrival.mono_ns, arrival.wall_ns, self.input))


def _described_anew(old: ChannelStore | None, info: StreamInfo, run: RunState) -> ChannelStore:
    """A store for a stream (re)described as `info`. A stream the board describes
    differently mid-run is read with its latest description throughout, so the
    samples kept so far move into the new store (before the later ones: the
    first decoded still wins a tick)."""
    ch = ChannelStore(info, run.board, run.run)
    if old is not None and old.n:
        ch.add(*old.arrays())
    return ch


@dataclass
class Collected:
    decoder: Decoder
    sink: AlignSink
    sources: list[Source]
    anchors: list[int | None]  # per input: wall_ns - mono_ns, None if the input has no date


def collect(inputs: Sequence[Path], mirrors: Sequence[Path], progress: Any = None) -> Collected:
    """Decode every input (then every mirror file) into an AlignSink."""
    sources = classify_all(inputs, mirrors)
    sink = AlignSink()
    dec = Decoder(sink)
    feed_all(dec, sources, progress, on_source=lambda i, _src: setattr(sink, "input", i))
    check_decoded(dec, sources)  # the same verdicts as `slipless decode`
    sink.seal()
    anchors = [_anchor(src, i, sink) for i, src in enumerate(sources)]
    return Collected(dec, sink, sources, anchors)


def _anchor(src: Source, index: int, sink: AlignSink) -> int | None:
    """wall - mono for one input: the capture's own anchor, taken when it was
    created; otherwise (a btsnoop log) the median over its receive times."""
    if src.kind == "capture":
        try:
            f, reader = capture.open_capture(src.path)
        except (capture.CaptureError, OSError):
            return None  # pieces() already reported an unreadable capture
        with f:
            meta = reader.meta
        if isinstance(meta.get("created_wall_ns"), int) and isinstance(meta.get("created_mono_ns"), int):
            return int(meta["created_wall_ns"] - meta["created_mono_ns"])
    diffs = []  # rows beyond int64 (u64 garbage) carry no usable time and are left out
    for t in sink.times.values():
        rows = t.rows()
        mine = rows[(rows[:, 3] == index) & (rows[:, 2] >= 0)]
        diffs.append(mine[:, 2] - mine[:, 1])
    d = np.concatenate(diffs) if diffs else np.zeros(0, np.int64)
    return int(np.median(d)) if d.size else None
