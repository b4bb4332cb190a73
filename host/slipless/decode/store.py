"""One stream of one run held compactly: segments of evenly spaced ticks and
the raw values in the stream's own dtype.

A SAMPLES frame carries the tick of its first sample and the rest follow at
one period each (SPEC 4), so a channel is kept as segments (seq, first tick,
count) plus its raw values: 2 bytes a sample for an int16 stream instead of
the 30-odd that per-sample seq, tick and float value arrays take. Ticks,
sequence numbers and scaled values are made on demand, for an index range,
so callers work through long runs in chunks (`chunks()`).

The order and merging rule is the one every analysis used on full arrays:
samples sorted by tick, and of samples with the same tick the one decoded
first wins (a frame that came twice, resent or from the mirror).
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

import numpy as np

from slipless.decode.decoder import StreamInfo

PENDING = 1 << 16  # samples gathered from the decoder's calls before they are cut into segments
CHUNK_SAMPLES = 1 << 20  # samples made at once by chunks(): about 30 MB of float64 and int64 columns


def frames_of_samples(seq: np.ndarray, tick: np.ndarray, period: int
                      ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per-sample seq and tick -> segments (seq, first tick, count), cut at each
    change of frame or break in the ticks: the inverse of decoder.expand_frames."""
    seq, tick = np.asarray(seq, np.int64), np.asarray(tick, np.int64)
    starts = np.r_[0, np.flatnonzero((seq[1:] != seq[:-1]) | (tick[1:] - tick[:-1] != period)) + 1]
    return seq[starts], tick[starts], np.diff(np.r_[starts, seq.size])


