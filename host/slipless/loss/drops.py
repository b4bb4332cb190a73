"""Which missing frames the board itself dropped, from its own counters.

The board's send queue holds at most Q frames; when a new frame would make it
longer, the oldest unsent frame leaves the queue unsent and the board's
`dropped` counter (sent in every STATUS) goes up by one (firmware/ring.py).
So a frame x dropped when frame y was built has x = y - Q, and a STATUS
frame b counts exactly the drops of the frames built before it:

    counted in STATUS b  <=>  x <= b - 1 - Q

The drops counted by STATUS b but not by the STATUS a before it therefore lie
in seqs [a - Q, b - 1 - Q] (a = -1 for the first STATUS). Q is the
`queue_high` the board reports: its high-water mark equals Q once the queue
has overflowed.

Counts per window are exact; which frames inside a window is a rule: a queue
overflow drops a contiguous block, and the frame after the block is the next
one sent, so the block ends a run of missing frames. Within the window we
take, in order: a run exactly as long as the count still to place, else the
shortest longer run (from its end), else the longest run whole (latest first
on ties), and repeat.

What the counter speaks of is the live link alone: the board's file mirror is
written before the send queue, so it keeps the frames the queue dropped. When
the inputs hold frames of a window that did not come over the live link (a
mirror file, a raw stream, a capture of a mirror pull), a count the window's
missing frames cannot hold is placed on those: the frames the live link
missed and the mirror kept, not a contradiction. Only a count that neither
can hold is one.
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np


def _runs(mask: np.ndarray, lo: int, hi: int) -> list[tuple[int, int]]:
    """(start, length) of the runs of True in mask[lo..hi]."""
    if hi < lo:
        return []
    m = mask[lo : hi + 1].astype(np.int8)
    edges = np.diff(np.concatenate(([0], m, [0])))
    starts = np.flatnonzero(edges == 1)
    ends = np.flatnonzero(edges == -1)
    return [(lo + int(s), int(e - s)) for s, e in zip(starts, ends)]


def _pick(runs: list[tuple[int, int]], want: int) -> tuple[int, int]:
    exact = [r for r in runs if r[1] == want]
    if exact:
        return exact[-1]
    longer = [r for r in runs if r[1] > want]
    if longer:
        return min(longer, key=lambda r: (r[1], -r[0]))
    return max(runs, key=lambda r: (r[1], r[0]))


def _take(free: np.ndarray, alloc: np.ndarray, lo: int, hi: int, want: int,
          avoid: np.ndarray | None = None) -> int:
    """Place up to `want` drops in free[lo..hi], off `avoid` first, then on it."""
    taken = 0
    for mask in ((free & ~avoid, free) if avoid is not None else (free,)):
        runs = _runs(mask & ~alloc, max(lo, 0), min(hi, free.size - 1))
        while want > taken and runs:
            start, n = _pick(runs, want - taken)
            runs.remove((start, n))
            k = min(n, want - taken)
            alloc[start + n - k : start + n] = True
            taken += k
    return taken


def allocate(free: np.ndarray, statuses: Iterable[tuple[int, int, int]],
             avoid: np.ndarray | None = None, held: np.ndarray | None = None
             ) -> tuple[np.ndarray, list[str]]:
    """Mark the frames the board's counters say it dropped.

    free: per seq, True where the frame did not arrive live (a candidate).
    statuses: (seq, dropped, queue_high) of every STATUS frame obtained.
    avoid: candidates taken only when a window has too few others (frames that
    damaged segments most likely were: the counters are counts, where damage sat
    is a guess, so a count is never left unplaced for it).
    held: frames obtained, but not over the live link (mirror, raw stream,
    pull): taken last, for what the missing frames cannot hold.
    Returns the mark (it may cover held frames) and the contradictions found.
    """
    alloc = np.zeros(free.size, dtype=bool)
    problems: list[str] = []
    if held is not None:
        held = held & ~free
    prev_seq, prev_dropped = -1, 0
    for seq, dropped, q in sorted(set(statuses)):
        delta = dropped - prev_dropped
        if delta < 0:
            problems.append(f"the board's dropped counter fell from {prev_dropped} to {dropped} "
                            f"at STATUS seq {seq}")
        elif delta:
            got = _take(free, alloc, prev_seq - q, seq - 1 - q, delta, avoid)
            if got < delta:  # queue_high may understate the queue: look wider
                got += _take(free, alloc, prev_seq - 2 * q - 1, seq - 1, delta - got, avoid)
            if got < delta and held is not None:  # dropped live, kept by the mirror
                got += _take(held, alloc, prev_seq - q, seq - 1 - q, delta - got)
                if got < delta:
                    got += _take(held, alloc, prev_seq - 2 * q - 1, seq - 1, delta - got)
            if got < delta:
                problems.append(f"the board counted {delta} dropped frames between STATUS seq "
                                f"{max(prev_seq, 0)} and {seq}, but only {got} are missing there")
        prev_seq, prev_dropped = seq, dropped
    return alloc, problems
