"""The samples' frames form (one seq, first tick and count a frame) against the
per-sample form: the same samples, by SPEC 4's rule that a frame's samples
follow its first tick one period apart (checked here with a plain loop)."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from slipless.decode.decoder import StreamInfo, expand_frames
from slipless.decode.store import ChannelStore, frames_of_samples

INFO = StreamInfo(0, 0x68, 0, 1000, 1.0, 0.0, "cap", "V")

frames = st.lists(st.tuples(st.integers(0, 1 << 40), st.integers(-(1 << 40), 1 << 40),
                            st.integers(1, 9)), min_size=1, max_size=30)


def _loop(rows: list[tuple[int, int, int]], period: int) -> tuple[list[int], list[int]]:
    seq = [s for s, _, c in rows for _ in range(c)]
    tick = [t + i * period for _, t, c in rows for i in range(c)]
    return seq, tick


def _cols(rows: list[tuple[int, int, int]]) -> tuple[np.ndarray, ...]:
    return tuple(np.array(col, np.int64) for col in zip(*rows))


@settings(max_examples=200, deadline=None)
@given(frames)
def test_expand_frames_places_samples_one_period_apart(rows: list[tuple[int, int, int]]) -> None:
    seq, tick = expand_frames(INFO, *_cols(rows))
    assert (seq.tolist(), tick.tolist()) == _loop(rows, INFO.period_us)
    assert seq.dtype == tick.dtype == np.int64


@settings(max_examples=100, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 50), st.integers(0, 200), st.integers(1, 6)),
                min_size=1, max_size=40))
def test_store_holds_the_same_samples_in_either_form(rows: list[tuple[int, int, int]]) -> None:
    """Frames that repeat or overlap in part (a resend, a clock step) included."""
    rows = [(s, t * 1000, c) for s, t, c in rows]
    seqs, ticks, counts = _cols(rows)
    raw = np.arange(int(counts.sum()), dtype=np.int16)
    by_frame, by_sample = ChannelStore(INFO), ChannelStore(INFO)
    by_frame.add_frames(seqs, ticks, counts, raw)
    seq, tick = _loop(rows, INFO.period_us)
    by_sample.add(np.array(seq, np.int64), np.array(tick, np.int64), raw)
    for a, b in ((by_frame.ticks(), by_sample.ticks()), (by_frame.seqs(), by_sample.seqs()),
                 (by_frame.values(), by_sample.values())):
        assert np.array_equal(a, b)


def test_frames_of_samples_inverts_expand() -> None:
    rows = [(4, 0, 3), (5, 3000, 2), (9, 10_000, 1), (10, 11_000, 4)]
    seqs, ticks, counts = frames_of_samples(*_loop(rows, 1000), 1000)
    assert list(zip(seqs.tolist(), ticks.tolist(), counts.tolist())) == rows
