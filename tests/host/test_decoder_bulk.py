"""The decoder's block path (FastDeframer.feed_block, Decoder._feed_block) against
the reference: protocol/wire.py's Deframer fed byte by byte and every frame
decoded on its own by Decoder._frame. Random runs of every frame kind, damaged
and chunked at random, must give the same sink calls (every argument), the
same counters and the same per-run state; so must the declarative and struct
readings of DESCRIPTOR bodies. The reference is the project's own per-frame
path (itself pinned by the golden vectors of protocol/SPEC.md section 7).
"""

from __future__ import annotations

import random
import struct
import zlib
from typing import Any

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from slipless.decode import decoder as decoder_mod
from slipless.decode import frames
from slipless.decode.decoder import (
    STREAM,
    Arrival,
    Decoder,
    NullSink,
    RunState,
    StreamInfo,
    Tee,
)
from slipless.decode.deframe import FastDeframer
from slipless.protocol import wire
from slipless.sim.board import SimConfig, simulate
from slipless.sim.channel import ChannelConfig, ChannelLog, transmit

TYPES = [ord(c) for c in "bBhHiIf"]


class RefDeframer:
    """wire.Deframer fed up to one delimiter at a time, so each frame's stream
    offset and the damage count when it ended are known; close() counts an
    unterminated tail as SPEC section 4 rule 5 says."""

    def __init__(self) -> None:
        self.ref = wire.Deframer()
        self.pos = 0
        self.closed_bytes = 0
        self.closed_skipped = 0

    def __getattr__(self, name: str) -> int:
        value = getattr(self.ref, name)
        if name == "corrupt_bytes":
            return int(value) + self.closed_bytes
        if name == "skipped":
            return int(value) + self.closed_skipped
        return int(value)

    @property
    def damaged(self) -> int:
        return int(self.ref.corrupt + self.ref.overlong)

    def feed(self, data: bytes) -> list[tuple[bytes, int, int]]:
        out = []
        start = 0
        while start < len(data):
            end = data.find(b"\x00", start)
            end = len(data) if end < 0 else end + 1
            held = self.ref._n  # bytes of the segment that came in earlier pieces
            got = self.ref.feed(data[start:end])
            if got:  # the frame that ends at this delimiter
                out.append((got[0], self.pos + start - held, self.damaged))
            start = end
        self.pos += len(data)
        return out

    def close(self) -> int:
        n = self.ref._n
        if self.ref._synced:
            self.closed_bytes += n
        else:
            self.closed_skipped += n
        self.ref._n = 0
        return n


class RefDecoder(Decoder):
    """Every frame through _frame, in arrival order: no hot path, no blocks."""

    _deframer_type = RefDeframer  # type: ignore[assignment]

    def feed(self, data: bytes, arrival: Arrival = STREAM) -> None:
        deframer, base = self._take_input(data, arrival)
        for body, offset, damaged in deframer.feed(data):
            self._damage_now = base + damaged
            self._frame(body, offset)
        self._unflushed += len(data)
        if self._unflushed >= self.flush_bytes:
            self._unflushed = 0
            self._flush()


def _info(info: StreamInfo) -> tuple[Any, ...]:
    return (info.stream, info.type, info.flags, info.period_us, info.scale, info.offset,
            info.name, info.unit)


class Rows:
    """Every sample handed over, per run and stream in order: seq, tick, the
    value's bytes (a NaN equals itself that way) and the description it had."""

    def __init__(self) -> None:
        self.parts: dict[tuple[Any, ...], list[tuple[Any, ...]]] = {}

    def add(self, run: RunState, info: StreamInfo, seq: np.ndarray, tick: np.ndarray,
            raw: np.ndarray) -> None:
        assert seq.dtype == np.int64 and tick.dtype == np.int64 and raw.dtype == info.dtype
        assert len(seq) == len(tick) == len(raw)
        self.parts.setdefault((run.key, info.stream), []).append(
            (_info(info), seq.copy(), tick.copy(), raw.tobytes()))

    def merged(self) -> dict[tuple[Any, ...], tuple[Any, ...]]:
        out = {}
        for key, parts in self.parts.items():
            infos: list[list[Any]] = []
            for info, seq, _, _ in parts:
                if infos and infos[-1][0] == info:
                    infos[-1][1] += len(seq)
                else:
                    infos.append([info, len(seq)])
            out[key] = (infos, np.concatenate([p[1] for p in parts]).tolist(),
                        np.concatenate([p[2] for p in parts]).tolist(),
                        b"".join(p[3] for p in parts))
        return out

    def __len__(self) -> int:
        return sum(len(p[1]) for parts in self.parts.values() for p in parts)

    def __eq__(self, other: object) -> bool:
        return isinstance(other, Rows) and self.merged() == other.merged()


