"""Fuzz figures for `make bench`: random corruptions of valid frames in bulk.

Valid frames (the simulated board's mix) are laid end to end, most of them
damaged in place (bit flips, a burst of random bytes, a truncation that zeroes
the rest of the frame), and the stream is read by the laptop's deframer
(FastDeframer, held equal to the reference wire.Deframer by the property tests).
Damage stays inside each frame's COBS bytes, so every frame left untouched is
still preceded by a delimiter and must come back.

  fuzz_cases             damaged frames read (each one a corruption case)
  fuzz_false_accepts     frames accepted whose bytes were damaged (goal 0)
  fuzz_intact_recovered  untouched frames next to a damaged one that came back (goal 1.0)

    python tests/bench/bench_fuzz.py [CASES]     # prints one JSON line
"""

from __future__ import annotations

import json
import sys
import time

import numpy as np

from slipless.decode.deframe import FastDeframer
from slipless.sim.board import SimConfig, simulate

BATCH = 200_000  # frames per batch at most (memory: about 40 MB of stream)
P_DAMAGE = 0.9


def _pool() -> list[bytes]:
    return [bytes(f) for _, f in simulate(SimConfig(seconds=30, seed=7))]


def _spans(rng: np.random.Generator, starts: np.ndarray, first: np.ndarray,
           length: np.ndarray) -> np.ndarray:
    """Byte positions starts+first .. +length-1 for every selected frame, flattened."""
    rep = np.repeat(starts + first, length)
    off = np.arange(len(rep)) - np.repeat(np.cumsum(length) - length, length)
    return rep + off


def batch(rng: np.random.Generator, pool: list[bytes], plens: np.ndarray,
          originals: list[bytes], n: int) -> tuple[int, int, int, int]:
    """-> (cases, false accepts, intact next to damage, of those recovered)."""
    idx = rng.integers(len(pool), size=n)
    lens = plens[idx]
    starts = np.concatenate(([0], np.cumsum(lens)[:-1]))
    clean = np.frombuffer(b"".join(pool[i] for i in idx), np.uint8)
    data = clean.copy()
    hit = rng.random(n) < P_DAMAGE
    kind = rng.integers(3, size=n)
    body = lens - 1  # COBS bytes, delimiter excluded
    sel = hit & (kind == 0)  # 1..3 bit flips
    for k in range(3):
        s = sel & (rng.integers(3, size=n) >= k) if k else sel
        pos = starts[s] + (rng.random(s.sum()) * body[s]).astype(np.int64)
        np.bitwise_xor.at(data, pos, (1 << rng.integers(8, size=len(pos))).astype(np.uint8))
    sel = hit & (kind == 1)  # a burst of 1..16 random bytes
    first = (rng.random(sel.sum()) * body[sel]).astype(np.int64)
    length = np.minimum(rng.integers(1, 17, size=sel.sum()), body[sel] - first)
    pos = _spans(rng, starts[sel], first, length)
    data[pos] = rng.integers(256, size=len(pos), dtype=np.uint8)
    sel = hit & (kind == 2)  # truncation: the rest of the frame is idle line
    first = 1 + (rng.random(sel.sum()) * (body[sel] - 1)).astype(np.int64)
    pos = _spans(rng, starts[sel], first, body[sel] - first)
    data[pos] = 0
    changed = np.add.reduceat((data != clean).astype(np.int64), starts) > 0
    got = FastDeframer().feed(data.tobytes())
    false = 0
    back = np.zeros(n, bool)
    for b, start, _ in got:
        i = int(np.searchsorted(starts, start, side="right")) - 1
        if not changed[i] and start == starts[i] and b == originals[idx[i]]:
            back[i] = True
        else:
            false += 1
    near = np.zeros(n, bool)
    near[1:] |= changed[:-1]
    near[:-1] |= changed[1:]
    near &= ~changed
    return int(changed.sum()), false, int(near.sum()), int((back & near).sum())


def run(cases: int = 10_000_000, seed: int = 1) -> dict[str, float]:
    rng = np.random.default_rng(seed)
    pool = _pool()
    plens = np.array([len(f) for f in pool], np.int64)
    originals = [FastDeframer().feed(f)[0][0] for f in pool]
    total = false = near = back = 0
    t0 = time.perf_counter()
    while total < cases:
        n = min(BATCH, int((cases - total) / P_DAMAGE) + 1000)
        c, f, nn, b = batch(rng, pool, plens, originals, n)
        total, false, near, back = total + c, false + f, near + nn, back + b
    return {"fuzz_cases": total, "fuzz_false_accepts": false,
            "fuzz_intact_recovered": back / near if near else 1.0,
            "fuzz_intact_next_to_damage": near, "fuzz_seconds": round(time.perf_counter() - t0, 1)}


if __name__ == "__main__":
    print(json.dumps(run(int(sys.argv[1]) if len(sys.argv) > 1 else 10_000_000)))
