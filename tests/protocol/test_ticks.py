"""The tick rule: 32-bit frame ticks rebuilt into 64-bit board time."""

from __future__ import annotations

import random

from collect_sink import CollectSink
from hypothesis import given
from hypothesis import strategies as st

from slipless.decode.decoder import Decoder
from slipless.protocol import wire

WRAP = 1 << 32


@given(st.integers(0, 1 << 50), st.integers(-(1 << 31) + 1, (1 << 31) - 1))
def test_unwrap_nearest(ref: int, delta: int) -> None:
    true = max(0, ref + delta)
    assert wire.unwrap_tick(true & 0xFFFFFFFF, ref) == true


def _day_run(seed: int, lossy: bool):
    """24 h of sparse frames: 1 sample frame every 2 s, status every 5 s (max gap)."""
    rng = random.Random(seed)
    enc = wire.Encoder(9, 1)
    cap = (0, ord("h"), 0, 1000, 1.0, 0.0, "x", "V")
    out = [enc.frame(enc.descriptor(0, 1_000_000, (1, 0, 0), 5000, 1, [cap]))]
    truth = []
    t = 0
    while t < 24 * 3600 * 1_000_000:
        t += 2_000_000
        if t % 5_000_000 < 2_000_000:
            out.append(enc.frame(enc.status(t, 3700, 2000, 1000, 1, 0, 0, 10)))
        seq = enc.seq
        out.append(enc.frame(enc.samples(0, t, ord("h"), [seq % 1000])))
        truth.append((seq, t))
    if lossy:  # lose long stretches (up to 2 h) so the hold-for-anchor path runs
        kept, i = [out[0]], 1
        while i < len(out):
            if rng.random() < 0.001:
                i += rng.randrange(100, 3600)
            else:
                kept.append(out[i])
                i += 1
        out = kept
    return b"".join(out), dict(truth)


def test_day_long_run_resolves_every_tick() -> None:
    # MicroPython's ticks wrap at 2**30 us (MicroPython docs, time.ticks_diff); the
    # board extends them (firmware/clock.py) and frames carry the low 32 bits:
    # a day is about 20 wraps of the frame tick.
    for lossy in (False, True):
        data, truth = _day_run(5, lossy)
        sink = CollectSink()
        dec = Decoder(sink)
        for i in range(0, len(data), 4096):
            dec.feed(data[i : i + 4096])
        dec.finish()
        got = {seq: tick for _, _, _, seq, tick, _ in sink.samples_rows}
        assert got, lossy
        assert all(truth[s] == t for s, t in got.items())
        assert max(got.values()) > 20 * WRAP
        run = dec.runs[(9, 1)]
        assert run.ticks_uncertain == 0 and run.undecodable == 0