class ChannelStore:
    """Samples of one (board, run, stream) in decode order until seal(), then
    by tick with duplicates merged."""

    def __init__(self, info: StreamInfo, board: int = 0, run: int = 0) -> None:
        self.info = info
        self.board, self.run = board, run
        self._parts: list[tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]] = []
        self._pending: list[tuple[np.ndarray, ...]] = []  # calls not yet joined
        self._pending_n = 0
        self.sealed = False
        self.calibrated = False  # calib.apply has changed info (once only)
        self.seg_seq = np.zeros(0, np.int64)
        self.seg_tick = np.zeros(0, np.int64)
        self.seg_count = np.zeros(0, np.int64)
        self.seg_start = np.zeros(0, np.int64)  # index of each segment's first sample
        self.raw: np.ndarray = np.zeros(0, info.dtype)

    @property
    def period(self) -> int:
        return int(self.info.period_us)

    # ---- filling ------------------------------------------------------------------
    def add(self, seq: np.ndarray, tick: np.ndarray, raw: np.ndarray) -> None:
        """A seq, tick and raw value per sample (the decoder's samples() form):
        cut into segments at each change of frame or break in the ticks."""
        if raw.size == 0:
            self._check_open()
            return
        self.add_frames(*frames_of_samples(seq, tick, self.period), raw)

    def add_frames(self, seqs: np.ndarray, ticks: np.ndarray, counts: np.ndarray,
                   raw: np.ndarray) -> None:
        """The decoder's sample_frames() form: per frame its seq, first tick and
        count, and the raw values of all of them. Calls (often one frame each)
        are gathered to PENDING samples before they are joined, so the per-part
        arrays do not outweigh the samples."""
        self._check_open()
        if raw.size == 0:
            return
        self._pending.append((np.array(seqs, np.int64), np.array(ticks, np.int64),
                              np.array(counts, np.int64), np.array(raw, dtype=self.info.dtype)))
        self._pending_n += int(raw.size)
        if self._pending_n >= PENDING:
            self._cut()

    def _check_open(self) -> None:
        if self.sealed:
            raise RuntimeError("ChannelStore.add after seal")

    def _cut(self) -> None:
        if not self._pending:
            return
        pend, self._pending, self._pending_n = self._pending, [], 0
        seq, tick, count, raw = pend[0] if len(pend) == 1 else (
            np.concatenate([p[i] for p in pend]) for i in range(4))
        self._parts.append((seq, tick, count, raw))

    def seal(self) -> None:
        """Sort by tick and merge duplicates; idempotent."""
        if self.sealed:
            return
        self._cut()
        self.sealed = True
        parts, self._parts = self._parts, []
        if not parts:
            return
        seq, tick, count = (np.concatenate([p[i] for p in parts]) for i in range(3))
        raw = np.concatenate([p[3] for p in parts]) if len(parts) > 1 else parts[0][3]
        del parts
        start = np.cumsum(count) - count
        order = np.argsort(tick, kind="stable")
        s_tick, s_count = tick[order], count[order]
        # exact repeats of a segment (same first tick and length): the first decoded wins
        repeat = np.r_[False, (s_tick[1:] == s_tick[:-1]) & (s_count[1:] == s_count[:-1])]
        keep = order[~repeat]
        end = tick[keep] + (count[keep] - 1) * self.period
        overlap = keep.size > 1 and bool(np.any(tick[keep][1:] <= np.maximum.accumulate(end)[:-1]))
        if self.period <= 0 or overlap:
            self._merge_by_sample(seq, tick, count, start, raw)
            return
        self.seg_seq, self.seg_tick, self.seg_count = seq[keep], tick[keep], count[keep]
        if keep.size == order.size and np.array_equal(keep, np.arange(keep.size)):
            self.raw = raw  # already in order with nothing repeated: the common case
        else:
            self.raw = gather(raw, start[keep], count[keep])
        self.seg_start = np.cumsum(self.seg_count) - self.seg_count

    def _merge_by_sample(self, seq: np.ndarray, tick: np.ndarray, count: np.ndarray,
                         start: np.ndarray, raw: np.ndarray) -> None:
        """Segments that overlap only in part: merge sample by sample (rare: a
        board whose clock stepped back), then cut into segments again."""
        s_seq = np.repeat(seq, count)
        first = np.repeat(start, count)
        s_tick = np.repeat(tick, count) + (np.arange(raw.size, dtype=np.int64) - first) * self.period
        order = np.argsort(s_tick, kind="stable")
        s_seq, s_tick, s_raw = s_seq[order], s_tick[order], raw[order]
        keep = np.r_[True, s_tick[1:] != s_tick[:-1]]
        s_seq, s_tick, s_raw = s_seq[keep], s_tick[keep], s_raw[keep]
        n = s_raw.size
        brk = np.flatnonzero((s_seq[1:] != s_seq[:-1]) | (s_tick[1:] - s_tick[:-1] != self.period)) + 1
        starts = np.r_[0, brk].astype(np.int64)
        self.seg_seq, self.seg_tick = s_seq[starts], s_tick[starts]
        self.seg_count = np.diff(np.r_[starts, n]).astype(np.int64)
        self.seg_start = starts
        self.raw = s_raw

    # ---- reading (after seal) ---------------------------------------------------------
    @property
    def n(self) -> int:
        self.seal()
        return int(self.raw.size)

    def __len__(self) -> int:
        return self.n

    @property
    def nbytes(self) -> int:
        return int(self.raw.nbytes + 4 * self.seg_seq.nbytes)

    def _span(self, lo: int, hi: int | None) -> tuple[int, int]:
        self.seal()
        n = self.raw.size
        hi = n if hi is None else min(max(hi, 0), n)
        return min(max(lo, 0), hi), hi

    def _placed(self, lo: int, hi: int) -> tuple[np.ndarray, np.ndarray]:
        """For samples lo..hi: their segment and their place in it."""
        idx = np.arange(lo, hi, dtype=np.int64)
        seg = np.searchsorted(self.seg_start, idx, side="right") - 1
        return seg, idx - self.seg_start[seg]

    def ticks(self, lo: int = 0, hi: int | None = None) -> np.ndarray:
        lo, hi = self._span(lo, hi)
        seg, k = self._placed(lo, hi)
        return self.seg_tick[seg] + k * self.period

    def seqs(self, lo: int = 0, hi: int | None = None) -> np.ndarray:
        lo, hi = self._span(lo, hi)
        seg, _ = self._placed(lo, hi)
        return self.seg_seq[seg]

    def raw_values(self, lo: int = 0, hi: int | None = None) -> np.ndarray:
        lo, hi = self._span(lo, hi)
        return self.raw[lo:hi]

    def values(self, lo: int = 0, hi: int | None = None) -> np.ndarray:
        """Scaled values (the stream's unit) as float64."""
        info = self.info
        return self.raw_values(lo, hi).astype(np.float64) * info.scale + info.offset

    def arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(seq, tick, raw) of the whole channel: for small runs and tests."""
        return self.seqs(), self.ticks(), self.raw_values()

    def index(self, tick: Any, side: str = "left") -> Any:
        """np.searchsorted(self.ticks(), tick, side) without making the ticks."""
        self.seal()
        q = np.asarray(tick)
        if self.raw.size == 0:
            return np.zeros(q.shape, np.int64) if q.ndim else 0
        s = np.searchsorted(self.seg_tick, q, side="right") - 1
        sc = np.maximum(s, 0)
        rel = q - self.seg_tick[sc]
        if side == "left":  # samples of the segment with a tick below q
            k = np.ceil(rel / self.period) if q.dtype.kind == "f" else -(-rel // self.period)
        else:  # ... at or below q
            k = (np.floor(rel / self.period) if q.dtype.kind == "f" else rel // self.period) + 1
        k = np.clip(k, 0, self.seg_count[sc]).astype(np.int64)
        out = np.where(s >= 0, self.seg_start[sc] + k, 0)
        return out if q.ndim else int(out)

    def tick_range(self) -> tuple[int, int] | None:
        """Lowest and highest tick, or None when empty."""
        self.seal()
        if self.raw.size == 0:
            return None
        last = int(np.argmax(self.seg_tick + (self.seg_count - 1) * self.period))
        return (int(self.seg_tick[0]),
                int(self.seg_tick[last] + (self.seg_count[last] - 1) * self.period))

    def chunks(self, size: int = CHUNK_SAMPLES) -> Iterator[tuple[int, int]]:
        """Index ranges (lo, hi) of at most `size` samples covering the channel."""
        n = self.n
        for lo in range(0, n, size):
            yield lo, min(n, lo + size)

    def frame_ends(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Per segment: seq, first tick, sample count (the loss analysis' blocks)."""
        self.seal()
        return self.seg_seq, self.seg_tick, self.seg_count