class Recorder(NullSink):
    """Every call with every argument, as plain values, in order."""

    def __init__(self) -> None:
        self.calls: list[tuple[Any, ...]] = []
        self.rows = Rows()

    def descriptor(self, run: RunState) -> None:
        self.calls.append(("descriptor", run.key, sorted(map(_info, run.streams.values()))))

    def samples(self, run: RunState, info: StreamInfo, seq: np.ndarray, tick: np.ndarray,
                raw: np.ndarray) -> None:
        self.rows.add(run, info, seq, tick, raw)

    def event(self, run: RunState, seq: int, tick: int, code: int, value: int) -> None:
        self.calls.append(("event", run.key, seq, tick, code, value))

    def status(self, run: RunState, seq: int, fields: dict[str, Any]) -> None:
        self.calls.append(("status", run.key, seq, sorted(fields.items())))

    def reply(self, run: RunState, seq: int, kind: int, fields: dict[str, Any]) -> None:
        self.calls.append(("reply", run.key, seq, kind, repr(sorted(fields.items()))))

    def frame(self, run: RunState, seq: int, kind: int, fate: str, offset: int, origin: str,
              arrival: Arrival) -> None:
        self.calls.append(("frame", run.key, seq, kind, fate, offset, origin, arrival))

    def timing(self, run: RunState, seq: int, kind: int, tick: int, arrival: Arrival) -> None:
        self.calls.append(("timing", run.key, seq, kind, tick, arrival))


class SamplesOnly(NullSink):
    """Takes samples only: the decoder skips frame() and timing() work for it."""

    def __init__(self) -> None:
        self.rows = Rows()

    def samples(self, run: RunState, info: StreamInfo, seq: np.ndarray, tick: np.ndarray,
                raw: np.ndarray) -> None:
        self.rows.add(run, info, seq, tick, raw)


class FramesForm(SamplesOnly):
    """Takes the samples in their frames' form (one seq, first tick and count a
    frame), made into rows here frame by frame, as SPEC 4 places a frame's samples:
    the reference decoder hands the same samples over as rows."""

    def sample_frames(self, run: RunState, info: StreamInfo, seqs: np.ndarray,
                      ticks: np.ndarray, counts: np.ndarray, raw: np.ndarray) -> None:
        assert len(seqs) == len(ticks) == len(counts) and int(counts.sum()) == len(raw)
        seq = [s for s, c in zip(seqs.tolist(), counts.tolist()) for _ in range(c)]
        tick = [t + i * info.period_us for t, c in zip(ticks.tolist(), counts.tolist())
                for i in range(c)]
        self.rows.add(run, info, np.array(seq, np.int64), np.array(tick, np.int64), raw)


class Stretches(Recorder):
    """Takes frames received in order in one call (received_frames): recorded as
    the frame() calls they stand for, so the calls equal the reference's."""

    def received_frames(self, run: RunState, seq0: int, offsets: np.ndarray, origin: str,
                        arrival: Arrival) -> None:
        for q, offset in enumerate(offsets.tolist()):
            self.frame(run, seq0 + q, wire.SAMPLES, "received", offset, origin, arrival)


class TeeOfRecorder(Tee):
    """A Tee holding a sink with frame() only: the Tee hands stretches to it frame by frame."""

    def __init__(self) -> None:
        super().__init__(Recorder())

    @property
    def calls(self) -> list[tuple[Any, ...]]:
        return self.sinks[0].calls

    @property
    def rows(self) -> Any:
        return self.sinks[0].rows


class Counting(NullSink):
    """Takes nothing: the decoder only counts samples."""

    def __init__(self) -> None:
        self.rows = Rows()


