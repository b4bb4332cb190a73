"""A Series over a ChannelStore answers as numpy does on the whole arrays.

The reference is numpy itself (common practice): the run materialised the way
the pulse analysis always loaded it (ticks / tick_hz, values raw * scale +
offset, sorted by time, the first decoded of equal times kept), then
np.searchsorted, boolean windows, np.median, np.percentile and np.interp on
those arrays. The store is filled with gaps, resent and reordered frames and a
partial overlap, at tick counts of an 8-hour run, where t * hz and tick / hz
both round.
"""

from __future__ import annotations

import math
from typing import Literal

import numpy as np
import pytest

from slipless.decode.decoder import Decoder, NullSink, RunState, StreamInfo
from slipless.decode.store import ChannelStore
from slipless.pulses.analysis import Options, analyse
from slipless.pulses.data import ArraySink, RunData, Series, decode_runs, runs_from_channels
from slipless.pulses.find import (
    LOST_END,
    Pulse,
    abs_percentile,
    from_current,
    merge,
    pulses_in_current,
    ranked_percentile,
    rise_of,
    rise_time,
)
from slipless.pulses.reduce import Settings, _resample, window_mean
from slipless.sim import rig

EIGHT_HOURS_US = 8 * 3600 * 10**6


def info(period: int = 1000, scale: float = 0.001, offset: float = -0.25, kind: str = "h") -> StreamInfo:
    return StreamInfo(1, ord(kind), 0, period, scale, offset, "cap_amp", "V")


def frames_of(seed: int, period: int, t0: int,
              overlap: bool) -> list[tuple[np.ndarray, np.ndarray, np.ndarray]]:
    """(seq, tick, raw) per frame as the decoder hands them over: gaps, frames
    resent later with other bytes, frames out of order, and if asked one
    stretch overlapping another in part (the store then merges sample by sample)."""
    rng = np.random.default_rng(seed)
    out, tick, seq = [], t0, 100
    for _ in range(60):
        n = int(rng.integers(1, 40))
        raw = rng.integers(-2000, 2000, n).astype(np.int16)
        out.append((np.full(n, seq, np.int64), tick + np.arange(n, dtype=np.int64) * period, raw))
        seq += 1
        tick += n * period + (int(rng.integers(1, 50)) * period + int(rng.integers(0, period))
                              if rng.random() < 0.2 else 0)
    out += [(s, t, r + 1) for s, t, r in out[5:8]]  # resent: the first copy wins
    out[10], out[11] = out[11], out[10]  # reordered
    s, t, r = out[20]
    if overlap and t.size > 2:  # a clock step back
        out.append((s[1:] + 1000, t[1:] + period, r[1:] - 7))
    return out


def reference(frames: list[tuple[np.ndarray, np.ndarray]], inf: StreamInfo,
              hz: int) -> tuple[np.ndarray, np.ndarray]:
    """Whole arrays as the analysis made them before the store, from (tick, raw)
    per decoder call."""
    tick = np.concatenate([f[0] for f in frames])
    v = np.concatenate([f[1] for f in frames]).astype(np.float64) * inf.scale + inf.offset
    t = tick / hz
    order = np.argsort(t, kind="stable")
    t, v = t[order], v[order]
    keep = np.r_[True, t[1:] != t[:-1]]
    return t[keep], v[keep]


CASES = [(1_000_000, 1000, EIGHT_HOURS_US, False), (1_000_000, 1000, EIGHT_HOURS_US, True),
         (32_768, 33, 2**40, False), (999_983, 977, 7, True)]


@pytest.fixture(params=CASES, ids=["1MHz-8h", "1MHz-8h-overlap", "32768Hz", "prime-Hz-overlap"])
def pair(request: pytest.FixtureRequest) -> tuple[Series, np.ndarray, np.ndarray]:
    hz, period, t0, overlap = request.param
    inf = info(period)
    frames = frames_of(hz % 97, period, t0, overlap)
    store = ChannelStore(inf)
    for f in frames:
        store.add(*f)
    t, v = reference([f[1:] for f in frames], inf, hz)
    return Series.over(store, hz), t, v


