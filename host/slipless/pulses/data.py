"""Loading runs for the pulse analysis: every channel of a run in board time.

Captures and raw streams go through the decoder; a folder of tables written by
`slipless decode` is read back. Either way a run becomes named series of
(board time in s, value in the stream's unit) plus its coil events.
"""

from __future__ import annotations

import math
from collections import defaultdict
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from slipless.decode.decoder import Decoder, NullSink, RunState, StreamInfo
from slipless.decode.store import CHUNK_SAMPLES, ChannelStore, frames_of_samples
from slipless.decode.tables import read_decoded
from slipless.errors import InputError
from slipless.io.inputs import Source, classify, feed_all
from slipless.protocol import wire

FEW_QUERIES = 8  # up to this many times are looked up one by one (cheaper than arrays)


class Series:
    """One stream in board time (s) and its unit.

    Either plain arrays (tables read back, tests) or a ChannelStore (a decoded
    run: 2 bytes a sample for an int16 stream), answered by index ranges and
    time windows so no caller needs the whole run as float64. Board time is
    tick / tick_hz in float64 either way; indices are those of the sorted
    samples, as np.searchsorted on the whole time array gives them.
    """

    def __init__(self, t_s: np.ndarray, v: np.ndarray, unit: str = "") -> None:
        self._t, self._v = t_s, v  # unused when on a store
        self._store: ChannelStore | None = None
        self._hz = 0
        self._period: float | None = None
        self._seg_t0: np.ndarray | None = None
        self.unit = unit

    @classmethod
    def over(cls, store: ChannelStore, tick_hz: int, unit: str | None = None) -> Series:
        """A sealed view of `store` with times tick / tick_hz."""
        s = cls(np.zeros(0), np.zeros(0), store.info.unit if unit is None else unit)
        store.seal()
        s._store, s._hz = store, tick_hz
        return s

    # ---- whole arrays (tables, tests, short runs) ----------------------------------------
    @property
    def t_s(self) -> np.ndarray:
        """Every sample's time; made anew for a store (long runs: use window())."""
        return self._t if self._store is None else self.times()

    @property
    def v(self) -> np.ndarray:
        return self._v if self._store is None else self.values()

    # ---- index ranges ----------------------------------------------------------------------
    @property
    def n(self) -> int:
        return self._store.n if self._store is not None else int(self._t.size)

    def __len__(self) -> int:
        return self.n

    def times(self, lo: int = 0, hi: int | None = None) -> np.ndarray:
        """Board times of samples lo..hi (float64)."""
        if self._store is None:
            return self._t[lo:hi]
        return self._ticks(lo, hi) / self._hz

    def _ticks(self, lo: int, hi: int | None) -> np.ndarray:
        """store.ticks(lo, hi), made per segment rather than per sample."""
        st = self._store
        assert st is not None
        n = st.n
        hi = n if hi is None else min(max(hi, 0), n)
        lo = min(max(lo, 0), hi)
        if lo == hi:
            return np.zeros(0, np.int64)
        s0, s1 = np.searchsorted(st.seg_start, (lo, hi - 1), side="right") - 1
        idx = np.arange(lo, hi, dtype=np.int64)
        # tick of sample i in segment s: (seg_tick[s] - seg_start[s] * period) + i * period
        if s0 == s1:
            return (st.seg_tick[s0] - st.seg_start[s0] * st.period) + idx * st.period
        starts = st.seg_start[s0 : s1 + 1]
        counts = np.minimum(starts + st.seg_count[s0 : s1 + 1], hi) - np.maximum(starts, lo)
        base = st.seg_tick[s0 : s1 + 1] - starts * st.period
        return np.repeat(base, counts) + idx * st.period

    def values(self, lo: int = 0, hi: int | None = None) -> np.ndarray:
        """Values of samples lo..hi (float64, the stream's unit)."""
        if self._store is None:
            return self._v[lo:hi]
        return self._store.values(lo, hi)

    def chunks(self, size: int = CHUNK_SAMPLES) -> Iterator[tuple[int, int]]:
        """Index ranges (lo, hi) of at most `size` samples covering the series."""
        n = self.n
        for lo in range(0, n, size):
            yield lo, min(n, lo + size)

    # ---- time queries ----------------------------------------------------------------------
    def index(self, t_s: Any, side: str = "left") -> Any:
        """np.searchsorted(t_s_of_every_sample, t_s, side), without those times."""
        if self._store is None:
            return np.searchsorted(self._t, t_s, side=side)  # type: ignore[call-overload]
        q = np.asarray(t_s, dtype=np.float64)
        if q.size <= FEW_QUERIES or self._store.period <= 0:
            found = [self._index1(float(x), side == "left") for x in q.reshape(-1)]
            return np.array(found, np.int64).reshape(q.shape) if q.ndim else found[0]
        return self._index_many(q, side == "left")

    def _index1(self, q: float, left: bool) -> int:
        """One query: the segment from its first times, the place in it from
        the ticks, then settled on the float times themselves (q * hz and
        tick / hz each round, so the estimate can be one off)."""
        st = self._store
        assert st is not None
        if math.isnan(q) or q == math.inf:
            return st.n  # NaN sorts after every time
        first = self._first_times()
        s = int(np.searchsorted(first, q, side="left" if left else "right")) - 1
        if s < 0:
            return 0
        t0, count, per, hz = int(st.seg_tick[s]), int(st.seg_count[s]), st.period, self._hz
        x = (q * hz - t0) / per if per > 0 else 0.0  # samples of the segment before q, about
        k = count if not x < count else max(1, min(count, math.ceil(x) if left else
                                                   math.floor(x) + 1))

        def before(j: int) -> bool:  # is sample j of the segment before q (left) / at or before?
            t = (t0 + j * per) / hz  # int / int rounds once, as numpy's int64 / hz does below 2**53
            return t < q if left else t <= q

        while k > 1 and not before(k - 1):
            k -= 1
        while k < count and before(k):
            k += 1
        return int(st.seg_start[s]) + k

    def _first_times(self) -> np.ndarray:
        """Each segment's first time; the segments are sorted and do not overlap."""
        if self._seg_t0 is None:
            assert self._store is not None
            self._seg_t0 = self._store.seg_tick / self._hz
        return self._seg_t0

    def _index_many(self, q: np.ndarray, left: bool) -> np.ndarray:
        """Many queries at once: a candidate from the ticks, then settled as in _index1."""
        st = self._store
        assert st is not None
        n = st.n
        nan = np.isnan(q)
        side = "left" if left else "right"
        i = np.asarray(st.index(np.where(nan, 0.0, q) * self._hz, side), np.int64)
        i = np.where(nan, n, i)  # NaN sorts after every time
        while n:
            t_prev = self._times_at(np.maximum(i - 1, 0))
            t_here = self._times_at(np.minimum(i, n - 1))
            down = (i > 0) & ((t_prev >= q) if left else (t_prev > q))
            up = (i < n) & ((t_here < q) if left else (t_here <= q))
            if not (down.any() or up.any()):
                break
            i = i - down + up
        return i

    def _times_at(self, idx: np.ndarray) -> np.ndarray:
        st = self._store
        assert st is not None
        seg = np.searchsorted(st.seg_start, idx, side="right") - 1
        return (st.seg_tick[seg] + (idx - st.seg_start[seg]) * st.period) / self._hz

    def span(self, lo_s: float, hi_s: float) -> tuple[int, int]:
        """Indices of the samples with lo_s <= t < hi_s (np.searchsorted of both, side left)."""
        i = self.index(np.array([lo_s, hi_s]))
        return int(i[0]), int(i[1])

    def window(self, lo_s: float, hi_s: float) -> tuple[np.ndarray, np.ndarray]:
        """(t, v) of the samples with lo_s <= t <= hi_s."""
        i0, i1 = self.index(lo_s, "left"), self.index(hi_s, "right")
        i1 = max(i0, i1)
        return self.times(i0, i1), self.values(i0, i1)

    # ---- whole-series figures, made in chunks ------------------------------------------------
    def period(self) -> float:
        """Median spacing of the samples (np.median(np.diff(t_s))), NaN if fewer than two."""
        if self._store is None:
            d = np.diff(self._t)
            return float(np.median(d)) if d.size else math.nan
        if self._period is None:
            self._period = self._chunked_period()
        return self._period

    def _chunked_period(self) -> float:
        """The exact median of every spacing: spacings take few distinct values,
        so count them chunk by chunk (one sample of overlap), then pick the
        middle one or two as np.median would."""
        n = self.n
        if n < 2:
            return math.nan
        vals, counts = [], []
        for lo, hi in self.chunks():
            d = np.diff(self.times(lo, min(hi + 1, n)))
            if d.size:
                u, c = np.unique(d, return_counts=True)
                vals.append(u)
                counts.append(c)
        u, c = _merge_counts(np.concatenate(vals), np.concatenate(counts))
        return float(np.median(ranked(u, c, [(n - 2) // 2, (n - 1) // 2])))

    def levels(self) -> tuple[np.ndarray, np.ndarray] | None:
        """The distinct values and how often each occurs, for a store of 8- or
        16-bit integers (counted in chunks); None otherwise."""
        st = self._store
        if st is None or st.info.dtype.kind not in "iu" or st.info.dtype.itemsize > 2:
            return None
        low = int(np.iinfo(st.info.dtype).min)
        hist = np.zeros(1 << (8 * st.info.dtype.itemsize), np.int64)
        for lo, hi in self.chunks():
            hist += np.bincount(st.raw_values(lo, hi).astype(np.int64) - low, minlength=hist.size)
        raw = np.flatnonzero(hist)
        return (raw + low).astype(np.float64) * st.info.scale + st.info.offset, hist[raw]


def _merge_counts(vals: np.ndarray, counts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Sorted distinct values with their summed counts."""
    u, inv = np.unique(vals, return_inverse=True)
    return u, np.bincount(inv, weights=counts, minlength=u.size).astype(np.int64)


def ranked(sorted_vals: np.ndarray, counts: np.ndarray, ranks: Sequence[int]) -> np.ndarray:
    """The values at 0-based ranks of the multiset (sorted_vals repeated counts times)."""
    cum = np.cumsum(counts)
    return sorted_vals[np.searchsorted(cum, np.asarray(ranks), side="right")]


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


DEFAULT_TICK_HZ = 1_000_000  # SPEC 3.1: ticks are microseconds
_SCALING = ("type", "period_us", "scale", "offset")  # what turns a stream's raw samples into values
GATHER_SAMPLES = 1 << 16  # the decoder hands over about a frame at a time; a store gets this many

Key = tuple[int, int]
ChannelKey = tuple[int, int, int]


class ArraySink(NullSink):
    """Keeps each (board, run, stream) as a ChannelStore, and the coil events."""

    def __init__(self) -> None:
        # a stream described anew with another scaling starts another store
        self._stores: dict[ChannelKey, list[ChannelStore]] = defaultdict(list)
        # calls gathered per stream before they go to its store: a store keeps a
        # few hundred bytes per call besides the samples
        self._pending: dict[ChannelKey, list[tuple[np.ndarray, ...]]] = \
            defaultdict(list)
        self._pending_n: dict[ChannelKey, int] = defaultdict(int)
        self._info: dict[ChannelKey, tuple[str, str]] = {}
        self._hz: dict[Key, int] = {}
        self._events: dict[Key, list[tuple[int, int]]] = defaultdict(list)

    def samples(self, run: RunState, info: StreamInfo, seq: np.ndarray, tick: np.ndarray,
                raw: np.ndarray) -> None:
        self.sample_frames(run, info, *frames_of_samples(seq, tick, info.period_us), raw)

    def sample_frames(self, run: RunState, info: StreamInfo, seqs: np.ndarray, ticks: np.ndarray,
                      counts: np.ndarray, raw: np.ndarray) -> None:
        key = (run.board, run.run, info.stream)
        self._info[key] = (info.name, info.unit)
        self._hz[run.key] = run.tick_hz
        stores = self._stores[key]
        if not stores or _scaling(stores[-1].info) != _scaling(info):
            self._hand_over(key)
            stores.append(ChannelStore(info, run.board, run.run))
        self._pending[key].append((seqs, ticks, counts, raw))
        self._pending_n[key] += int(raw.size)
        if self._pending_n[key] >= GATHER_SAMPLES:
            self._hand_over(key)

    def _hand_over(self, key: ChannelKey) -> None:
        parts = self._pending.pop(key, [])
        self._pending_n.pop(key, None)
        if parts:
            self._stores[key][-1].add_frames(*(np.concatenate(col) for col in zip(*parts)))

    def event(self, run: RunState, seq: int, tick: int, code: int, value: int) -> None:
        if code == wire.EV_COIL:
            self._events[run.key].append((tick, value))

    def runs(self, tick_hz: dict[Key, int]) -> list[RunData]:
        for key in list(self._pending):
            self._hand_over(key)
        streams: dict[ChannelKey, tuple[str, Series]] = {}
        for key, stores in sorted(self._stores.items()):
            hz = tick_hz.get(key[:2]) or self._hz.get(key[:2]) or DEFAULT_TICK_HZ
            name, unit = self._info[key]
            if len(stores) == 1:
                streams[key] = (name, Series.over(stores[0], hz, unit))
            else:  # rare: whole arrays, merged as the samples came
                parts = [(st.ticks() / hz, st.values()) for st in stores]
                streams[key] = (name, _series(np.concatenate([p[0] for p in parts]),
                                              np.concatenate([p[1] for p in parts]), unit))
        return _assemble(streams, self._events, tick_hz)


def _scaling(info: StreamInfo) -> tuple[Any, ...]:
    return tuple(getattr(info, f) for f in _SCALING)


def runs_from_channels(channels: dict[ChannelKey, ChannelStore],
                       coil_events: dict[Key, list[tuple[int, int]]],
                       tick_hz: dict[Key, int]) -> list[RunData]:
    """Runs from decoded channels (sealed here if not yet) and the coil events
    (tick, state) of each (board, run); ticks count at tick_hz (default 1 MHz)."""
    streams = {key: (st.info.name,
                     Series.over(st, tick_hz.get(key[:2]) or DEFAULT_TICK_HZ, st.info.unit))
               for key, st in sorted(channels.items())}
    return _assemble(streams, coil_events, tick_hz)


def _assemble(streams: dict[ChannelKey, tuple[str, Series]],
              coil_events: dict[Key, list[tuple[int, int]]],
              tick_hz: dict[Key, int]) -> list[RunData]:
    out: dict[Key, RunData] = {}
    for (board, run, _), (name, series) in sorted(streams.items()):
        rd = out.setdefault((board, run), RunData(board, run))
        rd.streams[name] = series
    for key, evs in coil_events.items():
        rd = out.setdefault(key, RunData(*key))
        hz = tick_hz.get(key) or DEFAULT_TICK_HZ
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