# ---- random runs ---------------------------------------------------------------
def _raw(enc: wire.Encoder, kind: int, payload: bytes, vk: int | None = None) -> bytes:
    off = enc.begin(kind)
    if vk is not None:
        enc.body[0] = vk
    enc.body[off : off + len(payload)] = payload
    return enc.frame(enc.finish(off + len(payload)))


class _Board:
    def __init__(self, rng: random.Random, board: int, run: int) -> None:
        self.enc = wire.Encoder(board, run, seq=rng.choice([0, 0, 5, 300]))
        # (past 2**61 the block path hands over to frames; from 2**62 anchors are malformed)
        self.tick = rng.choice([0, 1 << 20, (1 << 32) - 5000, 1 << 40, (1 << 61) - 5000,
                                (1 << 62) + 7])
        self.max_gap_ms = rng.choice([5000, 5000, 1, 60000])
        self.streams = [(sid, rng.choice(TYPES), rng.randrange(2), rng.choice([1000, 250, 7]),
                         rng.choice([1e-3, 0.5, 2.0]), 0.0, f"s{sid}", "V")
                        for sid in range(rng.randrange(1, 4))]

    def descriptor(self, rng: random.Random) -> list[bytes]:
        if rng.random() < 0.1:  # a stream redefined mid-run
            s = list(self.streams[0])
            s[1] = rng.choice(TYPES)
            self.streams[0] = tuple(s)
        streams = self.streams + ([(9, ord("q"), 0, 1000, 1.0, 0.0, "bad", "V")]
                                  if rng.random() < 0.1 else [])
        enc = self.enc
        if len(streams) > 1 and rng.random() < 0.3:  # split over two frames
            half = len(streams) // 2
            return [enc.frame(enc.descriptor(self.tick, 1_000_000, (1, 2, 3), self.max_gap_ms,
                                             len(streams), part))
                    for part in (streams[:half], streams[half:])]
        return [enc.frame(enc.descriptor(self.tick, 1_000_000, (1, 2, 3), self.max_gap_ms,
                                         len(streams), streams))]

    def samples(self, rng: random.Random) -> bytes:
        sid, code, _, period = self.streams[rng.randrange(len(self.streams))][:4]
        size = wire.SAMPLE_SIZES[code]
        if rng.random() < 0.7:
            n = wire.max_samples(code)
        else:
            n = rng.randrange(1, wire.max_samples(code) + 1)
        values = rng.randbytes(n * size)
        if rng.random() < 0.2:
            values = bytes(len(values))  # zeros: COBS at its busiest
        if rng.random() < 0.01:
            values = values[:-1] or b"\x01\x02\x03"  # values that do not fill whole items
        if rng.random() < 0.01:
            sid = 7  # a stream nobody described
        frame = _raw(self.enc, wire.SAMPLES,
                     struct.pack("<BI", sid, self.tick & 0xFFFFFFFF) + values)
        self.tick += n * period
        return frame

    def other(self, rng: random.Random) -> bytes:
        enc, tick = self.enc, self.tick
        k = rng.randrange(9)
        if k == 0:
            return enc.frame(enc.status(tick, 3900, -5, 1, 2, 3, 4, 5))
        if k == 1:
            return enc.frame(enc.events([(tick + rng.randrange(-5000, 5000), rng.randrange(1, 9),
                                          rng.randrange(-3, 3)) for _ in range(rng.randrange(1, 4))]))
        if k == 2:
            return enc.frame(enc.sync(1, 2, max(0, tick - 10), tick))
        if k == 3:
            return enc.frame(enc.ack(3, 1))
        if k == 4:
            return enc.frame(enc.end(tick, 1, [(0, 10)]))
        if k == 5:
            return _raw(enc, 11, b"newer kind")
        if k == 6:
            return _raw(enc, wire.SAMPLES, b"\x00" * 20, vk=(2 << 4) | wire.SAMPLES)
        if k == 7:
            return enc.frame(enc.ping(4, 99))
        return _raw(enc, wire.STATUS, b"\x01\x02")  # malformed