def queries(t: np.ndarray) -> np.ndarray:
    """Sample times, halfway, one ulp either side, in gaps, beyond both ends."""
    mid = (t[1:] + t[:-1]) / 2
    return np.concatenate([t, mid, np.nextafter(t, -np.inf), np.nextafter(t, np.inf),
                           [t[0] - 1.0, t[-1] + 1.0, -np.inf, np.inf, np.nan]])


def test_materialised_series_is_the_reference(pair: tuple[Series, np.ndarray, np.ndarray]) -> None:
    s, t, v = pair
    assert s.n == t.size
    assert np.array_equal(s.times(), t) and np.array_equal(s.values(), v)
    assert np.array_equal(s.t_s, t) and np.array_equal(s.v, v)
    rng = np.random.default_rng(1)
    for lo, hi in rng.integers(0, t.size, (50, 2)):
        lo, hi = min(lo, hi), max(lo, hi)
        assert np.array_equal(s.times(lo, hi), t[lo:hi]) and np.array_equal(s.values(lo, hi), v[lo:hi])
    assert [c for c in s.chunks(7)][-1][1] == t.size


@pytest.mark.parametrize("side", ["left", "right"])
def test_index_is_searchsorted(pair: tuple[Series, np.ndarray, np.ndarray],
                               side: Literal["left", "right"]) -> None:
    s, t, _ = pair
    q = queries(t)
    want = np.searchsorted(t, q, side=side)
    assert np.array_equal(s.index(q, side), want)  # many at once
    assert [s.index(float(x), side) for x in q] == want.tolist()  # one by one
    assert s.index(int(t[3]), side) == np.searchsorted(t, int(t[3]), side=side)


def test_window_and_means_match_the_arrays(pair: tuple[Series, np.ndarray, np.ndarray]) -> None:
    s, t, v = pair
    plain = Series(t, v)
    rng = np.random.default_rng(2)
    picks = np.r_[t[rng.integers(0, t.size, 40)], rng.uniform(t[0] - 0.01, t[-1] + 0.01, 40)]
    for lo, hi in zip(picks[::2], picks[1::2]):
        sel = (t >= lo) & (t <= hi)
        wt, wv = s.window(lo, hi)
        assert np.array_equal(wt, t[sel]) and np.array_equal(wv, v[sel])
        assert s.span(lo, hi) == tuple(np.searchsorted(t, [lo, hi]))
        dt = float(np.median(np.diff(t)))
        got, ref = window_mean(s, lo, hi, dt), window_mean(plain, lo, hi, dt)
        assert np.array_equal(got, ref, equal_nan=True)


def test_period_is_the_median_spacing(pair: tuple[Series, np.ndarray, np.ndarray]) -> None:
    s, t, _ = pair
    assert s.period() == float(np.median(np.diff(t)))
    store = s._store
    assert store is not None
    odd = ChannelStore(info(store.period))  # one sample fewer: the other parity of the median
    seq, tick, raw = store.arrays()
    odd.add(seq[:-1], tick[:-1], raw[:-1])
    assert Series.over(odd, s._hz).period() == float(np.median(np.diff(t[:-1])))