def gather(raw: np.ndarray, start: np.ndarray, count: np.ndarray) -> np.ndarray:
    """raw[start[i] : start[i] + count[i]] for each i, joined, made in pieces."""
    out = np.empty(int(count.sum()), raw.dtype)
    at = 0
    step = 4096  # segments per piece: keeps the index arrays small
    for i in range(0, start.size, step):
        st, ct = start[i : i + step], count[i : i + step]
        first = np.repeat(np.cumsum(ct) - ct, ct)
        idx = np.repeat(st, ct) + (np.arange(int(ct.sum()), dtype=np.int64) - first)
        out[at : at + idx.size] = raw[idx]
        at += idx.size
    return out


class Columns:
    """Typed columns that grow by appended rows or blocks, kept as numpy chunks
    (about 8 bytes a cell instead of the ~30 of a Python int in a tuple)."""

    BLOCK = 1 << 14  # rows gathered in lists before they become arrays

    def __init__(self, dtypes: dict[str, Any]) -> None:
        self.dtypes = {k: np.dtype(v) for k, v in dtypes.items()}
        self._chunks: dict[str, list[np.ndarray]] = {k: [] for k in self.dtypes}
        self._rows: list[tuple[Any, ...]] = []

    def append(self, *row: Any) -> None:
        self._rows.append(row)
        if len(self._rows) >= self.BLOCK:
            self._close_rows()

    def _close_rows(self) -> None:
        if not self._rows:
            return
        for (name, dt), col in zip(self.dtypes.items(), zip(*self._rows)):
            self._chunks[name].append(np.array(col, dtype=dt))
        self._rows = []

    def __len__(self) -> int:
        return sum(c.size for c in next(iter(self._chunks.values()), [])) + len(self._rows)

    def arrays(self) -> dict[str, np.ndarray]:
        """Every column as one array (the chunks are joined once and kept so)."""
        self._close_rows()
        out = {}
        for name, dt in self.dtypes.items():
            parts = self._chunks[name]
            arr = np.concatenate(parts) if len(parts) > 1 else (parts[0] if parts else np.zeros(0, dt))
            self._chunks[name] = [arr]
            out[name] = arr
        return out