def build_stream(rng: random.Random) -> list[tuple[bytes, int]]:
    """(frame bytes, source) in the order they are sent: two boards at most,
    each on its own source or sharing one; gaps, resends, duplicates, wraps."""
    boards = [_Board(rng, b + 1, rng.randrange(1, 4)) for b in range(rng.choice([1, 1, 2]))]
    shared = rng.random() < 0.5
    sent: list[tuple[bytes, int]] = []
    for i, b in enumerate(boards):
        if rng.random() < 0.8:
            sent += [(f, 0 if shared else i) for f in b.descriptor(rng)]
    for _ in range(rng.randrange(20, 120)):
        i = rng.randrange(len(boards))
        b, src = boards[i], 0 if shared else i
        r = rng.random()
        if r < 0.75:  # a burst: the long in-order stretches a block path takes together
            frame = [b.samples(rng) for _ in range(rng.choice([1, 1, 1, 1, 1, 5, 60, 200]))]
        elif r < 0.8:
            frame = b.descriptor(rng)
        elif r < 0.9:
            frame = [b.other(rng)]
        elif r < 0.93 and sent:
            frame = [sent[rng.randrange(len(sent))][0]]  # a resend or duplicate
        elif r < 0.96:
            b.enc.seq += rng.choice([1, 3, 500, 5000])  # frames never sent
            continue
        else:
            b.tick += rng.choice([1 << 31, 1 << 33, 3_000_000_000])  # a long silence
            continue
        sent += [(f, src) for f in frame]
    if rng.random() < 0.2:  # everything again later, as a mirror read after the link
        sent += sent[: rng.randrange(1, len(sent) + 1)]
    return sent


def damage(rng: random.Random, data: bytes) -> bytes:
    out = bytearray(data)
    for _ in range(rng.choice([0, 0, 1, 3, 10])):
        i = rng.randrange(len(out))
        r = rng.random()
        if r < 0.5:
            out[i] ^= 1 << rng.randrange(8)
        elif r < 0.7:
            del out[i : i + rng.randrange(1, 300)]
        elif r < 0.85:
            out[i:i] = rng.randbytes(rng.randrange(1, 300))
        else:
            out[i : i + 1] = b"\x00"
        if not out:
            out = bytearray(b"\x01")
    if rng.random() < 0.2:
        out[:0] = rng.randbytes(rng.randrange(1, 200))  # the reader joins mid-frame
    return bytes(out)


def chunks(rng: random.Random, data: bytes) -> list[bytes]:
    out, i = [], 0
    while i < len(data):
        n = rng.choice([1, 20, 244, rng.randrange(1, 3000), rng.randrange(1, 40000),
                        rng.randrange(1, 400_000), len(data), len(data)])
        out.append(data[i : i + n])
        i += n
    return out


def run_both(rng: random.Random, sink_type: type) -> None:
    sent = build_stream(rng)
    by_source: dict[int, bytes] = {}
    for f, src in sent:
        by_source[src] = by_source.get(src, b"") + f
    timed = rng.random() < 0.5
    queues: list[list[tuple[bytes | None, Arrival]]] = []
    for src, data in by_source.items():
        queue: list[tuple[bytes | None, Arrival]] = []
        for c in chunks(rng, damage(rng, data)):
            mono = rng.randrange(1 << 40) if timed else -1
            queue.append((c, Arrival(src, mono, mono + 5 if timed else -1,
                                     rng.choice(["radio", "mirror", "stream"]))))
            if rng.random() < 0.02:
                queue.append((None, Arrival(src)))
        queues.append(queue[::-1])
    pieces = []
    while any(queues):  # sources interleaved, each in its own order
        pieces.append(rng.choice([q for q in queues if q]).pop())
    flush = rng.choice([0, 0, 1000, 1 << 16])
    decs = [RefDecoder(sink_type(), flush), Decoder(sink_type(), flush)]
    for data, where in pieces:
        for d in decs:
            if data is None:
                d.reset_source(where.source)
            else:
                d.feed(data, where)
        if rng.random() < 0.01:
            for d in decs:
                d.new_input()
    for d in decs:
        d.finish()
    ref, fast = decs
    assert fast.counters == ref.counters
    assert fast.runs == ref.runs
    assert fast.sink.rows == ref.sink.rows
    assert getattr(fast.sink, "calls", None) == getattr(ref.sink, "calls", None)


@settings(max_examples=60, deadline=None)
@given(st.integers(0, 2**32), st.sampled_from([Recorder, SamplesOnly, FramesForm, Counting,
                                              Stretches, TeeOfRecorder]))
