"""The gap-free stretches of a stream: the only data a spectrum or an Allan
deviation may be taken over.

A ChannelStore keeps one segment per frame; consecutive segments whose ticks
follow on at one period are joined here into spans of evenly spaced samples.
Nothing is interpolated across a gap: a lost frame ends a span.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np

from slipless.decode.store import ChannelStore
from slipless.errors import InputError

DEFAULT_TICK_HZ = 1_000_000  # a run whose descriptor gave no rate: ticks are microseconds (SPEC 3)


@dataclass(frozen=True)
class Spans:
    """Index ranges [lo, hi) of a store's gap-free stretches, in tick order."""

    store: ChannelStore
    lo: np.ndarray
    hi: np.ndarray
    rate_hz: float

    @property
    def counts(self) -> np.ndarray:
        return self.hi - self.lo

    @property
    def samples(self) -> int:
        return int(self.counts.sum())

    @property
    def longest(self) -> int:
        return int(self.counts.max()) if self.lo.size else 0

    def values(self, k: int) -> np.ndarray:
        """The scaled values of span k (float64, the stream's unit)."""
        return self.store.values(int(self.lo[k]), int(self.hi[k]))

    def at_least(self, n: int) -> Iterator[int]:
        """Spans of n samples or more."""
        yield from (int(k) for k in np.flatnonzero(self.counts >= n))


def sample_rate(store: ChannelStore, tick_hz: int) -> float:
    if store.period <= 0:
        raise InputError(f"stream {store.info.name!r}: no sampling period in its descriptor")
    return (tick_hz or DEFAULT_TICK_HZ) / store.period


def gap_free(store: ChannelStore, tick_hz: int, window_s: tuple[float, float] | None = None) -> Spans:
    """Join a store's frame segments into gap-free spans; with window_s, only the
    samples whose board time lies in [start, end) seconds."""
    rate = sample_rate(store, tick_hz)
    _, tick, count = store.frame_ends()
    start = store.seg_start
    if tick.size == 0:
        return Spans(store, np.zeros(0, np.int64), np.zeros(0, np.int64), rate)
    joined = tick[1:] == tick[:-1] + count[:-1] * store.period
    first = np.r_[0, np.flatnonzero(~joined) + 1]
    lo = start[first]
    hi = np.r_[start[first[1:]], store.n]
    if window_s is not None:
        hz = tick_hz or DEFAULT_TICK_HZ
        a, b = store.index(np.array([round(t * hz) for t in window_s], np.int64))
        lo, hi = np.clip(lo, a, b), np.clip(hi, a, b)
        keep = hi > lo
        lo, hi = lo[keep], hi[keep]
    return Spans(store, lo.astype(np.int64), hi.astype(np.int64), rate)
