"""`slipless align` in pieces: long runs are held as runstore.ChannelStore and
written a chunk at a time; the tables must not depend on the chunk sizes.

The references are the whole-array computations the chunked code replaces:
align_grid.on_grid over every sample of a channel, and for the sample store a
stable sort by tick keeping the first decoded copy of each tick (common
practice for merging records that arrive more than once: resent frames, the
board's mirror file).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from slipless.align import aligned as align
from slipless.align.aligned import GridPart
from slipless.align.collect import AlignSink, TimingRows
from slipless.align.grid import gaps_after, grid_rows, grid_times, on_grid
from slipless.cli import main
from slipless.decode import store as runstore
from slipless.decode.decoder import RunState, StreamInfo
from slipless.decode.store import ChannelStore
from slipless.protocol import wire
from slipless.sim.clock_capture import SimBoard, write_clock_capture
from slipless.sim.clocks import ClockSim

PERIOD_US = 1000
I16 = 0x68


def info(stream: int = 0, state: bool = False, scale: float = 0.001, period_us: int = PERIOD_US,
         type_: int = I16) -> StreamInfo:
    return StreamInfo(stream, type_, wire.FLAG_STATE if state else 0, period_us, scale, 0.5,
                      f"s{stream}", "V")


# ---- the store: any arrival order gives stable sort + keep first -------------------------
def _frames(rng: np.random.Generator, overlaps: bool, n_frames: int = 60, per: int = 8
            ) -> list[tuple[np.ndarray, np.ndarray, np.ndarray]]:
    """(seq, tick, raw) per decoder call: frames in order with some lost, then
    resends (exact copies, some with other values), frames out of order, and
    frames whose ticks overlap others in part (a clock stepping back)."""
    def frame(seq: int, tick0: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        tick = tick0 + np.arange(per, dtype=np.int64) * PERIOD_US
        return (np.full(per, seq, np.int64), tick,
                rng.integers(-30000, 30000, per).astype(np.int16))

    base = [frame(q, 5_000_000 + q * per * PERIOD_US) for q in range(n_frames)]
    calls = [base[q] for q in range(n_frames) if rng.random() > 0.1]  # some lost on the radio
    for q in rng.choice(n_frames, 12, replace=False):  # resent: same ticks, maybe other values
        s, t, r = base[q]
        calls.append((s, t, r if rng.random() < 0.5 else r[::-1].copy()))
    order = rng.permutation(len(calls))
    calls = [calls[i] for i in order]  # out of order (the mirror's and resends' frames)
    for q in rng.choice(n_frames, 5 if overlaps else 0, replace=False):  # partly overlapping
        calls.append(frame(1000 + int(q), 5_000_000 + int(q) * per * PERIOD_US + 3 * PERIOD_US))
    # a decoder call may carry several frames: join a few neighbours
    joined = []
    i = 0
    while i < len(calls):
        k = int(rng.integers(1, 4))
        part = calls[i : i + k]
        joined.append(tuple(np.concatenate(c) for c in zip(*part)))
        i += k
    return joined  # type: ignore[return-value]


def _reference(calls: list[tuple[np.ndarray, np.ndarray, np.ndarray]]
               ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    seq, tick, raw = (np.concatenate(c) for c in zip(*calls))
    order = np.argsort(tick, kind="stable")
    seq, tick, raw = seq[order], tick[order], raw[order]
    first = np.r_[True, tick[1:] != tick[:-1]]
    return seq[first], tick[first], raw[first]


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("pending", [29, runstore.PENDING])
def test_store_equals_stable_sort_keep_first(seed: int, pending: int,
                                             monkeypatch: pytest.MonkeyPatch) -> None:
    rng = np.random.default_rng(seed)
    calls = _frames(rng, overlaps=bool(seed % 2))  # without: the store keeps whole segments
    monkeypatch.setattr(runstore, "PENDING", pending)  # 29: batches end inside a call's run
    ch = ChannelStore(info())
    for c in calls:
        ch.add(*c)
    ch.seal()
    want = _reference(calls)
    for got, ref in zip(ch.arrays(), want):
        assert np.array_equal(got, ref) and got.dtype == ref.dtype
    tick = want[1]
    assert ch.n == tick.size and ch.tick_range() == (int(tick[0]), int(tick[-1]))
    q = np.r_[tick[::3], tick[::5] + 1, tick[0] - 7, tick[-1] + 7]
    for side in ("left", "right"):
        assert np.array_equal(ch.index(q, side), np.searchsorted(tick, q, side))
    pieces = list(ch.chunks(17))
    assert pieces[0][0] == 0 and pieces[-1][1] == ch.n
    assert all(a[1] == b[0] for a, b in zip(pieces, pieces[1:]))
    assert np.array_equal(np.concatenate([ch.ticks(lo, hi) for lo, hi in pieces]), tick)
    assert np.array_equal(np.concatenate([ch.seqs(lo, hi) for lo, hi in pieces]), want[0])
    assert np.array_equal(np.concatenate([ch.values(lo, hi) for lo, hi in pieces]),
                          want[2].astype(np.float64) * 0.001 + 0.5)


def test_a_stream_described_anew_is_read_with_its_latest_description() -> None:
    sink = AlignSink()
    run = RunState(board=1, run=2)
    first, later = info(scale=0.001), info(scale=0.002)
    tick = np.arange(4, dtype=np.int64) * PERIOD_US
    sink.samples(run, first, np.zeros(4, np.int64), tick, np.arange(4, dtype=np.int16))
    sink.samples(run, later, np.ones(4, np.int64), tick + 4 * PERIOD_US,
                 np.arange(4, 8, dtype=np.int16))
    sink.seal()
    ch = sink.channels[(1, 2, 0)]
    assert ch.info == later and ch.n == 8  # as before: every sample with the last description
    assert np.array_equal(ch.values(), np.arange(8) * 0.002 + 0.5)


def test_timing_rows_keep_arrival_order_and_set_u64_garbage_apart() -> None:
    t = TimingRows()
    t.append((5, 100, 1_000, 0))
    t.append((3, 90, 990, 1))
    t.append((1 << 63, 95, 995, 0))  # a u64 tick beyond int64: no row of rows()
    t.append((7, 120, (1 << 64) - 1, 0))
    assert len(t) == 4
    assert t.rows().tolist() == [[5, 100, 1_000, 0], [3, 90, 990, 1]]
    assert list(t) == [(5, 100, 1_000, 0), (3, 90, 990, 1), (1 << 63, 95, 995, 0),
                       (7, 120, (1 << 64) - 1, 0)]
    assert t.tick_range() == (3, 1 << 63)
    assert TimingRows().tick_range() is None and TimingRows().rows().shape == (0, 4)


# ---- the grid: chunk by chunk equals on_grid over the whole channel ---------------------------
def _grid_store(rng: np.random.Generator, state: bool) -> ChannelStore:
    ch = ChannelStore(info(state=state))
    tick = 2_000_000 + np.arange(3000, dtype=np.int64) * PERIOD_US
    keep = np.ones(tick.size, bool)
    for start in rng.choice(tick.size - 40, 8, replace=False):  # lost frames: gaps
        keep[start : start + int(rng.integers(2, 40))] = False
    seq = np.arange(tick.size) // 10
    raw = rng.integers(-2000, 2000, tick.size).astype(np.int16)
    ch.add(seq[keep], tick[keep], raw[keep])
    ch.seal()
    return ch


@pytest.mark.parametrize("state", [False, True])
@pytest.mark.parametrize("seed", range(3))
def test_grid_part_in_any_chunks_equals_on_grid_over_all_samples(seed: int, state: bool) -> None:
    rng = np.random.default_rng(10 + seed)
    ch = _grid_store(rng, state)

    def to_time(t: np.ndarray) -> np.ndarray:  # a skewed clock, rounded to ns as the model's is
        return np.rint(np.asarray(t) * 1000 * (1 + 37e-6) + 123_456_789).astype(np.int64)

    tick = ch.ticks()
    t = to_time(tick)
    period_ns = int(rng.choice([250_000, 333_333, 1_000_000, 2_500_000]))
    grid = grid_times(int(t[0]) - 5 * period_ns, int(t[-1]) + 5 * period_ns, period_ns)
    want = on_grid(grid, t, ch.values(), gaps_after(tick, PERIOD_US), PERIOD_US * 1e3, state)
    part = GridPart(ch, to_time)
    assert (part.t_first, part.t_last) == (int(t[0]), int(t[-1]))
    cuts = np.unique(np.r_[0, rng.integers(1, grid.size, 40), grid.size])
    got = np.concatenate([part.on_grid(grid[a:b]) for a, b in zip(cuts[:-1], cuts[1:])])
    assert np.array_equal(got, want, equal_nan=True)
    singles = np.concatenate([part.on_grid(grid[i : i + 1]) for i in range(0, grid.size, 97)])
    assert np.array_equal(singles, want[::97], equal_nan=True)


# ---- end to end: tiny chunks write the same tables ---------------------------------------------
@pytest.fixture(scope="module")
def capture(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("cap") / "two.slcap"
    write_clock_capture(path, [
        SimBoard(1, ClockSim(seconds=25, skew_ppm=40.0, offset_s=1000.0, seed=3), rate_hz=250),
        SimBoard(2, ClockSim(seconds=25, skew_ppm=-35.0, offset_s=1001.3, start_tick=9_000_000,
                             seed=5), rate_hz=200, lost_s=(10.0, 11.5)),
    ], seed=8)
    return path


def _align(cap: Path, out: Path, fmt: str) -> None:
    assert main(["align", str(cap), "--grid", "2ms", "--out", str(out), "--format", fmt,
                 "--quiet"]) == 0


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_tiny_chunks_write_the_same_tables(capture: Path, tmp_path: Path, fmt: str,
                                           monkeypatch: pytest.MonkeyPatch) -> None:
    if fmt == "parquet":
        pq = pytest.importorskip("pyarrow.parquet")
    whole = tmp_path / "whole"
    _align(capture, whole, fmt)  # every table far below one chunk
    monkeypatch.setattr(align, "SAMPLE_CHUNK", 97)
    monkeypatch.setattr(align, "GRID_CHUNK_ROWS", 37)
    monkeypatch.setattr(runstore, "PENDING", 50)
    pieces = tmp_path / "pieces"
    _align(capture, pieces, fmt)
    assert (whole / "clock.json").read_bytes() == (pieces / "clock.json").read_bytes()
    for name in ("samples", "grid", "events", "status"):
        a, b = whole / f"{name}.{fmt}", pieces / f"{name}.{fmt}"
        if fmt == "csv":
            assert a.read_bytes() == b.read_bytes(), name
        else:  # the same rows; the row groups follow the writes
            ta, tb = pq.read_table(a), pq.read_table(b)
            assert ta.num_rows > 0 and ta.equals(tb) and ta.schema.metadata == tb.schema.metadata


def test_grid_chunks_follow_the_densest_channel(capture: Path, tmp_path: Path,
                                                monkeypatch: pytest.MonkeyPatch) -> None:
    whole = tmp_path / "whole"
    _align(capture, whole, "csv")
    monkeypatch.setattr(align, "GRID_CHUNK_SAMPLES", 3)  # 3 samples of 4 ms: 6 rows of 2 ms
    sizes: list[int] = []

    def rows(start: int, period: int, lo: int, hi: int) -> np.ndarray:
        sizes.append(hi - lo)
        return grid_rows(start, period, lo, hi)

    monkeypatch.setattr(align, "grid_rows", rows)
    pieces = tmp_path / "pieces"
    _align(capture, pieces, "csv")
    assert len(sizes) > 1000 and max(sizes) <= 6
    for name in ("samples", "grid"):
        assert (whole / f"{name}.csv").read_bytes() == (pieces / f"{name}.csv").read_bytes()