def test_block_path_equals_per_frame_reference(seed: int, sink_type: type) -> None:
    """Blocks and sample pieces small enough that short streams cross them often."""
    rng = random.Random(seed)
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(decoder_mod, "BULK_BYTES", rng.choice([1, 300]))
        mp.setattr(decoder_mod, "BLOCK_BYTES", rng.choice([257, 700, 5000, 1 << 16]))
        mp.setattr(decoder_mod, "EMIT_SAMPLES", rng.choice([1, 300]))
        run_both(rng, sink_type)


@settings(max_examples=20, deadline=None)
@given(st.integers(0, 2**32), st.sampled_from([Recorder, SamplesOnly, FramesForm, Stretches]))
def test_default_sizes_equal_reference(seed: int, sink_type: type) -> None:
    """The shipped thresholds, on streams long enough for real blocks."""
    run_both(random.Random(seed), sink_type)


def test_simulated_board_over_damaging_link() -> None:
    """A board's own frames (sim) through a lossy link, read in 1 MiB and in
    notification-sized chunks: the same records as the reference."""
    stream = b"".join(transmit((f for _, f in simulate(SimConfig(seconds=20, seed=5))),
                               ChannelConfig(seed=6, drop_chunk=0.02, flip_bit=0.02),
                               ChannelLog()))
    results = []
    for dec, size in ((RefDecoder(Recorder()), len(stream)), (Decoder(Recorder()), 1 << 20),
                      (Decoder(Recorder()), 244), (Decoder(Recorder()), 50_000)):
        for i in range(0, len(stream), size):
            dec.feed(stream[i : i + size], Arrival(0, 7, 9, "radio"))
        dec.finish()
        results.append((dec.counters, dec.runs, dec.sink.rows, dec.sink.calls))
    assert results[0][0].corrupt > 0 and len(results[0][2]) > 10_000
    assert all(r == results[0] for r in results[1:])


# ---- deframer blocks -------------------------------------------------------------
def _frames(rng: random.Random) -> bytes:
    return b"".join(f for f, _ in build_stream(rng))


@settings(max_examples=120, deadline=None)
@given(st.integers(0, 2**32))
def test_feed_block_equals_reference_deframer(seed: int) -> None:
    """feed_block: the same bodies, offsets, damage counts and counters as
    wire.Deframer, whatever the chunking and damage."""
    rng = random.Random(seed)
    data = damage(rng, _frames(rng))
    if rng.random() < 0.1:
        data = data.replace(b"\x00", b"\x01", rng.randrange(1, 5))  # delimiters lost: overlong
    ref, fast = RefDeframer(), FastDeframer()
    want = ref.feed(data)
    got = []
    for c in chunks(rng, data):
        block = fast.feed_block(c) if rng.random() < 0.8 else None
        if block is None:
            got += [(bytes(b), o, d) for b, o, d in fast.feed(c)]
            continue
        if block.first is not None:
            got.append(block.first)
        got += [(block.body(i), int(block.offsets[i]), int(block.damaged[i]))
                for i in range(len(block))]
    ref.close()
    fast.close()
    assert got == want
    for name in ("frames", "corrupt", "corrupt_bytes", "overlong", "skipped"):
        assert getattr(fast, name) == getattr(ref, name), name


def test_glued_decoding_rejects_what_alone_fails() -> None:
    """Segments decoded glued together: a segment whose block chain overruns its
    end, or whose 0xFF block would swallow the next one, is found and refused
    while its neighbours are kept (checked against wire.cobs_decode alone)."""
    good = [wire.cobs_encode(bytes([1, 2, 0, 3]) * 5) for _ in range(40)]
    bad = [bytes([0x30]) + b"\x01" * 15, bytes([0xFF]) + b"\x05" * 20]
    for b in bad:
        with pytest.raises(ValueError):
            wire.cobs_decode(b)
    segs = good[:10] + [bad[0]] + good[10:30] + [bad[1]] + good[30:]
    packed = b"".join(segs)
    at = np.cumsum([0] + [len(s) for s in segs[:-1]])
    dec_at = np.full(len(segs), -1, dtype=np.int64)
    decoded = FastDeframer._decode_runs(packed, at, np.array([len(s) for s in segs]), dec_at)
    assert dec_at[10] == -1 and dec_at[31] == -1
    for k, s in enumerate(segs):
        if k not in (10, 31):
            assert decoded[dec_at[k] : dec_at[k] + len(s) - 1] == wire.cobs_decode(s)


