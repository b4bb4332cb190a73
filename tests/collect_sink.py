"""A decoder sink that keeps every record as plain tuples: for tests, which
compare what was decoded with what was sent (not part of the package)."""

from __future__ import annotations

from typing import Any

import numpy as np

from slipless.decode.decoder import Arrival, Decoder, NullSink, RunState, StreamInfo
from slipless.protocol import wire


class CollectSink(NullSink):
    """Keeps every record in lists of plain tuples; for tests and small captures."""

    def __init__(self) -> None:
        self.samples_rows: list[tuple[Any, ...]] = []
        self.events: list[tuple[Any, ...]] = []
        self.status_rows: list[tuple[Any, ...]] = []
        self.replies: list[tuple[Any, ...]] = []
        self.frames: list[tuple[Any, ...]] = []
        self.origins: list[tuple[Any, ...]] = []
        self.timings: list[tuple[Any, ...]] = []

    def samples(self, run: RunState, info: StreamInfo, seq: np.ndarray, tick: np.ndarray,
                raw: np.ndarray) -> None:
        for q, t, v in zip(seq.tolist(), tick.tolist(), raw.tolist()):
            self.samples_rows.append((run.board, run.run, info.stream, q, t, v))

    def event(self, run: RunState, seq: int, tick: int, code: int, value: int) -> None:
        self.events.append((run.board, run.run, seq, tick, code, value))

    def status(self, run: RunState, seq: int, fields: dict[str, Any]) -> None:
        self.status_rows.append((run.board, run.run, seq) + tuple(
            fields[k] for k in wire.STATUS_FIELDS))

    def reply(self, run: RunState, seq: int, kind: int, fields: dict[str, Any]) -> None:
        self.replies.append((run.board, run.run, seq, wire.KIND_NAMES[kind]))

    def frame(self, run: RunState, seq: int, kind: int, fate: str, offset: int, origin: str,
              arrival: Arrival) -> None:
        self.frames.append((run.board, run.run, seq, fate))
        if origin:
            self.origins.append((run.board, run.run, seq, origin))

    def timing(self, run: RunState, seq: int, kind: int, tick: int, arrival: Arrival) -> None:
        self.timings.append((run.board, run.run, seq, kind, tick, arrival.mono_ns, arrival.wall_ns))


def collect(chunks: Any) -> tuple[Decoder, CollectSink]:
    """Decode an iterable of byte chunks into a CollectSink; for tests and notebooks."""
    sink = CollectSink()
    dec = Decoder(sink)
    for chunk in chunks:
        dec.feed(chunk)
    dec.finish()
    return dec, sink
