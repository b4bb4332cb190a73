"""Deframing under damage: both deframers agree, never accept a damaged frame,
and recover every frame whose bytes arrived intact."""

from __future__ import annotations

import random

from hypothesis import given, settings
from hypothesis import strategies as st

from slipless.decode.deframe import FastDeframer
from slipless.protocol import wire


def make_frames(rng: random.Random, n: int) -> list[bytes]:
    enc = wire.Encoder(rng.randrange(1, 65535), rng.randrange(65535))
    out = []
    for _ in range(n):
        k = rng.randrange(3)
        if k == 0:
            vals = [rng.choice([0, 0, 1, -1, 255, rng.randrange(-32768, 32768)])
                    for _ in range(rng.randrange(1, 113))]
            out.append(enc.frame(enc.samples(rng.randrange(4), rng.randrange(1 << 32),
                                             ord("h"), vals)))
        elif k == 1:
            out.append(enc.frame(enc.events([(rng.randrange(1 << 32), 1, rng.choice([-1, 0, 1]))])))
        else:
            out.append(enc.frame(enc.status(rng.randrange(1 << 40), 3700, -100, 1, 2, 3, 4, 5)))
    return out


def damage(rng: random.Random, frames: list[bytes]) -> tuple[bytes, set[int]]:
    """Damage some frames; return the stream and the indexes of frames left intact
    (their bytes, their own delimiter and the delimiter before them all arrived)."""
    pieces = [bytearray(f) for f in frames]
    touched: set[int] = set()
    for i, f in enumerate(pieces):
        r = rng.random()
        if r < 0.1:  # flip a bit anywhere, delimiter included
            j = rng.randrange(len(f) * 8)
            f[j // 8] ^= 1 << (j % 8)
            touched.add(i)
        elif r < 0.15:  # lose a run of bytes
            a = rng.randrange(len(f))
            del f[a : a + rng.randrange(1, 30)]
            touched.add(i)
        elif r < 0.2:  # junk after the frame
            f += bytes(rng.randrange(256) for _ in range(rng.randrange(1, 40)))
            touched.add(i)
    intact = set()
    for i in range(len(pieces)):
        if i in touched or (i > 0 and i - 1 in touched):
            continue  # a damaged neighbour may have eaten our leading delimiter
        intact.add(i)
    return b"".join(pieces), intact


def chunked(rng: random.Random, data: bytes) -> list[bytes]:
    out, i = [], 0
    while i < len(data):
        n = rng.choice([1, 20, 244, rng.randrange(1, 600)])
        out.append(data[i : i + n])
        i += n
    return out


@settings(max_examples=200, deadline=None)
@given(st.integers(0, 2**32))
def test_damage_never_accepted_and_intact_recovered(seed: int) -> None:
    rng = random.Random(seed)
    frames = make_frames(rng, rng.randrange(1, 40))
    bodies = {wire.cobs_decode(f[:-1])[:-4]: i for i, f in enumerate(frames)}
    data, intact = damage(rng, frames)
    data = b"\x00" + data  # the reader is in sync from the start
    fast, ref = FastDeframer(), wire.Deframer()
    got_fast = [b for c in chunked(rng, data) for b, _, _ in fast.feed(c)]
    got_ref = [b for c in chunked(rng, data) for b in ref.feed(c)]
    assert got_fast == got_ref
    for name in ("frames", "corrupt", "corrupt_bytes", "overlong", "skipped"):
        assert getattr(fast, name) == getattr(ref, name), name
    for b in got_fast:
        assert b in bodies  # CRC-32: a damaged frame passing is a 2**-32 event
    recovered = {bodies[b] for b in got_fast}
    assert intact <= recovered


@settings(max_examples=100, deadline=None)
@given(st.binary(max_size=3000))
def test_random_bytes_bounded_and_quiet(data: bytes) -> None:
    fast = FastDeframer()
    out = fast.feed(data)
    fast.close()
    assert out == [] or all(len(b) <= wire.MAX_BODY for b, _, _ in out)
    assert len(fast._tail) <= wire.MAX_ENCODED


def test_late_join_is_not_damage() -> None:
    frames = make_frames(random.Random(1), 5)
    data = b"".join(frames)[17:]  # the reader starts inside the first frame
    fast = FastDeframer()
    got = fast.feed(data)
    assert len(got) == 4 and fast.corrupt == 0 and fast.skipped == len(frames[0]) - 17


def test_offsets_point_at_frame_starts() -> None:
    frames = make_frames(random.Random(2), 6)
    data = b"".join(frames)
    fast = FastDeframer()
    got = fast.feed(data[:300]) + fast.feed(data[300:])
    starts = [sum(len(f) for f in frames[:i]) for i in range(len(frames))]
    assert [off for _, off, _ in got] == starts
