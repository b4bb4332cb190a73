"""Everything `slipless align` needs from the decoder, kept in memory.

One pass over the inputs with a sink that keeps the samples (as arrays), the
events, the status reports, every receive time and every time-sync reply,
each receive time tagged with the input it came from: inputs recorded in
different laptop sessions do not share a monotonic clock.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from rich.console import Console

from slipless import capture
from slipless.decoder import Arrival, Decoder, NullSink, RunState, StreamInfo
from slipless.inputs import Source, check_decoded, classify_all, feed_all
from slipless.protocol import wire

Key = tuple[int, int]  # (board, run)


@dataclass
class Channel:
    """One stream of one run: samples in the order they were decoded."""

    info: StreamInfo
    seq: list[np.ndarray] = field(default_factory=list)
    tick: list[np.ndarray] = field(default_factory=list)
    raw: list[np.ndarray] = field(default_factory=list)

    def arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(seq, tick, raw) by increasing tick, one row per tick."""
        seq, tick, raw = (np.concatenate(a) for a in (self.seq, self.tick, self.raw))
        order = np.argsort(tick, kind="stable")
        seq, tick, raw = seq[order], tick[order], raw[order]
        first = np.r_[True, tick[1:] != tick[:-1]]
        return seq[first], tick[first], raw[first]


@dataclass
class RunTimes:
    """Receive times (one-way) and time-sync exchanges of one run, per input."""

    timing: list[tuple[int, int, int, int]] = field(default_factory=list)  # tick, mono, wall, input
    sync_fields: dict[int, tuple[int, int, int]] = field(default_factory=dict)  # seq -> t1, t2, t3
    sync_rx: dict[int, tuple[int, int]] = field(default_factory=dict)  # seq -> t4, input


class AlignSink(NullSink):
    def __init__(self) -> None:
        self.input = 0  # index of the input being read (set by collect())
        self.channels: dict[tuple[int, int, int], Channel] = {}
        self.events: list[tuple[int, int, int, int, int, int]] = []
        self.status_rows: list[tuple[int, int, int, dict[str, Any]]] = []
        self.times: dict[Key, RunTimes] = {}

    def samples(self, run: RunState, info: StreamInfo, seq: np.ndarray, tick: np.ndarray,
                raw: np.ndarray) -> None:
        ch = self.channels.get((run.board, run.run, info.stream))
        if ch is None:
            ch = self.channels[(run.board, run.run, info.stream)] = Channel(info)
        ch.info = info
        ch.seq.append(seq)
        ch.tick.append(tick)
        ch.raw.append(raw)

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


@dataclass
class Collected:
    decoder: Decoder
    sink: AlignSink
    sources: list[Source]
    anchors: list[int | None]  # per input: wall_ns - mono_ns, None if the input has no date


def collect(inputs: Sequence[Path], mirrors: Sequence[Path], console: Console | None) -> Collected:
    """Decode every input (then every mirror file) into an AlignSink."""
    sources = classify_all(inputs, mirrors)
    sink = AlignSink()
    dec = Decoder(sink)
    feed_all(dec, sources, console, on_source=lambda i, _src: setattr(sink, "input", i))
    check_decoded(dec, sources)  # the same verdicts as `slipless decode`
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
    diffs = [w - m for t in sink.times.values() for _, m, w, i in t.timing if i == index and w >= 0]
    return int(np.median(diffs)) if diffs else None
