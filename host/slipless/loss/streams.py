"""Sample accounting per stream, from the tick grid.

Samples sit on a stream's nominal grid: sample k of a SAMPLES frame is at
tick0 + k x period_us (SPEC sec. 3.2), so the samples missing between two
obtained frames of a stream are (next tick0 - previous end) / period. Per
stream:

- expected: END's per-stream total (without END: obtained + the holes
  between obtained frames; the ends of the run cannot be known).
- received / recovered_resend / recovered_mirror: samples of obtained frames,
  by their frame's term.
- lost / dropped_board: the missing samples. A hole is split between the two
  in proportion to the frames never obtained in its seq range (lost on the
  radio vs dropped on the board); samples missing before the first or after
  the last obtained frame form the head and tail holes, split using END's
  tick where both are possible.

A hole with no frame missing around it (a frame that could not be decoded, or
an uncertain tick) is counted as lost and named as a discrepancy.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from slipless.loss.collect import RunFacts

TERMS = ("received", "recovered_resend", "recovered_mirror", "lost", "dropped_board")
_LOST, _DROPPED = 3, 4


@dataclass
class StreamAccount:
    stream: int
    name: str
    unit: str
    period_us: int
    expected: int
    samples: dict[str, int]  # per term
    frames: dict[str, int]  # obtained frames per term, plus missing_est
    expected_known: bool
    start_us: int | None = None  # tick of the stream's first sample (inferred if it was lost)

    def seconds(self, term: str) -> float:
        n = self.expected if term == "expected" else self.samples[term]
        return n * self.period_us / 1e6

    @property
    def closes(self) -> bool:
        return self.expected == sum(self.samples.values())


class _Never:
    """Prefix sums of never-obtained frames by term, for seq ranges."""

    def __init__(self, cls: np.ndarray) -> None:
        self.lost = np.concatenate(([0], np.cumsum(cls == _LOST)))
        self.dropped = np.concatenate(([0], np.cumsum(cls == _DROPPED)))

    def between(self, lo: int, hi: int) -> tuple[int, int]:
        """(lost, dropped) among seqs lo..hi inclusive."""
        n = self.lost.size - 1
        lo, hi = max(lo, 0), min(hi, n - 1)
        if hi < lo:
            return 0, 0
        return (int(self.lost[hi + 1] - self.lost[lo]), int(self.dropped[hi + 1] - self.dropped[lo]))


def _split(h: int, lost: int, dropped: int) -> tuple[int, int]:
    if lost + dropped == 0:
        return h, 0
    d = round(h * dropped / (lost + dropped))
    return h - d, d


def _rows(f: RunFacts, stream: int, expected: int) -> np.ndarray:
    rows = f.block_rows(stream)
    rows = rows[rows[:, 0] < expected]
    return rows[np.lexsort((rows[:, 0], rows[:, 1]))]


def _one(f: RunFacts, sid: int, cls: np.ndarray, never: _Never, expected: int,
         totals: dict[int, int]) -> tuple[StreamAccount, list[str]]:
    st = f.state
    info = st.streams.get(sid)
    name, unit, p = (info.name, info.unit, info.period_us) if info else (f"stream {sid}", "", 0)
    rows = _rows(f, sid, expected)
    problems: list[str] = []
    samples = dict.fromkeys(TERMS, 0)
    frames = dict.fromkeys(TERMS[:3], 0)
    for k, term in enumerate(TERMS[:3]):
        sel = cls[rows[:, 0]] == k
        samples[term] = int(rows[sel, 2].sum())
        frames[term] = int(np.count_nonzero(sel))
    obtained = int(rows[:, 2].sum())
    holes: list[tuple[int, int, int]] = []  # (samples, first seq, last seq) never obtained around
    if rows.size and p:
        gaps = rows[1:, 1] - (rows[:-1, 1] + rows[:-1, 2] * p)
        for i in np.flatnonzero(gaps).tolist():
            g = int(gaps[i])
            if g < 0 or g % p:
                problems.append(f"{name}: frames at seq {rows[i, 0]} and {rows[i + 1, 0]} are "
                                f"{g} us apart on the sample grid (not whole samples)")
                continue
            a, b = sorted((int(rows[i, 0]), int(rows[i + 1, 0])))
            holes.append((g // p, a + 1, b - 1))
    interior = sum(h for h, _, _ in holes)
    known = sid in totals
    total = totals[sid] if known else obtained + interior
    rest = total - obtained - interior
    head = 0
    if rest < 0:
        problems.append(f"{name}: {obtained + interior} samples on the grid but END says {total}")
    elif rest:
        ends, head = _ends(f, rows, p, rest, expected, never)
        holes += ends
    per_frame = int(rows[:, 2].max()) if rows.size else 0
    missing_est = 0
    for h, lo, hi in holes:
        lost, dropped = never.between(lo, hi)
        if lost + dropped == 0:
            problems.append(f"{name}: {h} samples missing between seq {lo - 1} and {hi + 1} "
                            "where no frame is missing")
        lo_part, dr_part = _split(h, lost, dropped)
        samples["lost"] += lo_part
        samples["dropped_board"] += dr_part
        missing_est += -(-h // per_frame) if per_frame else 0
    frames["missing_est"] = missing_est
    start = int(rows[0, 1]) - head * p if rows.size else None
    acc = StreamAccount(sid, name, unit, p, total, samples, frames, known, start)
    if known and not acc.closes and rest >= 0:
        problems.append(f"{name}: samples do not close ({total} expected, {sum(samples.values())} "
                        "accounted)")
    return acc, problems


def _ends(f: RunFacts, rows: np.ndarray, p: int, rest: int, expected: int,
          never: _Never) -> tuple[list[tuple[int, int, int]], int]:
    """Head and tail holes holding `rest` samples missing before the first or after
    the last obtained frame of the stream; and the head's samples."""
    if not rows.size:
        return [(rest, 0, expected - 1)], 0
    first_seq, last_seq = int(rows[:, 0].min()), int(rows[:, 0].max())
    head_possible = sum(never.between(0, first_seq - 1)) > 0
    tail_possible = sum(never.between(last_seq + 1, expected - 1)) > 0
    if head_possible and tail_possible and f.end is not None and p:
        end_of_grid = int(rows[-1, 1] + rows[-1, 2] * p)
        tail = min(rest, max(0, (f.end["tick"] - end_of_grid) // p))
    else:
        tail = rest if tail_possible or not head_possible else 0
    out = []
    if rest - tail:
        out.append((rest - tail, 0, first_seq - 1))
    if tail:
        out.append((tail, last_seq + 1, expected - 1))
    return out, rest - tail


def account_streams(f: RunFacts, cls: np.ndarray, expected: int
                    ) -> tuple[list[StreamAccount], list[str]]:
    totals = {t["stream"]: t["samples"] for t in f.end["totals"]} if f.end else {}
    never = _Never(cls)
    ids = sorted(set(f.state.streams) | set(totals) | set(f.blocks))
    out, problems = [], []
    for sid in ids:
        acc, p = _one(f, sid, cls, never, expected, totals)
        out.append(acc)
        problems += p
    return out, problems
