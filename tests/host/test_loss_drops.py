"""Placing the board's dropped-frame counts on missing frames (loss_drops.py).

The counting window follows firmware/ring.py's queue (a frame x dropped from a
queue of Q is counted by STATUS b when x <= b - 1 - Q); the choice inside a
window is our own rule, checked here case by case."""

from __future__ import annotations

import numpy as np

from slipless.loss.drops import allocate


def mask(n: int, *seqs: int) -> np.ndarray:
    m = np.zeros(n, dtype=bool)
    m[list(seqs)] = True
    return m


def marked(a: np.ndarray) -> list[int]:
    return [int(i) for i in np.flatnonzero(a)]


def test_window_follows_the_queue() -> None:
    # Q = 2, STATUS at 10 (0 dropped) and 20 (3 dropped): drops lie in [8, 17].
    free = mask(30, 3, 12, 13, 14, 18, 19)
    alloc, problems = allocate(free, [(10, 0, 2), (20, 3, 2)])
    assert marked(alloc) == [12, 13, 14] and problems == []


def test_exact_run_beats_a_longer_one() -> None:
    free = mask(30, 9, 10, 11, 12, 15, 16)
    alloc, _ = allocate(free, [(20, 2, 1)])
    assert marked(alloc) == [15, 16]


def test_shorter_count_takes_the_end_of_the_shortest_longer_run() -> None:
    # a drop block ends where the board resumed sending: the end of a run
    free = mask(40, 2, 3, 4, 5, 6, 10, 11, 12)
    alloc, _ = allocate(free, [(20, 2, 1)])
    assert marked(alloc) == [11, 12]


def test_longest_runs_first_when_none_is_long_enough() -> None:
    free = mask(40, 2, 5, 6, 7, 10, 11)
    alloc, _ = allocate(free, [(20, 5, 1)])
    assert marked(alloc) == [5, 6, 7, 10, 11]


def test_counter_beyond_what_is_missing_is_named() -> None:
    alloc, problems = allocate(mask(30, 5), [(10, 0, 1), (20, 4, 1)])
    assert marked(alloc) == [] and len(problems) == 1
    assert "counted 4 dropped frames between STATUS seq 10 and 20, but only 0" in problems[0]
    alloc, problems = allocate(mask(30), [(10, 3, 1), (20, 1, 1)])
    assert any("fell from 3 to 1" in p for p in problems)


def test_same_status_twice_counts_once() -> None:
    # the same STATUS from the radio and from the mirror
    alloc, problems = allocate(mask(30, 4, 5), [(10, 2, 2), (10, 2, 2)])
    assert marked(alloc) == [4, 5] and problems == []