def test_resample_reads_only_the_samples_around(pair: tuple[Series, np.ndarray, np.ndarray]) -> None:
    s, t, v = pair
    dt = float(np.median(np.diff(t)))
    for start in (t[0] - 3 * dt, t[t.size // 3], t[-1] - 20 * dt):
        grid = start + np.arange(-5, 60) * (dt * 0.37)
        want = np.interp(grid, t, v)
        j = np.clip(np.searchsorted(t, grid), 1, t.size - 1)
        near = np.minimum(np.abs(t[j] - grid), np.abs(t[j - 1] - grid))
        want = np.where(near <= 1.5 * dt, want, np.nan)
        assert np.array_equal(_resample(s, grid, dt), want, equal_nan=True)


def test_empty_and_single_sample_stores() -> None:
    empty = Series.over(ChannelStore(info()), 1_000_000)
    assert empty.n == 0 and empty.index(1.0) == 0 and math.isnan(empty.period())
    assert empty.window(0.0, 1.0)[0].size == 0
    one = ChannelStore(info())
    one.add(np.array([1]), np.array([5000]), np.array([3], np.int16))
    s = Series.over(one, 1_000_000)
    t = np.array([0.005])
    for q in (0.004, 0.005, 0.006):
        assert s.index(q) == np.searchsorted(t, q) and s.index(q, "right") == \
            np.searchsorted(t, q, side="right")
    assert math.isnan(s.period())


# ---- whole-series figures ----------------------------------------------------------------
def test_ranked_percentile_is_numpys() -> None:
    rng = np.random.default_rng(3)
    for n in (1, 2, 3, 10, 201, 4096):
        x = np.abs(rng.integers(-50, 50, n) * 0.013 - 0.2)
        vals, counts = np.unique(x, return_counts=True)
        for q in (0.0, 12.5, 50.0, 99.5, 99.9, 100.0):
            assert ranked_percentile(vals, counts, q) == float(np.percentile(x, q)), (n, q)


@pytest.mark.parametrize("kind", ["h", "b", "H", "f"])
def test_abs_percentile_by_counting(kind: str) -> None:
    rng = np.random.default_rng(4)
    inf = info(1000, 0.0007, -0.3, kind)
    raw = rng.integers(0, 120, 5001).astype(inf.dtype)
    store = ChannelStore(inf)
    store.add(np.zeros(raw.size, np.int64), np.arange(raw.size, dtype=np.int64) * 1000, raw)
    s = Series.over(store, 1_000_000)
    assert (s.levels() is None) == (kind == "f")
    assert abs_percentile(s, 99.5) == float(np.percentile(np.abs(s.values()), 99.5))


def rig_current_store() -> tuple[ChannelStore, np.ndarray, np.ndarray]:
    """The simulated rig's coil current, quantised to int16 as a board sends it."""
    cfg = rig.RigConfig(seed=2, blocks_rad_s=(0.0, 2 * math.pi), block_s=20.0)
    sig = rig.signals(cfg)
    scale = 1e-4
    raw = np.round(sig.current_a / scale).astype(np.int16)
    inf = StreamInfo(2, ord("h"), 0, 1000, scale, 0.0, "coil_current", "A")
    store = ChannelStore(inf)
    tick = EIGHT_HOURS_US + np.arange(raw.size, dtype=np.int64) * 1000
    keep = np.ones(raw.size, bool)
    keep[3000:3050] = False  # a stretch lost on the link
    for lo in range(0, raw.size, 112):  # frame by frame
        sl = slice(lo, lo + 112)
        m = keep[sl]
        store.add(np.full(int(m.sum()), lo // 112, np.int64), tick[sl][m], raw[sl][m])
    return store, tick[keep] / 1_000_000, raw[keep].astype(np.float64) * scale


def test_current_pulses_and_rise_over_a_store(monkeypatch: pytest.MonkeyPatch) -> None:
    store, t, amps = rig_current_store()
    s = Series.over(store, 1_000_000)
    ref = from_current(t, amps)
    assert len(ref) > 5
    assert pulses_in_current(s) == ref
    assert pulses_in_current(s, 1.0, 0.5) == from_current(t, amps, 1.0, 0.5)
    assert rise_of(s, ref) == rise_time(t, amps, ref)
    whole = Series.chunks
    monkeypatch.setattr(Series, "chunks", lambda self, size=0: whole(self, 997))
    assert pulses_in_current(s) == ref  # chunks much shorter than a pulse


# ---- the sink ------------------------------------------------------------------------------
class Collect(NullSink):
    """The reference: every call kept whole, each with the description it came with."""

    def __init__(self) -> None:
        self.calls: list[tuple[int, int, StreamInfo, np.ndarray, np.ndarray]] = []

    def samples(self, run: RunState, info: StreamInfo, seq: np.ndarray, tick: np.ndarray,
                raw: np.ndarray) -> None:
        self.calls.append((run.board, run.run, info, tick.copy(), raw.copy()))


def test_array_sink_keeps_what_the_decoder_gave() -> None:
    cfg = rig.RigConfig(seed=7, blocks_rad_s=(0.0,), block_s=12.0)
    data = rig.capture(cfg)
    data = data + data[len(data) // 3 : len(data) // 2]  # a stretch received twice
    sink, ref = ArraySink(), Collect()
    for s in (sink, ref):
        dec = Decoder(s)
        dec.feed(data)
        dec.finish()
    hz = {k: r.tick_hz for k, r in dec.runs.items()}
    (rd,) = sink.runs(hz)
    for name, series in rd.streams.items():
        calls = [c for c in ref.calls if c[2].name == name]
        t, v = reference([(c[3], c[4]) for c in calls], calls[0][2], hz[(rd.board, rd.run)])
        assert np.array_equal(series.times(), t) and np.array_equal(series.values(), v), name
        assert series.unit == calls[-1][2].unit


def test_runs_from_channels() -> None:
    a, b = ChannelStore(info()), ChannelStore(StreamInfo(2, ord("h"), 0, 500, 1.0, 0.0, "x", "u"))
    a.add(np.array([1, 1]), np.array([2000, 3000]), np.array([1, 2], np.int16))
    b.add(np.array([1]), np.array([2500]), np.array([9], np.int16))
    runs = runs_from_channels({(1, 2, 1): a, (1, 2, 2): b, (3, 1, 1): ChannelStore(info())},
                              {(1, 2): [(4000, 1), (2000, 0), (4000, 1)], (5, 5): [(10, -1)]},
                              {(1, 2): 1000})
    assert [(r.board, r.run) for r in runs] == [(1, 2), (3, 1), (5, 5)]
    r = runs[0]
    assert list(r.streams) == ["cap_amp", "x"] and r.streams["x"].unit == "u"
    assert np.array_equal(r.streams["cap_amp"].times(), [2.0, 3.0])
    assert np.array_equal(r.coil_t_s, [2.0, 4.0]) and np.array_equal(r.coil_state, [0, 1])
    assert runs[2].coil_t_s.tolist() == [1e-5]  # default tick rate: microseconds


@pytest.mark.parametrize("side", ["left", "right"])
def test_store_index_is_searchsorted_on_its_ticks(pair: tuple[Series, np.ndarray, np.ndarray],
                                                  side: Literal["left", "right"]) -> None:
    store = pair[0]._store
    assert store is not None
    ticks = store.ticks()
    q = np.r_[ticks, ticks - 1, ticks + 1, ticks[0] - 10**6, ticks[-1] + 10**6]
    assert np.array_equal(store.index(q, side), np.searchsorted(ticks, q, side=side))
    assert np.array_equal(store.index(q + 0.5, side), np.searchsorted(ticks, q + 0.5, side=side))


# ---- finding and reducing ------------------------------------------------------------------
def test_merge_matches_the_pairwise_definition() -> None:
    """Events against current pulses by the definition (every pair compared)."""
    rng = np.random.default_rng(6)

    def pulses(n: int, source: str) -> list[Pulse]:
        on = np.cumsum(rng.uniform(0.2, 2.0, n))
        return [Pulse(float(a), float(a + rng.uniform(0.05, 0.19)), 1, source,
                      "lost" if rng.random() < 0.1 else "") for a in on]

    def by_pairs(events: list[Pulse], current: list[Pulse]) -> list[Pulse]:
        out = []
        for e in events:
            inside = [c for c in current if e.onset_s < c.end_s and c.onset_s < e.end_s]
            if len(inside) == 1 and not inside[0].note and \
                    inside[0].end_s < e.end_s - LOST_END * (e.end_s - e.onset_s):
                e = Pulse(e.onset_s, inside[0].end_s, e.polarity, "events+current")
            out.append(e)
        out += [c for c in current
                if not any(e.onset_s < c.end_s and c.onset_s < e.end_s for e in events)]
        return sorted(out, key=lambda p: p.onset_s)

    for _ in range(30):
        ev, cur = pulses(40, "events"), pulses(40, "current")
        assert merge(ev, cur) == by_pairs(ev, cur)
        rng.shuffle(cur)  # out of order: searched one by one
        assert merge(ev, cur) == by_pairs(ev, cur)
    assert merge([], []) == []


def test_analysis_over_stores_equals_the_analysis_over_arrays() -> None:
    """The same decoded run, once on its stores and once made whole as arrays."""
    cfg = rig.RigConfig(seed=7, blocks_rad_s=(0.0, 2 * math.pi, -2 * math.pi), block_s=12.0)
    (run,) = decode_runs([[rig.capture(cfg)]])
    whole = RunData(run.board, run.run, {k: Series(s.times(), s.values(), s.unit)
                                         for k, s in run.streams.items()},
                    run.coil_t_s, run.coil_state)
    for source in ("auto", "current"):
        a, b = (analyse([rd], Settings(source=source), Options()) for rd in (run, whole))
        assert [vars(p) | {"shape": None} for p in a.pulses] == \
            [vars(p) | {"shape": None} for p in b.pulses]
        for p, q in zip(a.pulses, b.pulses):
            for x, y in zip(p.waves(), q.waves()):
                assert (x is None and y is None) or np.array_equal(x, y, equal_nan=True)
        for c, d in zip(a.conditions, b.conditions):
            assert np.array_equal(c.wave, d.wave, equal_nan=True) and \
                np.array_equal(c.wave_se, d.wave_se, equal_nan=True)
        assert np.array_equal(a.fit.coef, b.fit.coef) and np.array_equal(a.grid_s, b.grid_s)


def test_a_stream_described_anew_keeps_each_scaling() -> None:
    """Values keep the description they came with; the latest name and unit
    win; of equal times the first decoded is kept (many small calls, gathered)."""
    run = RunState(1, 1, tick_hz=1_000_000)
    old, new = info(1000, 0.001, 0.0), StreamInfo(1, ord("h"), 0, 1000, 0.002, 1.0, "cap_amp", "mV")
    rng = np.random.default_rng(8)
    calls = []
    for k in range(3000):
        inf = old if k < 1000 or k >= 2500 else new
        n = int(rng.integers(1, 30))
        t0 = int(rng.integers(0, 50_000)) * 1000
        calls.append((inf, np.full(n, k, np.int64), t0 + np.arange(n, dtype=np.int64) * 1000,
                      rng.integers(-99, 99, n).astype(np.int16)))
    sink = ArraySink()
    for inf, seq, tick, raw in calls:
        sink.samples(run, inf, seq, tick, raw)
    (rd,) = sink.runs({})
    s = rd.streams["cap_amp"]
    tick = np.concatenate([c[2] for c in calls])
    v = np.concatenate([c[3].astype(np.float64) * c[0].scale + c[0].offset for c in calls])
    t = tick / 1_000_000
    order = np.argsort(t, kind="stable")
    t, v = t[order], v[order]
    keep = np.r_[True, t[1:] != t[:-1]]
    assert np.array_equal(s.t_s, t[keep]) and np.array_equal(s.v, v[keep]) and s.unit == "V"
