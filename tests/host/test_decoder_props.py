"""Decoder properties: chunking never changes the result; no input makes it raise."""

from __future__ import annotations

import random

from collect_sink import collect
from hypothesis import given, settings
from hypothesis import strategies as st

from slipless.sim.board import SimConfig, simulate
from slipless.sim.channel import ChannelConfig, ChannelLog, transmit

STREAM = b"".join(transmit((f for _, f in simulate(SimConfig(seconds=6, seed=3))),
                           ChannelConfig(seed=4, drop_chunk=0.05, flip_bit=0.05), ChannelLog()))


def decode(chunks):
    dec, sink = collect(chunks)
    return sink, dec


WHOLE, WHOLE_DEC = decode([STREAM])


@settings(max_examples=30, deadline=None)
@given(st.integers(0, 2**32))
def test_chunking_is_invisible(seed: int) -> None:
    rng = random.Random(seed)
    chunks, i = [], 0
    while i < len(STREAM):
        n = rng.choice([1, 2, 20, 244, rng.randrange(1, 5000)])
        chunks.append(STREAM[i : i + n])
        i += n
    sink, dec = decode(chunks)
    assert sorted(sink.samples_rows) == sorted(WHOLE.samples_rows)
    assert sorted(sink.frames) == sorted(WHOLE.frames)
    assert sink.events == WHOLE.events and sink.status_rows == WHOLE.status_rows
    assert dec.counters == WHOLE_DEC.counters


@settings(max_examples=200, deadline=None)
@given(st.binary(max_size=2000), st.integers(0, len(STREAM)), st.integers(0, 2**32))
def test_mutations_never_raise(junk: bytes, at: int, seed: int) -> None:
    rng = random.Random(seed)
    data = bytearray(STREAM[:at] + junk + STREAM[at:])
    for _ in range(rng.randrange(20)):
        data[rng.randrange(len(data))] = rng.randrange(256)
    sink, dec = decode([bytes(data)])
    # whatever came through, every accepted sample row came from the board
    assert set(sink.samples_rows) <= set(WHOLE.samples_rows) | _ALL_SENT


def _all_sent() -> set:
    stream = b"".join(f for _, f in simulate(SimConfig(seconds=6, seed=3)))
    sink, _ = decode([stream])
    return set(sink.samples_rows)


_ALL_SENT = _all_sent()