# ---- DESCRIPTOR: struct reading against construct ---------------------------------
def _descriptor_payloads(rng: random.Random) -> list[bytes]:
    enc = wire.Encoder(1, 1)
    streams = [(rng.randrange(256), rng.randrange(256), rng.randrange(256), rng.randrange(1 << 32),
                rng.uniform(-1e6, 1e6), rng.uniform(-1, 1), "é" * rng.randrange(8),
                "u" * rng.randrange(12)) for _ in range(rng.randrange(0, 6))]
    body = wire.cobs_decode(enc.frame(enc.descriptor(rng.randrange(1 << 64), 1, (1, 2, 3), 5,
                                                     len(streams), streams))[:-1])[:-4]
    payload = body[wire.HEADER_SIZE :]
    out = [payload, payload[:-1], payload + b"\x00", payload[: rng.randrange(len(payload) + 1)]]
    mutated = bytearray(payload)
    for _ in range(3):
        mutated[rng.randrange(len(mutated))] = rng.randrange(256)  # lengths, bad UTF-8
    return out + [bytes(mutated), rng.randbytes(rng.randrange(60))]


def _nan_free(v: Any) -> Any:
    """v with each NaN as a marker: random float32 bits are NaN now and then,
    and NaN != NaN would fail two readings that agree."""
    if isinstance(v, float) and v != v:
        return "NaN"
    if isinstance(v, dict):
        return {k: _nan_free(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_nan_free(x) for x in v]
    return v


@settings(max_examples=300, deadline=None)
@given(st.integers(0, 2**32))
def test_descriptor_struct_reading_matches_construct(seed: int) -> None:
    for payload in _descriptor_payloads(random.Random(seed)):
        try:
            want = frames._plain(frames.Descriptor.parse(payload))
        except Exception:
            want = None
        assert _nan_free(frames._descriptor(payload)) == _nan_free(want)


def test_descriptor_readings_agree_on_a_nan_scale() -> None:
    # the case a random seed once found: a stream whose scale is a NaN float32
    rng = random.Random(84052952)
    payloads = _descriptor_payloads(rng)
    assert any(_nan_free(frames._descriptor(p)) != frames._descriptor(p) for p in payloads)
    for payload in payloads:
        try:
            want = frames._plain(frames.Descriptor.parse(payload))
        except Exception:
            want = None
        assert _nan_free(frames._descriptor(payload)) == _nan_free(want)


def test_crc_check_is_the_residue() -> None:
    """The block deframer checks zlib.crc32(body + crc_le) against the CRC-32
    residue 0x2144DF1C (CRC-32/ISO-HDLC as zlib computes it: xor-ed output)."""
    body = b"123456789"
    assert zlib.crc32(body) == 0xCBF43926  # the catalogue check value of CRC-32/ISO-HDLC
    assert zlib.crc32(body + zlib.crc32(body).to_bytes(4, "little")) == 0x2144DF1C


def test_run_sink_keeps_every_frame_of_a_stretch() -> None:
    """The Run's frames columns and loss facts hold the same rows whether frames
    come one by one (the reference decoder) or as received_frames stretches."""
    from slipless.align.collect import AlignSink
    from slipless.loss.collect import LossSink
    from slipless.run import RunSink

    data = b"".join(transmit((f for _, f in simulate(SimConfig(seconds=20, seed=3))),
                             ChannelConfig(seed=4, drop_chunk=0.01), ChannelLog()))
    got = []
    for dec_type in (RefDecoder, Decoder):
        sink = RunSink(LossSink(None), AlignSink(), None, hold=True)
        dec = dec_type(sink)
        dec.feed(data)
        dec.finish()
        frames = sink.frames.arrays()
        got.append({k: v.tolist() for k, v in frames.items()})
        got.append(sorted((k, [c.tolist() for c in f.copies.columns()])
                          for k, f in sink.loss.runs.items()))
    assert got[0] == got[2] and got[1] == got[3]
    assert len(got[0]["seq"]) > 100
