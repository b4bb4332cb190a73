"""Frames that pass their CRC but are wrong, and other edges of the decoder."""

from __future__ import annotations

from collect_sink import CollectSink, collect

from slipless.decode.decoder import Decoder
from slipless.protocol import wire

H = ord("h")
CAP = (0, H, 0, 1000, 1.0, 0.0, "cap", "V")


def raw_frame(enc: wire.Encoder, kind: int, payload: bytes) -> bytes:
    off = enc.begin(kind)
    enc.body[off : off + len(payload)] = payload
    return enc.frame(enc.finish(off + len(payload)))


def run(frames: list[bytes]) -> tuple[Decoder, CollectSink]:
    return collect([b"".join(frames)])


def desc(enc: wire.Encoder, streams, n=None) -> bytes:
    return enc.frame(enc.descriptor(0, 1_000_000, (1, 0, 0), 5000,
                                    len(streams) if n is None else n, streams))


def test_short_and_ragged_samples_are_malformed() -> None:
    enc = wire.Encoder(1, 1)
    frames = [desc(enc, [CAP]), raw_frame(enc, wire.SAMPLES, b"\x00\x01"),
              raw_frame(enc, wire.SAMPLES, b"\x00" + (10).to_bytes(4, "little") + b"\x01\x02\x03"),
              enc.frame(enc.samples(0, 20, H, [7]))]
    dec, sink = run(frames)
    assert dec.counters.malformed == 2
    assert [r[5] for r in sink.samples_rows] == [7]


def test_unknown_sample_type_is_undecodable_not_fatal() -> None:
    enc = wire.Encoder(1, 1)
    frames = [desc(enc, [(3, ord("q"), 0, 1000, 1.0, 0.0, "x", "V"), CAP]),
              raw_frame(enc, wire.SAMPLES, b"\x03" + bytes(4) + bytes(16)),
              enc.frame(enc.samples(0, 5, H, [1]))]
    dec, sink = run(frames)
    assert dec.runs[(1, 1)].undecodable == 1
    assert [r[5] for r in sink.samples_rows] == [1]


def test_split_descriptor_holds_samples_of_later_part() -> None:
    enc = wire.Encoder(1, 1)
    coil = (1, H, 0, 1000, 1.0, 0.0, "coil", "A")
    frames = [desc(enc, [CAP], n=2), enc.frame(enc.samples(1, 100, H, [5, 6])),
              desc(enc, [coil], n=2)]
    dec, sink = run(frames)
    assert [(r[2], r[4], r[5]) for r in sink.samples_rows] == [(1, 100, 5), (1, 1100, 6)]
    assert dec.runs[(1, 1)].undecodable == 0


def test_overlong_text_is_malformed() -> None:
    enc = wire.Encoder(1, 1)
    body = bytearray(wire.DESCRIPTOR_FIXED_SIZE + wire.STREAM_ENTRY_SIZE + 2 + 40)
    import struct

    struct.pack_into(wire.DESCRIPTOR_FIXED, body, 0, 0, 1_000_000, 1, 0, 0, 5000, 1)
    struct.pack_into(wire.STREAM_ENTRY, body, wire.DESCRIPTOR_FIXED_SIZE, 0, H, 0, 1000, 1.0, 0.0)
    at = wire.DESCRIPTOR_FIXED_SIZE + wire.STREAM_ENTRY_SIZE
    body[at] = 40
    body[at + 1 : at + 41] = b"n" * 40
    body[at + 41] = 0
    dec, _ = run([raw_frame(enc, wire.DESCRIPTOR, bytes(body))])
    assert dec.counters.malformed == 1 and not dec.runs[(1, 1)].described


def test_late_frame_inside_gap_keeps_corrupt_count() -> None:
    enc = wire.Encoder(1, 1)
    frames = [desc(enc, [CAP])] + [enc.frame(enc.samples(0, k * 1000, H, [k])) for k in range(5)]
    damaged = bytearray(frames[2])
    damaged[5] ^= 0x10
    stream = frames[0] + frames[1] + bytes(damaged) + frames[4] + frames[5] + frames[3]
    sink = CollectSink()
    dec = Decoder(sink)
    dec.feed(stream)
    dec.finish()
    fates = sorted(r[2:] for r in sink.frames)
    # seq 2 was damaged, seq 3 arrived late (a resend), nothing else is lost
    assert fates == [(0, "received"), (1, "received"), (2, "corrupt"), (3, "received"),
                     (4, "received"), (5, "received")]


def test_sync_reply_is_a_tick_anchor() -> None:
    enc = wire.Encoder(1, 1)
    frames = [desc(enc, [CAP])]
    enc.seq = 2000  # far from the descriptor: needs a nearer anchor
    frames += [enc.frame(enc.sync(1, 123, (5 << 32) + 10, (5 << 32) + 20)),
               enc.frame(enc.samples(0, (5 << 32) + 30, H, [1]))]
    dec, sink = run(frames)
    assert sink.samples_rows[0][4] == (5 << 32) + 30
    assert dec.runs[(1, 1)].ticks_uncertain == 0
